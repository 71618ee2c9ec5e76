"""Validate the law comparison on simulated data with known truth.

Scenarios (each must hold for the verdict rule to be trusted):

``three_laws``
    three taxa whose exponents follow three different laws (3/2, 2, 3), with 60, 90 and 180 junctions
    (3 specimens each; a junction says less about a larger exponent) at 5 % error:
    every taxon's verdict must be its true law.
``between_laws``
    one taxon with exponent 2.5 (none of the classic laws), 90 junctions at 5 % error: no classic law may be
    declared.
``few_noisy``
    twelve junctions at 15 % error (true exponent 3): the verdict must be ``undecided``.

Run ``python benchmarks/validate_laws.py`` (options ``--draws``, ``--tune``, ``--chains``, ``--seed``); it prints
every verdict, whether each scenario passed, and the runtimes, and exits with 1 when a scenario fails. The
slow tests in ``tests/test_comparison_slow.py`` run the same scenarios.
"""

from __future__ import annotations

import argparse
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass

import allobranch as ab
from allobranch.comparison.laws import CLASSIC_LAWS

CLASSIC_LABELS = {law.label for law in CLASSIC_LAWS}


@dataclass
class Outcome:
    """What one scenario produced and whether it met its expectation."""

    name: str
    passed: bool
    expectation: str
    verdicts: dict[str, str]
    seconds: float
    n_fits: int
    warnings: list[str]


def _compare(sim: ab.model.simulate.SimulatedData, seed: int, **sampler) -> ab.comparison.LawComparison:
    table = ab.read_junctions(sim.frame, sim.mapping)
    return ab.compare_laws(table, seed=seed, **sampler)


def three_laws(seed: int, **sampler) -> tuple[ab.comparison.LawComparison, bool, str]:
    """Three taxa following Rall (3/2), da Vinci (2) and Murray (3); each must get its own law."""
    truth = {"T_rall": 1.5, "T_da_vinci": 2.0, "T_murray": 3.0}
    # A junction says less about a larger exponent (for a symmetric split the daughter/parent ratio
    # 2^(-1/a) changes by ratio * ln 2 / a^2 per unit of a: exact algebra), so the cube-law taxon gets
    # more junctions: 20, 30 and 60 per specimen.
    sim = ab.simulate_junctions(
        taxa=list(truth),
        specimens_per_taxon=3,
        junctions_per_specimen=[20] * 3 + [30] * 3 + [60] * 3,
        taxon_exponents=truth,
        tau_specimen=0.05,
        rel_error=0.05,
        seed=seed,
    )
    result = _compare(sim, seed, **sampler)
    got = dict(zip(result.by_taxon["taxon"], result.by_taxon["verdict"]))
    expected = {taxon: taxon.removeprefix("T_") for taxon in truth}
    return result, got == expected, f"taxon verdicts == {expected}"


def between_laws(seed: int, **sampler) -> tuple[ab.comparison.LawComparison, bool, str]:
    """One taxon with exponent 2.5: no classic law may be declared."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=3,
        junctions_per_specimen=30,
        taxon_exponents={"T1": 2.5},
        tau_specimen=0.05,
        rel_error=0.05,
        seed=seed,
    )
    result = _compare(sim, seed, **sampler)
    ok = not (set(result.verdicts["verdict"]) & CLASSIC_LABELS)
    return result, ok, "no classic law declared in any scope"


def few_noisy(seed: int, **sampler) -> tuple[ab.comparison.LawComparison, bool, str]:
    """Twelve junctions at 15 % error: undecided."""
    sim = ab.simulate_junctions(
        taxa=1,
        specimens_per_taxon=1,
        junctions_per_specimen=12,
        taxon_exponents={"T1": 3.0},
        rel_error=0.15,
        seed=seed,
    )
    result = _compare(sim, seed, **sampler)
    ok = set(result.verdicts["verdict"]) == {"undecided"}
    return result, ok, "every scope undecided"


#: The scenarios, by name.
SCENARIOS: dict[str, Callable] = {
    "few_noisy": few_noisy,
    "between_laws": between_laws,
    "three_laws": three_laws,
}


def run_scenario(name: str, *, seed: int = 0, draws: int = 500, tune: int = 500, chains: int = 2) -> Outcome:
    """Run one scenario and check its expectation.

    Parameters
    ----------
    name : str
        A key of :data:`SCENARIOS`.
    seed : int
        Seed of the simulation and of every fit.
    draws, tune, chains : int
        Sampler settings of every fit.

    Returns
    -------
    Outcome
    """
    started = time.perf_counter()
    result, ok, expectation = SCENARIOS[name](seed, draws=draws, tune=tune, chains=chains)
    verdicts = dict(zip(result.verdicts["scope"], result.verdicts["verdict"]))
    return Outcome(
        name,
        ok,
        expectation,
        verdicts,
        time.perf_counter() - started,
        result.settings["n_fits"],
        result.warnings,
    )


def main(argv: list[str] | None = None) -> int:
    """Run every scenario, print verdicts and runtimes; return 0 when all pass."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=500)
    parser.add_argument("--tune", type=int, default=500)
    parser.add_argument("--chains", type=int, default=2)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--only", choices=list(SCENARIOS), action="append", help="run only these scenarios")
    args = parser.parse_args(argv)
    total = time.perf_counter()
    outcomes = []
    for name in args.only or list(SCENARIOS):
        out = run_scenario(name, seed=args.seed, draws=args.draws, tune=args.tune, chains=args.chains)
        outcomes.append(out)
        print(
            f"{name}: {'PASS' if out.passed else 'FAIL'} (expected: {out.expectation}); {out.n_fits} fits, "
            f"{out.seconds:.0f} s",
            flush=True,
        )
        for scope, verdict in out.verdicts.items():
            print(f"    {scope:<14} {verdict}")
        for w in out.warnings:
            print(f"    warning: {w[:160]}")
    print(
        f"total runtime {time.perf_counter() - total:.0f} s (draws {args.draws}, tune {args.tune}, "
        f"chains {args.chains}, seed {args.seed})"
    )
    return 0 if all(o.passed for o in outcomes) else 1


if __name__ == "__main__":
    sys.exit(main())
