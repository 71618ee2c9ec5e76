"""Planning a study by simulation: designs and simulated tables, verdict probabilities, calibration.

:mod:`~allobranch.planning.design` (:class:`Design`, :func:`simulate`), :mod:`~allobranch.planning.plan`
(:func:`plan_study`: how often a design reaches each verdict) and :mod:`~allobranch.planning.calibrate`
(:func:`calibrate`: simulation-based calibration of a model on a design). The repeated fits run through
:mod:`allobranch.engine` (local processes or a Dask cluster).
"""

from __future__ import annotations

from allobranch.lazy import lazy_getattr

_LAZY = {
    "Design": "allobranch.planning.design",
    "Simulation": "allobranch.planning.design",
    "simulate": "allobranch.planning.design",
    "plan_study": "allobranch.planning.plan",
    "PlanResult": "allobranch.planning.plan",
    "calibrate": "allobranch.planning.calibrate",
    "CalibrationResult": "allobranch.planning.calibrate",
}

__all__ = sorted(_LAZY)
# not cached: ``calibrate`` is also a sub-module's name
__getattr__ = lazy_getattr(__name__, _LAZY)
