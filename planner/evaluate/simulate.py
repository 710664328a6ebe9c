"""Out-of-sample check of a plan: its cost and dry risk on demand paths it was not made from.

The optimizer picks a plan that is good on its own demand paths, so its figures on those
paths are optimistic (the sample average approximation's optimism). The check draws fresh
paths from the same forecast with a seed independent of the optimizer's
(``SeedSequence([seed, 1])``; stream 2 is the calibration's validation set,
:mod:`planner.optimize.calibrate`) and prices the plan on them with
:func:`planner.costs.simulate`.

The dry risk checked is the service target's own measure, the cycle service level: per
terminal the worst of its visit cycles (the share of paths that run dry before the next
visit). Enough fresh paths are drawn for a standard error of at most 0.2 points at the target
(:func:`sharp_path_count`: about 4,900 at 2 %), and a terminal counts as *over the target*
only when its estimate exceeds the target by more than two standard errors (with 500 paths,
about half of the terminals of an unbiased plan sitting exactly at the target would otherwise
look over it).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from planner.costs import PERIODS, Ledger, cycle_dry_shares, period_slices, simulate
from planner.executor import Executor

SHARP_SE = 0.002            # standard error aimed at, at the target (0.2 points)
MOST_FRESH_VALUES = 60_000_000   # terminals × paths × days priced at once at most
OVER_SE = 2.0               # an estimate this many standard errors above the target is "over"


def sharp_path_count(target: float, terminals: int, days: int, least: int = 0) -> int:
    """Fresh paths for a standard error of at most :data:`SHARP_SE` at ``target``
    (``target · (1 − target) / SHARP_SE²``, 4,900 at 2 %), at least ``least``, and no more
    than :data:`MOST_FRESH_VALUES` values in all (large networks get fewer; the check's
    summary gives the standard error reached)."""
    need = int(np.ceil(target * (1.0 - target) / SHARP_SE ** 2))
    room = MOST_FRESH_VALUES // max(int(terminals) * int(days), 1)
    return int(max(least, min(need, room), 1))


def over_target(share: np.ndarray, paths: int, target: float) -> np.ndarray:
    """bool: ``share`` (a dry risk estimated on ``paths`` paths) exceeds ``target`` by more
    than :data:`OVER_SE` binomial standard errors (of the estimate itself)."""
    share = np.asarray(share, dtype=float)
    se = np.sqrt(share * (1.0 - share) / max(int(paths), 1))
    return share > target + OVER_SE * se + 1e-12


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
    planned days, horizon + look-ahead, currency), ``expected_cost_horizon`` and
    ``expected_cost_look_ahead`` (its two periods), its parts ``carry, visit, handling, dry_penalty,
    shortfall_penalty``, ``expected_cost_in_sample`` (on the optimizer's own paths),
    ``dry_probability`` (the worst visit cycle's share of fresh paths that run dry before the
    next visit), ``dry_probability_se`` (its binomial standard error),
    ``dry_probability_in_sample``, ``dry_before_horizon_end`` (share of fresh paths with a dry
    day before the horizon ends), ``expected_dry_days`` (within the horizon), ``over_target``
    (bool, :func:`over_target`), ``reachable`` (bool: the target can be met at all).
    ``summary``: the network figures for ``summary.json`` (see :func:`check_plan`).
    ``ledger``: the accounting on the fresh paths. ``demand``: the fresh paths ``[T, P, D]``.
    """

    frame: pd.DataFrame
    summary: dict[str, Any]
    ledger: Ledger
    demand: np.ndarray


def check_plan(problem, visits: np.ndarray, loads: np.ndarray, demand: np.ndarray, *,
               seed: int | None = None, reachable: np.ndarray | None = None
               ) -> OutOfSampleCheck:
    """Price a plan on fresh demand paths ``demand`` ``[T, P', D]`` (same terminals and days as
    ``problem``) and compare with its figures on the problem's own paths.

    ``reachable`` ``[T]`` bool: terminals whose target can be met (default all).
    ``summary`` keys: ``paths``, ``seed`` (of the fresh paths, if given), ``expected_cost``
    (the window; ``expected_cost_horizon``, ``expected_cost_look_ahead`` its periods),
    ``expected_cost_in_sample``, ``optimism`` (share by which the in-sample cost is below the
    out-of-sample cost), ``max_dry_probability`` (the target), ``standard_error_at_target``,
    ``terminals_over_target`` (of the reachable ones), ``reachable_terminals``,
    ``share_over_target``, ``over_target`` (their ids), ``worst_dry_probability``,
    ``mean_dry_probability`` (mean over every visit cycle of reachable terminals),
    ``mean_dry_probability_in_sample``, ``expected_dry_days``.
    """
    horizon = problem.horizon_days
    visits = np.asarray(visits, dtype=bool)
    fresh = plan_ledger(problem, visits, loads, demand)
    own = plan_ledger(problem, visits, loads)
    parts = fresh.parts()
    paths = demand.shape[1]
    target = float(problem.max_dry_probability)
    reach = (np.ones(len(visits), bool) if reachable is None
             else np.asarray(reachable, dtype=bool))
    dry, cycles = cycle_dry_shares(fresh, visits, reach)
    dry_own, cycles_own = cycle_dry_shares(own, visits, reach)
    over = over_target(dry, paths, target) & reach
    frame = pd.DataFrame({
        "terminal_id": list(problem.terminal_ids),
        "depot": [problem.depots[k] for k in problem.depot_of],
        "expected_cost": parts["total"].to_numpy(),
        **{f"expected_cost_{p}": fresh.expected_cost(days)
           for p, days in period_slices(horizon).items()},
        **{c: parts[c].to_numpy() for c in ("carry", "visit", "handling", "dry_penalty",
                                             "shortfall_penalty")},
        "expected_cost_in_sample": own.expected_cost(),
        "dry_probability": dry,
        "dry_probability_se": np.sqrt(dry * (1.0 - dry) / paths),
        "dry_probability_in_sample": dry_own,
        "dry_before_horizon_end": fresh.dry_probability(horizon),
        "expected_dry_days": fresh.dry[:, :, :horizon].sum(axis=2).mean(axis=1),
        "over_target": over,
        "reachable": reach,
    })
    cost, cost_in = float(frame["expected_cost"].sum()), float(
        frame["expected_cost_in_sample"].sum())
    summary = {
        "paths": int(paths),
        "seed": None if seed is None else int(seed),
        "expected_cost": round(cost, 2),
        **{f"expected_cost_{p}": round(float(frame[f"expected_cost_{p}"].sum()), 2)
           for p in PERIODS},
        "expected_cost_in_sample": round(cost_in, 2),
        "optimism": round((cost - cost_in) / cost, 6) if cost else 0.0,
        "max_dry_probability": target,
        "standard_error_at_target": round(float(np.sqrt(target * (1 - target) / paths)), 5),
        "reachable_terminals": int(reach.sum()),
        "terminals_over_target": int(over.sum()),
        "share_over_target": round(float(over.sum() / max(reach.sum(), 1)), 4),
        "over_target": [problem.terminal_ids[i] for i in np.flatnonzero(over)],
        "worst_dry_probability": round(float(dry.max()) if dry.size else 0.0, 4),
        "mean_dry_probability": round(float(cycles.mean()) if cycles.size else 0.0, 5),
        "mean_dry_probability_in_sample": round(float(cycles_own.mean())
                                                if cycles_own.size else 0.0, 5),
        "expected_dry_days": round(float(frame["expected_dry_days"].sum()), 4),
    }
    return OutOfSampleCheck(frame=frame, summary=summary, ledger=fresh, demand=demand)


def fresh_paths(scenario, clean, problem, *, seed: int, path_count: int | None = None,
                executor: Executor | None = None, origins: int = 8) -> np.ndarray:
    """Fresh demand paths ``[T, P, D]`` for the problem's terminals and days, drawn with
    ``seed`` (pass :func:`fresh_seed`) from the forecasting stage's fitted models
    (:func:`planner.forecast.fitted_forecast`: the fit of this run when the stage already ran
    on ``clean``, nothing is fitted again) — the paths ``forecast_scenario`` would draw with
    that seed."""
    from planner.forecast import fitted_forecast

    days = len(problem.dates)
    fitted = fitted_forecast(scenario, clean, days=days, executor=executor, origins=origins)
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
                        seed: int | None = None, executor: Executor | None = None,
                        origins: int = 8) -> OutOfSampleCheck:
    """Out-of-sample check of a plan (``result`` a :class:`planner.optimize.PlanResult` for
    ``problem``): fresh paths from the scenario's forecast with seed ``fresh_seed(seed)``
    (``seed`` defaults to the scenario's ``paths.seed``), :func:`sharp_path_count` of them
    unless ``path_count`` says otherwise. Terminals whose notes say the target cannot be
    reached are not counted over it.

    The CLI adds ``summary`` under ``"out_of_sample"`` in ``summary.json`` and prints its
    figures: expected cost out of sample vs in sample, terminals over the dry-risk target
    (their ids). ``frame`` may be written as ``out_of_sample.csv``.
    """
    base = int(scenario.seed if seed is None else seed)
    s = fresh_seed(base)
    t_count, p_count, d_count = problem.shape
    count = path_count or sharp_path_count(problem.max_dry_probability, t_count, d_count,
                                           least=p_count)
    demand = fresh_paths(scenario, clean, problem, seed=s, path_count=count, executor=executor,
                         origins=origins)
    return check_plan(problem, result.visits, result.loads, demand, seed=s,
                      reachable=result.reachable)


def calibrated_plan(scenario, clean, problem, solve, *, seed: int | None = None,
                    executor: Executor | None = None, origins: int = 8):
    """The plan of ``problem`` with its chance constraint calibrated on validation paths
    (:mod:`planner.optimize.calibrate`): :func:`sharp_path_count` paths drawn from the fitted
    forecast with ``fresh_seed(seed, 2)``, independent of the plan's own paths and of the
    out-of-sample check's. ``solve(problem) -> PlanResult``. Returns a
    :class:`planner.optimize.calibrate.Calibration`."""
    from planner.optimize.calibrate import calibrate

    base = int(scenario.seed if seed is None else seed)
    t_count, p_count, d_count = problem.shape
    count = sharp_path_count(problem.max_dry_probability, t_count, d_count, least=p_count)
    validation = fresh_paths(scenario, clean, problem, seed=fresh_seed(base, 2),
                             path_count=count, executor=executor, origins=origins)
    return calibrate(problem, validation, solve)
