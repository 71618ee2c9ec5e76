"""Public names imported on first use (allobranch.lazy)."""

from __future__ import annotations

import math

import pytest

import allobranch as ab
import allobranch.planning as planning


@pytest.mark.parametrize("package", [ab, planning])
def test_every_public_name_resolves_and_unknown_names_fail_like_python(package) -> None:
    for name in package.__all__:
        assert getattr(package, name) is not None
    with pytest.raises(AttributeError) as ours:
        package.no_such_name  # noqa: B018
    with pytest.raises(AttributeError) as python:
        math.no_such_name  # noqa: B018 - the interpreter's own message for a missing module attribute
    assert str(ours.value) == str(python.value).replace("'math'", f"'{package.__name__}'")


def test_a_public_name_does_not_hide_a_submodule_of_the_same_name() -> None:
    # planning's `calibrate` is both a public function and a sub-module: looking the function up must not
    # replace the sub-module in the package's namespace
    assert callable(planning.__getattr__("calibrate"))
    from allobranch.planning import calibrate as module

    assert hasattr(module, "RANK_DRAWS") and ab.calibrate is module.calibrate
