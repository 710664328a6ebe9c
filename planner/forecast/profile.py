"""Demand of terminals without (enough) history: a network-average weekday profile.

A terminal with no history is forecast as a *typical* terminal of the network: the median of
the terminals' recent mean daily demand, shaped by the network's average weekday profile. The
uncertainty has two parts, both on the log scale: the spread of levels across terminals (one
draw per path, shared by all days of the path — we do not know how busy the new machine will
be, but it will be consistently so) and the day-to-day noise typical of the network.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import special

from planner.forecast.models import LEVELS, WEEK, DemandModel

RECENT_DAYS = 56            # the level is the mean over the last eight weeks
MIN_PROFILE_DAYS = 28       # terminals with less history do not shape the network profile
DEFAULT_LEVEL_LOG_SD = 0.5  # level spread when the network has fewer than 3 terminals (assumed)
DEFAULT_NOISE_LOG_SD = 0.3  # day-to-day log sd without any usable history (assumed)


class NetworkProfile(DemandModel):
    """Log-normal demand ``log y_{p,j} = μ_j + u_p + ε_{p,j}`` with ``u_p ~ N(0, level_sd²)``
    per path and ``ε ~ N(0, noise_sd²)`` per day.

    ``μ_j = log(level · m_j) − s²/2`` with ``s² = level_sd² + noise_sd²``, so that the mean
    demand on day ``j`` is ``level · m_j``; ``m`` are the weekday multipliers
    (``weekday_profile``, Monday first, mean 1) and day 0 of the horizon is weekday
    ``first_weekday`` (0 = Monday). ``fit`` ignores its arguments: the parameters come from
    :func:`network_profile`.
    """

    name = "network_profile"

    def __init__(self, *, level: float, level_sd: float, noise_sd: float,
                 weekday_profile: tuple[float, ...] = (1.0,) * WEEK, first_weekday: int = 0):
        self.level = level
        self.level_sd = level_sd
        self.noise_sd = noise_sd
        self.weekday_profile = tuple(weekday_profile)
        self.first_weekday = first_weekday

    def fit(self, y: np.ndarray | None = None, exog: np.ndarray | None = None
            ) -> "NetworkProfile":
        self.residuals_ = np.zeros(0)
        return self

    def apply(self, y: np.ndarray | None = None, exog: np.ndarray | None = None
              ) -> "NetworkProfile":
        return self.clone().fit()

    def _moments(self, h: int) -> tuple[np.ndarray, float]:
        mult = np.asarray(self.weekday_profile)[(self.first_weekday + np.arange(h)) % WEEK]
        s2 = self.level_sd ** 2 + self.noise_sd ** 2
        return np.log(max(self.level, 1e-9) * mult) - 0.5 * s2, math.sqrt(s2)

    def quantiles(self, h: int, exog_future: np.ndarray | None = None,
                  levels=LEVELS) -> np.ndarray:
        mu, sd = self._moments(h)
        z = special.ndtri(np.asarray(levels, dtype=float))
        return np.exp(mu[None, :] + z[:, None] * sd)

    def mean(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        mu, sd = self._moments(h)
        return np.exp(mu + 0.5 * sd ** 2)

    def simulate(self, h: int, n_paths: int, rng: np.random.Generator,
                 exog_future: np.ndarray | None = None) -> np.ndarray:
        mu, _ = self._moments(h)
        level = rng.standard_normal((n_paths, 1)) * self.level_sd
        noise = rng.standard_normal((n_paths, h)) * self.noise_sd
        return np.exp(mu[None, :] + level + noise)

    def describe(self) -> str:
        return (f"network profile, level {self.level:.0f}/day, level sd {self.level_sd:.2f}, "
                f"noise sd {self.noise_sd:.2f} (log)")


def network_profile(series: dict[str, tuple[pd.Timestamp, np.ndarray]]) -> dict[str, float]:
    """Network statistics from the cleaned series ``terminal_id -> (first date, demand)``.

    Returns ``level`` (median over terminals of the mean daily demand of their last eight
    weeks), ``level_sd`` (standard deviation of the log of those means), ``noise_sd`` (median
    of the terminals' standard deviation of log1p demand around their own weekday means) and
    ``weekday_profile`` (Monday first, mean 1: the average over terminals of their weekday
    multipliers). Terminals with fewer than four weeks of history are left out; with none
    left, neutral defaults are used.
    """
    levels, noise, profiles = [], [], []
    for first, y in series.values():
        if len(y) < MIN_PROFILE_DAYS:
            continue
        recent = y[-RECENT_DAYS:]
        levels.append(float(np.mean(recent)))
        weekday = (pd.Timestamp(first).weekday() + np.arange(len(y))) % WEEK
        z = np.log1p(y)
        means = np.array([z[weekday == d].mean() for d in range(WEEK)])
        noise.append(float(np.std(z - means[weekday], ddof=WEEK)))
        mult = np.exp(means - means.mean())
        profiles.append(mult / mult.mean())
    if not levels:
        return {"level": 1.0, "level_sd": DEFAULT_LEVEL_LOG_SD,
                "noise_sd": DEFAULT_NOISE_LOG_SD, "weekday_profile": (1.0,) * WEEK,
                "terminals": 0}
    logs = np.log(np.maximum(levels, 1e-9))
    level_sd = float(np.std(logs, ddof=1)) if len(levels) >= 3 else DEFAULT_LEVEL_LOG_SD
    profile = np.mean(profiles, axis=0)
    return {"level": float(np.median(levels)), "level_sd": level_sd,
            "noise_sd": float(np.median(noise)),
            "weekday_profile": tuple(float(v) for v in profile / profile.mean()),
            "terminals": len(levels)}
