"""The settings of one NUTS run, shared by every sampler back-end (PyMC, nutpie on PyMC, nutpie direct)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class NutsRun:
    """What every back-end needs to run NUTS once.

    Attributes
    ----------
    draws, tune, chains : int
        Kept draws and tuning steps per chain, and the number of chains.
    seed : int
        Seed of the run.
    progress : bool
        Show the sampler's progress bar.
    target_accept : float
        Target acceptance rate of the step-size adaptation.
    """

    draws: int
    tune: int
    chains: int
    seed: int
    progress: bool
    target_accept: float
