"""Out-of-sample check of a plan: its cost and dry risk on demand paths it was not made from.

The optimizer picks a plan that is good on its own demand paths, so its figures on those
paths are optimistic (the sample average approximation's optimism). The check draws fresh
paths from the same forecast with a seed independent of the optimizer's
(``SeedSequence([seed, 1])``) and prices the plan on them with :func:`planner.costs.simulate`.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from planner.costs import Ledger, simulate


def fresh_seed(seed: int, stream: int = 1) -> int:
    """A seed independent of ``seed`` (``numpy.random.SeedSequence([seed, stream])``).

    Stream 1 draws the out-of-sample paths; other streams are free for other checks.
    """
    return int(np.random.SeedSequence([int(seed), int(stream)]).generate_state(1)[0])


def plan_ledger(problem, visits: np.ndarray, loads: np.ndarray,
                demand: np.ndarray | None = None) -> Ledger:
    """The accounting of a plan on ``demand`` ``[T, P, D]`` (default: the problem's paths),
    with the problem's start balances, limits, fees, rates and mode."""
    return simulate(visits, loads, problem.start_balance,
                    problem.demand if demand is None else demand, problem.limit,
                    problem.visit_fee, problem.rates, problem.mode)


@dataclass(frozen=True)
class OutOfSampleCheck:
    """A plan priced on fresh demand paths.

    ``frame``: one row per terminal — ``terminal_id``, ``depot``, ``expected_cost`` (over all
    planned days, horizon + tail, currency), its parts ``carry, visit, handling, dry_penalty,
    shortfall_penalty``, ``expected_cost_in_sample`` (on the optimizer's own paths),
    ``dry_probability`` (share of fresh paths with a dry day within the horizon),
    ``dry_probability_se`` (its binomial standard error), ``dry_probability_in_sample``,
    ``expected_dry_days`` (within the horizon), ``over_target`` (bool: out-of-sample dry
    probability above the service target).
    ``summary``: the network figures for ``summary.json`` (see :func:`check_plan`).
    ``ledger``: the accounting on the fresh paths. ``demand``: the fresh paths ``[T, P, D]``.
    """

    frame: pd.DataFrame
    summary: dict[str, Any]
    ledger: Ledger
    demand: np.ndarray


def check_plan(problem, visits: np.ndarray, loads: np.ndarray, demand: np.ndarray, *,
               seed: int | None = None) -> OutOfSampleCheck:
    """Price a plan on fresh demand paths ``demand`` ``[T, P', D]`` (same terminals and days as
    ``problem``) and compare with its figures on the problem's own paths.

    ``summary`` keys: ``paths``, ``seed`` (of the fresh paths, if given), ``expected_cost``,
    ``expected_cost_in_sample``, ``optimism`` (share by which the in-sample cost is below the
    out-of-sample cost), ``max_dry_probability`` (the target), ``terminals_over_target``,
    ``over_target`` (their ids), ``worst_dry_probability``, ``mean_dry_probability``,
    ``expected_dry_days``.
    """
    horizon = problem.horizon_days
    fresh = plan_ledger(problem, visits, loads, demand)
    own = plan_ledger(problem, visits, loads)
    parts = fresh.parts()
    dry = fresh.dry_probability(horizon)
    paths = demand.shape[1]
    target = float(problem.max_dry_probability)
    over = dry > target + 1e-12
    frame = pd.DataFrame({
        "terminal_id": list(problem.terminal_ids),
        "depot": [problem.depots[k] for k in problem.depot_of],
        "expected_cost": parts["total"].to_numpy(),
        **{c: parts[c].to_numpy() for c in ("carry", "visit", "handling", "dry_penalty",
                                             "shortfall_penalty")},
        "expected_cost_in_sample": own.expected_cost(),
        "dry_probability": dry,
        "dry_probability_se": np.sqrt(dry * (1.0 - dry) / paths),
        "dry_probability_in_sample": own.dry_probability(horizon),
        "expected_dry_days": fresh.dry[:, :, :horizon].sum(axis=2).mean(axis=1),
        "over_target": over,
    })
    cost, cost_in = float(frame["expected_cost"].sum()), float(
        frame["expected_cost_in_sample"].sum())
    summary = {
        "paths": int(paths),
        "seed": None if seed is None else int(seed),
        "expected_cost": round(cost, 2),
        "expected_cost_in_sample": round(cost_in, 2),
        "optimism": round((cost - cost_in) / cost, 6) if cost else 0.0,
        "max_dry_probability": target,
        "terminals_over_target": int(over.sum()),
        "over_target": [problem.terminal_ids[i] for i in np.flatnonzero(over)],
        "worst_dry_probability": round(float(dry.max()) if dry.size else 0.0, 4),
        "mean_dry_probability": round(float(dry.mean()) if dry.size else 0.0, 4),
        "expected_dry_days": round(float(frame["expected_dry_days"].sum()), 4),
    }
    return OutOfSampleCheck(frame=frame, summary=summary, ledger=fresh, demand=demand)


def fresh_paths(scenario, clean, problem, *, seed: int, path_count: int | None = None,
                jobs: int = 1, origins: int = 8) -> np.ndarray:
    """Fresh demand paths ``[T, P, D]`` for the problem's terminals and days, drawn with
    ``seed`` (pass :func:`fresh_seed`) from the forecasting stage's fitted models
    (:func:`planner.forecast.fitted_forecast`: the fit of this run when the stage already ran
    on ``clean``, nothing is fitted again) — the paths ``forecast_scenario`` would draw with
    that seed."""
    from planner.forecast import fitted_forecast

    days = len(problem.dates)
    fitted = fitted_forecast(scenario, clean, days=days, jobs=jobs, origins=origins)
    paths = fitted.draw_paths(int(seed), int(path_count or problem.shape[1]), days)
    dates = pd.date_range(fitted.start, periods=days, freq="D")
    return _align(fitted.terminal_ids, dates, paths, problem)


def _align(terminal_ids, dates, paths: np.ndarray, problem) -> np.ndarray:
    """Paths ``[terminal, path, day]`` over ``dates`` in the problem's terminal order, cut to
    the problem's days."""
    order = [list(terminal_ids).index(t) for t in problem.terminal_ids]
    start = list(pd.DatetimeIndex(dates)).index(problem.dates[0])
    return np.asarray(paths, dtype=float)[order, :, start:start + len(problem.dates)]


def out_of_sample_check(scenario, clean, problem, result, *, path_count: int | None = None,
                        seed: int | None = None, jobs: int = 1,
                        origins: int = 8) -> OutOfSampleCheck:
    """Out-of-sample check of a plan (``result`` a :class:`planner.optimize.PlanResult` for
    ``problem``): fresh paths from the scenario's forecast with seed ``fresh_seed(seed)``
    (``seed`` defaults to the scenario's ``paths.seed``), as many as the plan's paths unless
    ``path_count`` says otherwise.

    The CLI adds ``summary`` under ``"out_of_sample"`` in ``summary.json`` and prints its
    figures: expected cost out of sample vs in sample, terminals over the dry-risk target
    (their ids). ``frame`` may be written as ``out_of_sample.csv``.
    """
    base = int(scenario.seed if seed is None else seed)
    s = fresh_seed(base)
    demand = fresh_paths(scenario, clean, problem, seed=s, path_count=path_count, jobs=jobs,
                         origins=origins)
    return check_plan(problem, result.visits, result.loads, demand, seed=s)
