"""Validation of the law verdicts on simulated data with known truth (slow; run with --runslow).

The scenarios live in ``benchmarks/validate_laws.py`` (one definition for the script and these tests).
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "validate_laws.py"


@pytest.fixture(scope="module")
def validate():
    spec = importlib.util.spec_from_file_location("validate_laws", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.mark.slow
def test_three_taxa_get_their_own_laws(validate):
    out = validate.run_scenario("three_laws", seed=0)
    assert out.passed, out.verdicts


@pytest.mark.slow
def test_truth_between_laws_is_never_called_a_classic_law(validate):
    out = validate.run_scenario("between_laws", seed=0)
    assert out.passed, out.verdicts


@pytest.mark.slow
@pytest.mark.parametrize("seed", [0, 1])
def test_twelve_noisy_junctions_are_undecided(validate, seed):
    out = validate.run_scenario("few_noisy", seed=seed)
    assert out.passed, out.verdicts
