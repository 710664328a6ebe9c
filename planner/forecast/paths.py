"""Demand paths: seeds per terminal and the simulation of one terminal's paths.

Paths are simulated jointly over the horizon by the fitted model (see
:mod:`planner.forecast.models`: shocks carried from day to day by the model's dynamics, on the
log scale), so a high day makes the following days likelier to be high where the model says
so. Every terminal draws from its own generator, seeded from the run's ``seed`` and the
terminal's position in ``terminals.csv`` (``np.random.SeedSequence(seed).spawn``), so the
paths of a terminal do not depend on which process simulated it or on the other terminals.
"""
from __future__ import annotations

import numpy as np

from planner.forecast.models import DemandModel


def terminal_seeds(seed: int, count: int) -> list[np.random.SeedSequence]:
    """One independent seed sequence per terminal position ``0 … count − 1``."""
    return np.random.SeedSequence(seed).spawn(count)


def simulate_paths(model: DemandModel, h: int, n_paths: int, seed: np.random.SeedSequence,
                   exog_future: np.ndarray | None = None, keep: int | None = None
                   ) -> np.ndarray:
    """Demand paths ``[path, day]`` (≥ 0) of a fitted model for the next ``h`` days, keeping
    the last ``keep`` days (the days before them bridge a gap between the end of the history
    and the first planning day)."""
    paths = model.simulate(h, n_paths, np.random.default_rng(seed), exog_future)
    paths = np.maximum(paths, 0.0)
    return paths if keep is None else paths[:, h - keep:]
