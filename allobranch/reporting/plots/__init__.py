"""Figures drawn from tidy tables: each function takes ``ax`` (or ``axes``) and returns what it drew in.

Plot functions never compute statistics; they draw the tables the summary and comparison stages return.
The house style (:mod:`allobranch.reporting.style`) is applied only inside these functions.
"""

from __future__ import annotations

from allobranch.reporting.plots.diagnostics import plot_diagnostics
from allobranch.reporting.plots.exponents import plot_exponents, plot_naive_vs_model
from allobranch.reporting.plots.laws import plot_law_comparison
from allobranch.reporting.plots.ppc import plot_ppc_check
from allobranch.reporting.plots.ratio_plane import plot_ratio_plane

__all__ = [
    "plot_diagnostics",
    "plot_exponents",
    "plot_law_comparison",
    "plot_naive_vs_model",
    "plot_ppc_check",
    "plot_ratio_plane",
]
