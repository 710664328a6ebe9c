"""Rolling-origin backtest of the candidate models of one terminal, and the champion.

Origins are weekly: by default the last 8 days ``o = n − 14 − 7k`` (k = 7 … 0) of a series of
``n`` days, each followed by a 14-day test window; origins leaving fewer than ``min_train``
days of training history are dropped. Each model is **fitted once**, at the earliest origin;
for the later origins it is re-filtered with the same parameters (``model.apply``), which is
cheap and keeps the backtest honest (parameters never see the test windows).

Measures (all over every origin × horizon day, on the original scale):

- **MASE**: absolute error of the point forecast divided by the in-sample mean absolute
  weekly-seasonal difference ``mean |y_t − y_{t−7}|`` of the training part (Hyndman & Koehler
  2006, with the weekly seasonal naive as the scale);
- **sMAPE** in percent: ``200 |y − f| / (|y| + |f|)`` (0 when both are 0);
- **pinball loss** at 0.1, 0.5, 0.9 in currency units: ``max(q (y − f_q), (q − 1)(y − f_q))``;
- **coverage** of the central 80 % (q10–q90) and 95 % (q2.5–q97.5) intervals.

**Champion score** (lower is better): the mean over q ∈ {0.1, 0.5, 0.9} of the pinball loss
divided by the MASE scale — one number that rewards a sharp and well-placed median *and*
calibrated tails (the scaled pinball at 0.5 is half the MASE). Ties go to the model listed
first.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.forecast.models import WEEK, DemandModel

BACKTEST_LEVELS = (0.025, 0.1, 0.5, 0.9, 0.975)
SCORE_LEVELS = (0.1, 0.5, 0.9)
METRIC_COLUMNS = ("mase", "smape", "pinball_10", "pinball_50", "pinball_90", "coverage_80",
                  "coverage_95", "score")
SCORE_TEXT = "mean scaled pinball loss at 0.1/0.5/0.9"


def origin_days(n: int, *, origins: int = 8, horizon: int = 14, min_train: int = 56
                ) -> np.ndarray:
    """Forecast origins (number of training days) of a series of ``n`` days, earliest first:
    ``n − horizon − 7k`` for ``k = origins − 1 … 0``, keeping those with ≥ ``min_train``."""
    days = n - horizon - WEEK * np.arange(origins)[::-1]
    return days[days >= max(min_train, WEEK + 1)]


def mase_scale(y: np.ndarray) -> float:
    """In-sample mean absolute weekly-seasonal difference (the MASE denominator), > 0."""
    scale = float(np.mean(np.abs(y[WEEK:] - y[:-WEEK]))) if len(y) > WEEK else 0.0
    # a constant series has no scale; fall back to its level so the ratio stays finite
    return scale if scale > 0 else max(float(np.mean(np.abs(y))), 1.0)


def pinball(actual: np.ndarray, forecast: np.ndarray, q: float) -> np.ndarray:
    """Pinball (quantile) loss of a ``q``-quantile forecast, element-wise."""
    diff = actual - forecast
    return np.maximum(q * diff, (q - 1.0) * diff)


@dataclass(frozen=True)
class ModelBacktest:
    """Backtest of one model at one terminal: arrays ``[origin, day]`` (quantiles
    ``[level, origin, day]`` at :data:`BACKTEST_LEVELS`), the MASE scale per origin, and the
    model fitted at the earliest origin."""

    name: str
    origins: np.ndarray
    actual: np.ndarray
    point: np.ndarray
    quantiles: np.ndarray
    scale: np.ndarray
    model: DemandModel

    def metrics(self) -> dict[str, float]:
        """The measures of the module docstring, plus the champion ``score``."""
        return accuracy(self.actual, self.point, self.quantiles, self.scale)


def accuracy(actual: np.ndarray, point: np.ndarray, quantiles: np.ndarray,
             scale: np.ndarray) -> dict[str, float]:
    """Accuracy measures of forecasts ``[origin, day]`` (quantiles at BACKTEST_LEVELS)."""
    scale = np.asarray(scale, dtype=float)[:, None]
    err = np.abs(actual - point)
    denom = np.abs(actual) + np.abs(point)
    smape = np.where(denom > 0, 200.0 * err / np.where(denom > 0, denom, 1.0), 0.0)
    out = {"mase": float(np.mean(err / scale)), "smape": float(np.mean(smape))}
    levels = list(BACKTEST_LEVELS)
    scaled = []
    for q in SCORE_LEVELS:
        loss = pinball(actual, quantiles[levels.index(q)], q)
        out[f"pinball_{round(q * 100):02d}"] = float(np.mean(loss))
        scaled.append(float(np.mean(loss / scale)))
    lo80, hi80 = quantiles[levels.index(0.1)], quantiles[levels.index(0.9)]
    lo95, hi95 = quantiles[levels.index(0.025)], quantiles[levels.index(0.975)]
    out["coverage_80"] = float(np.mean((actual >= lo80) & (actual <= hi80)))
    out["coverage_95"] = float(np.mean((actual >= lo95) & (actual <= hi95)))
    out["score"] = float(np.mean(scaled))
    return out


def backtest_model(prototype: DemandModel, y: np.ndarray, exog: np.ndarray | None,
                   origins: np.ndarray, horizon: int = 14) -> ModelBacktest:
    """Rolling-origin backtest of one model (fit at the earliest origin, re-filter after).

    Raises :class:`~planner.forecast.models.ModelFitError` when the model cannot be fitted.
    """
    first = int(origins[0])
    sub = (lambda a, i, j: None if a is None else a[i:j])
    fitted = prototype.clone().fit(y[:first], sub(exog, 0, first))
    n_o = len(origins)
    actual = np.empty((n_o, horizon))
    point = np.empty((n_o, horizon))
    quant = np.empty((len(BACKTEST_LEVELS), n_o, horizon))
    scale = np.empty(n_o)
    for i, o in enumerate(int(v) for v in origins):
        model = fitted if o == first else fitted.apply(y[:o], sub(exog, 0, o))
        future = sub(exog, o, o + horizon)
        actual[i] = y[o:o + horizon]
        point[i], quant[:, i] = model.point_and_quantiles(horizon, future, BACKTEST_LEVELS)
        scale[i] = mase_scale(y[:o])
    return ModelBacktest(prototype.name, origins, actual, point, quant, scale, fitted)


def rank_models(metrics: dict[str, dict[str, float]], order: list[str]) -> list[str]:
    """Model names by champion score, best first (ties: the earlier in ``order``)."""
    return sorted(metrics, key=lambda name: (round(metrics[name]["score"], 12),
                                             order.index(name)))


def champion_reason(metrics: dict[str, dict[str, float]], ranking: list[str], n_origins: int,
                    horizon: int) -> str:
    """One sentence saying why the first model of ``ranking`` won."""
    best = ranking[0]
    others = ", ".join(f"{name} {metrics[name]['score']:.3f}" for name in ranking[1:])
    text = (f"lowest {SCORE_TEXT} over {n_origins} origins × {horizon} days: "
            f"{metrics[best]['score']:.3f}")
    return text + (f" (vs {others})" if others else " (only model that could be fitted)")


# --------------------------------------------------------------------------------------------
# Calibrated spread of the bands and paths
# --------------------------------------------------------------------------------------------

SPREAD_GRID = np.round(np.arange(0.6, 1.61, 0.05), 2)   # factors tried
LEAD_GROUP = 7          # lead days sharing one factor (days 1–7, 8–14; later days the last)


def widen(values: np.ndarray, median: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """Quantiles or paths ``[..., day]`` spread around ``median`` ``[day]`` on the log scale,
    ``exp(m + c · (log1p(v) − m)) − 1`` with ``m = log1p(median)``; ``factor`` ``[2, day]``
    holds ``c`` below the median (row 0) and above it (row 1). Monotone per day and
    continuous at the median, so a path stays one realisation over the days and the paths'
    quantiles move with the bands."""
    m = np.log1p(np.maximum(median, 0.0))
    x = np.log1p(np.maximum(values, 0.0)) - m
    factor = np.asarray(factor, dtype=float).reshape(2, -1)
    return np.maximum(np.expm1(m + np.where(x < 0, factor[0], factor[1]) * x), 0.0)


def spread_by_day(factors: np.ndarray, days: int) -> np.ndarray:
    """``[2, days]`` the factors of lead days ``1 … days`` (beyond the groups: the last)."""
    factors = np.asarray(factors, dtype=float).reshape(2, -1)
    lead = np.minimum(np.arange(days) // LEAD_GROUP, factors.shape[1] - 1)
    return factors[:, lead]


def fit_network_spread(backtests: list[ModelBacktest]) -> np.ndarray:
    """Spread factors ``[2, lead group]`` (below and above the median) from the champions'
    rolling-origin errors, pooled over the network: per group of :data:`LEAD_GROUP` lead days
    and per side, the factor of :data:`SPREAD_GRID` whose widened quantiles have the least
    pinball loss over every champion's origins and levels on that side (a scale factor fitted
    to the backtest's pinball loss; the loss is a proper scoring rule and separates by level,
    so each side is fitted on its own). Pooled, because eight origins per terminal are too few
    for a factor of its own: fitted per terminal, the bands covered worse on origins left out
    (measured on the demo and both hold-out networks), pooled they cover as well or better."""
    levels = np.asarray(BACKTEST_LEVELS)
    mid = list(BACKTEST_LEVELS).index(0.5)
    horizon = min((bt.actual.shape[1] for bt in backtests), default=0)
    groups = max(1, -(-horizon // LEAD_GROUP))
    out = np.ones((2, groups))
    if not backtests or not horizon:
        return out
    # every terminal's origins one after another: [T·O, day] and
    # [level, T·O, day], errors scaled by each origin's MASE scale
    actual = np.concatenate([bt.actual[:, :horizon] / np.asarray(bt.scale, float)[:, None]
                             for bt in backtests])
    scale = np.concatenate([np.asarray(bt.scale, float) for bt in backtests])[:, None]
    quant = np.concatenate([bt.quantiles[:, :, :horizon] for bt in backtests], axis=1)
    m = np.log1p(np.maximum(quant[mid], 0.0))
    x = np.log1p(np.maximum(quant, 0.0)) - m
    sides = (np.flatnonzero(levels < 0.5), np.flatnonzero(levels > 0.5))
    for g in range(groups):
        days = slice(g * LEAD_GROUP, min((g + 1) * LEAD_GROUP, horizon))
        for side, rows in enumerate(sides):
            best, best_loss = 1.0, math.inf
            for c in SPREAD_GRID:
                loss = 0.0
                for i in rows:
                    w = np.maximum(np.expm1(m[:, days] + c * x[i][:, days]), 0.0) / scale
                    loss += float(np.nansum(pinball(actual[:, days], w, levels[i])))
                if loss < best_loss - 1e-12 * max(1.0, abs(loss)):
                    best, best_loss = float(c), loss
            out[side, g] = best
    return out
