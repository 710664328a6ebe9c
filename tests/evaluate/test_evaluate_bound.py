"""Perfect-foresight bound: the Wagner–Whitin reference, brute force on small instances, the
former implementation (candidate loads tried in full, vectorised over paths) on larger ones,
and "no policy beats it" on random instances (optimizer plan and every baseline, path by
path)."""
from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from planner.costs import CostRates, simulate
from planner.evaluate.baselines import days_of_cover, fixed_weekdays
from planner.evaluate.bound import perfect_foresight, perfect_foresight_arrays
from planner.evaluate.simulate import plan_ledger
from planner.optimize.problem import PlanningProblem


def random_problem(rng: np.random.Generator, *, terminals: int = 3, paths: int = 6,
                   days: int = 7, horizon: int = 5, mode: str = "swap",
                   committed: bool = True) -> PlanningProblem:
    """A small invented problem: lognormal demand with a persistent level per path."""
    dates = pd.date_range("2026-12-07", periods=days, freq="D")
    base = rng.uniform(2000, 9000, size=terminals)
    level = rng.lognormal(0.0, 0.2, size=(terminals, paths, 1))
    noise = rng.lognormal(0.0, 0.35, size=(terminals, paths, days))
    demand = np.round(base[:, None, None] * level * noise / 10) * 10
    bundle = rng.choice([1000.0, 2000.0], size=terminals)
    limit = np.floor(base * rng.uniform(3, 6, size=terminals) / bundle) * bundle
    allowed = rng.random((terminals, days)) < 0.6
    fixed = np.full((terminals, days), np.nan)
    if committed:
        fixed[0, 0] = np.floor(0.7 * limit[0] / bundle[0]) * bundle[0]
    allowed |= ~np.isnan(fixed)
    return PlanningProblem(
        terminal_ids=tuple(f"BRH-{i + 1:03d}" for i in range(terminals)),
        depots=("Brenholm",), depot_of=np.zeros(terminals, int), dates=dates,
        horizon_days=horizon, demand=demand,
        start_balance=np.floor(limit * rng.uniform(0.1, 0.6, size=terminals) / 10) * 10,
        limit=limit, bundle=bundle, allowed=allowed, fixed_load=fixed,
        visit_fee=np.where(dates.day_of_week == 5, 180.0, 120.0)[None, :].repeat(terminals, 0),
        crew_limit=np.full((1, days), 2), mode=mode, max_dry_probability=0.2,
        rates=CostRates(carry_rate_daily=0.05 / 365, handling_per_1000=0.8,
                        dry_day_penalty=float(rng.choice([150.0, 600.0])),
                        shortfall_penalty_per_1000=float(rng.choice([0.0, 20.0]))))


def test_wagner_whitin_reference_instance():
    # Wagner & Whitin (1958), Management Science 5(1) 89-96, the 12-period example: setup cost
    # per period, holding 1 per unit per period; optimum 864 with orders in periods 1, 3, 5, 8,
    # 10, 11 (covering 1-2, 3-4, 5-7, 8-9, 10, 11-12). A visit is an order, carry at rate 1 on
    # the end balance is the holding cost, and a prohibitive dry-day penalty forbids shortage.
    demand = np.array([69, 29, 36, 61, 61, 26, 34, 67, 45, 67, 79, 56], float)
    setup = np.array([85, 102, 102, 101, 98, 114, 105, 86, 119, 110, 98, 114], float)
    rates = CostRates(carry_rate_daily=1.0, handling_per_1000=0.0, dry_day_penalty=1e6)
    pf = perfect_foresight_arrays(
        demand=demand[None, None, :], start_balance=np.zeros(1), limit=np.array([1e4]),
        bundle=np.ones(1), allowed=np.ones((1, 12), bool), fixed_load=np.full((1, 12), np.nan),
        visit_fee=setup[None, :], rates=rates, mode="swap", plans=True)
    assert pf.cost[0, 0] == pytest.approx(864.0)
    assert np.flatnonzero(pf.visits[0, 0]).tolist() == [0, 2, 4, 7, 9, 10]
    np.testing.assert_allclose(pf.loads[0, 0][pf.visits[0, 0]],
                               [69 + 29, 36 + 61, 61 + 26 + 34, 67 + 45, 67, 79 + 56])


def _brute_force(demand, start, limit, bundle, allowed, fixed, fee, rates, mode):
    """Least cost per path over every visit pattern and every load in whole bundles."""
    d_count = demand.shape[1]
    days = np.flatnonzero(allowed | ~np.isnan(fixed))
    best = np.full(demand.shape[0], np.inf)
    steps = int(round(limit / bundle))
    for pattern in itertools.product((False, True), repeat=len(days)):
        visits = np.zeros(d_count, bool)
        visits[days[np.array(pattern, bool)]] = True
        if (~np.isnan(fixed) & ~visits).any():
            continue
        chosen = np.flatnonzero(visits)
        options = [[fixed[i]] if not np.isnan(fixed[i]) else
                   [bundle * k for k in range(steps + 1)] for i in chosen]
        for combo in itertools.product(*options):
            loads = np.zeros(d_count)
            loads[chosen] = combo
            cost = simulate(visits, loads, start, demand, limit, fee, rates, mode).total()[0]
            best = np.minimum(best, cost)
    return best


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_bound_against_brute_force_on_small_instances(mode):
    rng = np.random.default_rng(7)
    for _ in range(40):
        d_count = int(rng.integers(1, 6))
        bundle = float(rng.choice([10.0, 20.0]))
        limit = bundle * int(rng.integers(1, 5))
        demand = rng.choice([0.0, 5.0, 10.0, 15.0, 25.0, 40.0], size=(3, d_count))
        start = float(rng.choice([0.0, 10.0, 35.0]))
        allowed = rng.random(d_count) < 0.7
        fixed = np.full(d_count, np.nan)
        if rng.random() < 0.3:
            fixed[int(rng.integers(d_count))] = bundle * int(rng.integers(0, 3))
        fee = rng.choice([1.0, 5.0, 20.0], size=d_count)
        rates = CostRates(carry_rate_daily=float(rng.choice([0.0, 0.01, 0.05])),
                          handling_per_1000=float(rng.choice([0.0, 10.0, 100.0])),
                          dry_day_penalty=float(rng.choice([3.0, 30.0, 300.0])),
                          shortfall_penalty_per_1000=float(rng.choice([0.0, 50.0])))
        pf = perfect_foresight_arrays(
            demand=demand[None], start_balance=np.array([start]), limit=np.array([limit]),
            bundle=np.array([bundle]), allowed=allowed[None], fixed_load=fixed[None],
            visit_fee=fee[None], rates=rates, mode=mode)
        brute = _brute_force(demand, start, limit, bundle, allowed, fixed, fee, rates, mode)
        if mode == "swap":
            np.testing.assert_allclose(pf.cost[0], brute, rtol=1e-12, atol=1e-9)
        else:  # top-up: a lower bound (module text), never above the best plan
            assert (pf.cost[0] <= brute + 1e-9).all()


def test_swap_bound_plans_reproduce_the_bound_in_the_accounting():
    rng = np.random.default_rng(3)
    problem = random_problem(rng, terminals=4, paths=10, days=12, horizon=9)
    pf = perfect_foresight(problem, plans=True)
    assert pf.exact
    for t in range(4):
        # each path's own plan, priced by the one accounting (paths as separate terminals)
        p_count, d_count = problem.shape[1:]
        led = simulate(pf.visits[t], pf.loads[t], np.full(p_count, problem.start_balance[t]),
                       problem.demand[t][:, None, :], np.full(p_count, problem.limit[t]),
                       np.broadcast_to(problem.visit_fee[t], (p_count, d_count)), problem.rates,
                       problem.mode)
        np.testing.assert_allclose(led.total()[:, 0], pf.cost[t], rtol=1e-12)
        assert not (pf.visits[t] & ~problem.allowed[t]).any()
        assert pf.visits[t][:, problem.committed[t]].all()
        b = problem.bundle[t]
        assert np.allclose(pf.loads[t] / b, np.round(pf.loads[t] / b))
        assert (pf.loads[t] <= problem.limit[t]).all()


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_no_baseline_beats_the_bound_on_any_path(mode):
    rng = np.random.default_rng(11)
    for _ in range(5):
        problem = random_problem(rng, terminals=4, paths=20, days=14, horizon=10, mode=mode)
        bound = perfect_foresight(problem).cost
        for routine in (fixed_weekdays, days_of_cover):
            visits, loads = routine(problem)
            cost = plan_ledger(problem, visits, loads).total()
            assert (bound <= cost + 1e-9).all(), routine.__name__


def test_emergency_fee_on_any_day_only_lowers_the_bound():
    rng = np.random.default_rng(5)
    problem = random_problem(rng, terminals=3, paths=8, days=10, horizon=7)
    plain = perfect_foresight(problem).cost
    anyday = perfect_foresight(problem, anyday_fee=375.0).cost
    assert (anyday <= plain + 1e-9).all()
    # with a fee no lower than any visit fee, every emergency-free plan is still allowed
    huge = perfect_foresight(problem, anyday_fee=1e9).cost
    np.testing.assert_allclose(huge, plain)


def test_the_optimizer_plan_never_beats_the_bound_on_any_path():
    from planner.optimize import solve_plan

    rng = np.random.default_rng(17)
    for _ in range(3):
        problem = random_problem(rng, terminals=3, paths=15, days=10, horizon=7)
        result = solve_plan(problem, time_limit_s=30)
        bound = perfect_foresight(problem).cost
        cost = plan_ledger(problem, result.visits, result.loads).total()
        assert (bound <= cost + 1e-9).all()
        # and so on average: the bound is below the optimizer's expected cost
        assert bound.mean(axis=1).sum() <= result.objective + 1e-9


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_the_reference_milp_plan_never_beats_the_bound_on_any_path(mode):
    from planner.optimize.monolithic import solve_monolithic

    rng = np.random.default_rng(19)
    for _ in range(2):
        problem = random_problem(rng, terminals=2, paths=5, days=5, horizon=4, mode=mode)
        visits, loads, objective, status = solve_monolithic(problem, time_limit_s=60)
        assert status == "optimal"
        bound = perfect_foresight(problem).cost
        cost = plan_ledger(problem, visits, loads).total()
        assert (bound <= cost + 1e-9).all()


# ---------------------------------------------------------------------------------------------
# The former implementation (every candidate load of a cycle priced for every end, vectorised
# over paths), kept here as the reference of the compiled dynamic programme
# ---------------------------------------------------------------------------------------------

def _former_segment(demand: np.ndarray, levels: np.ndarray, rates,
                    return_sign: float) -> tuple[np.ndarray, np.ndarray]:
    """Cost of a cycle starting with balance ``levels`` ``[P, K]`` on the first day of
    ``demand`` ``[P, n]``, for every length ``m = 1 … n``: ``[P, K, n]`` (index ``m − 1``).

    Carry, dry days, shortfall, and ``return_sign`` × handling on what is left at the next
    visit (charged only when a next visit follows, i.e. not for the cycle reaching the last day;
    the caller drops that term for ``m = n`` when the cycle ends the days planned).
    """
    cum = np.cumsum(demand, axis=1)[:, None, :]                    # [P, 1, n]
    lev = levels[:, :, None]                                        # [P, K, 1]
    left = np.maximum(lev - cum, 0.0)                               # end balance [P, K, n]
    dry = (cum > lev) & (demand[:, None, :] > 0)
    cost = (rates.carry_rate_daily * np.cumsum(left, axis=2)
            + rates.dry_day_penalty * np.cumsum(dry, axis=2)
            + rates.shortfall_penalty_per_1000 / 1000.0 * np.maximum(cum - lev, 0.0))
    return cost, return_sign * rates.handling_per_1000 / 1000.0 * left


def _former_candidates(cum: np.ndarray, limit: float, bundle: float, mode: str) -> np.ndarray:
    """Loads worth trying for a cycle (``cum`` ``[P, n]`` cumulative demand): ``[P, K]``."""
    p_count = cum.shape[0]
    ends = np.column_stack([np.zeros(p_count), np.full(p_count, limit)])
    if mode == "swap":
        top = np.floor(limit / bundle + 1e-9) * bundle
        ends[:, 1] = top
        near = np.concatenate([np.floor(cum / bundle + 1e-9) * bundle,
                               np.ceil(cum / bundle - 1e-9) * bundle], axis=1)
        return np.clip(np.concatenate([ends, near], axis=1), 0.0, top)
    return np.clip(np.concatenate([ends, cum], axis=1), 0.0, limit)


def _former_terminal_bound(demand: np.ndarray, start: float, limit: float, bundle: float,
                           can: np.ndarray, fixed: np.ndarray, fee: np.ndarray, rates,
                           mode: str) -> np.ndarray:
    """Dynamic programme for one terminal, vectorised over paths (``demand`` ``[P, D]``)."""
    p_count, d_count = demand.shape
    handling = rates.handling_per_1000 / 1000.0
    # with swap what is left is handled when it returns; with top-up it saves loading it
    sign = 1.0 if mode == "swap" else -1.0
    must = ~np.isnan(fixed)
    must_days = np.flatnonzero(must)
    # what is left at the next visit is handled (swap) or saves loading (top-up); before a
    # committed top-up visit the load is given, so nothing is saved: its handling is charged
    # on the committed load instead, which is never more than it costs
    credit = np.ones(d_count + 1)
    credit[d_count] = 0.0
    if mode != "swap":
        credit[:d_count][must] = 0.0
    # reach[a]: the last day a cycle starting on day a (or the start, a = -1) may end before
    # the next visit; a committed visit must not be skipped
    def next_must(after: int) -> int:
        later = must_days[must_days > after]
        return int(later[0]) if later.size else d_count

    # best[:, b]: least cost of days 0 … b − 1 when a visit takes place on day b (b = D: end)
    best = np.full((p_count, d_count + 1), np.inf)

    # the start: balance `start`, no visit until day b
    stop = next_must(-1)
    seg, left = _former_segment(demand, np.full((p_count, 1), start), rates, sign)
    best[:, 0] = sign * handling * start * credit[0]
    ends = np.arange(1, stop + 1)                                   # b = 1 … stop
    if ends.size:
        value = seg[:, 0, ends - 1] + credit[ends] * left[:, 0, ends - 1]
        best[:, ends] = value

    for a in range(d_count):
        if not can[a]:
            continue
        stop = next_must(a)
        sub = demand[:, a:]
        if must[a] and mode == "swap":
            levels = np.full((p_count, 1), fixed[a])
        else:
            levels = _former_candidates(np.cumsum(sub, axis=1), limit, bundle, mode)
        loaded = np.full_like(levels, fixed[a]) if must[a] else levels
        seg, left = _former_segment(sub, levels, rates, sign)
        ends = np.arange(a + 1, stop + 1)                           # next visit (or end) b
        m = ends - a - 1
        value = (seg[:, :, m] + credit[ends] * left[:, :, m]
                 + handling * loaded[:, :, None])                  # [P, K, len(ends)]
        pick = np.argmin(value, axis=1)                             # [P, len(ends)]
        cycle = np.take_along_axis(value, pick[:, None, :], axis=1)[:, 0, :] + fee[a]
        total = best[:, a][:, None] + cycle
        better = total < best[:, ends]
        best[:, ends] = np.where(better, total, best[:, ends])

    return best[:, d_count]


def _former_bound(problem, anyday_fee=None) -> np.ndarray:
    t_count, _, d_count = problem.shape
    cost = []
    for t in range(t_count):
        fixed = problem.fixed_load[t]
        can = problem.allowed[t] | ~np.isnan(fixed)
        fee = problem.visit_fee[t].astype(float)
        if anyday_fee is not None:
            fee = np.where(can, np.minimum(fee, anyday_fee), anyday_fee)
            can = np.ones(d_count, bool)
        cost.append(_former_terminal_bound(problem.demand[t], float(problem.start_balance[t]),
                                           float(problem.limit[t]), float(problem.bundle[t]),
                                           can, fixed, fee, problem.rates, problem.mode))
    return np.array(cost)


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_bound_equals_the_former_implementation(mode):
    rng = np.random.default_rng(23)
    for k in range(12):
        days = int(rng.integers(2, 43))
        problem = random_problem(rng, terminals=3, paths=25, days=days, horizon=1, mode=mode,
                                 committed=k % 2 == 0)
        for fee in (None, 375.0):
            np.testing.assert_allclose(perfect_foresight(problem, anyday_fee=fee).cost,
                                       _former_bound(problem, anyday_fee=fee),
                                       rtol=1e-12, atol=1e-6)


def test_bound_over_a_long_replay_window_equals_the_former_implementation():
    # one path over 84 days, as in a 12-week replay, with an emergency fee on any day
    rng = np.random.default_rng(29)
    problem = random_problem(rng, terminals=4, paths=1, days=84, horizon=84)
    np.testing.assert_allclose(perfect_foresight(problem, anyday_fee=375.0).cost,
                               _former_bound(problem, anyday_fee=375.0), rtol=1e-12, atol=1e-6)
