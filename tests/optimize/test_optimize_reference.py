"""The schedule against outside references.

- The fast solver (`planner.optimize.solve_plan`, a decomposition) against the monolithic
  sample-average MILP (`planner.optimize.monolithic`) and against brute-force enumeration of
  visit patterns × load levels: all three must agree on the optimum on instances small enough
  to solve them all.
- Baumol (1952), Wagner & Whitin (1958) and the newsvendor critical fractile (Arrow, Harris &
  Marschak 1951), reproduced through our optimizer; normal quantiles from Abramowitz & Stegun.
"""
from __future__ import annotations

import functools
from dataclasses import replace
import itertools
import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

from planner.costs import CostRates, simulate
import planner.optimize as optimize
from planner.optimize import topup
from planner.optimize.monolithic import solve_monolithic
from planner.costs import cycle_dry_counts
from plain import meets_target
from planner.optimize.problem import PlanningProblem, evaluate_plan, service_rule
from planner.demo.synthetic import crew_feasible_optimum

REL = 1e-6          # agreement asked of the decomposition and the reference model


# --------------------------------------------------------------------------------------------
# Instances
# --------------------------------------------------------------------------------------------


def make_problem(demand, *, start_balance, limit, bundle, rates, mode="swap",
                 visit_fee=100.0, allowed=None, fixed_load=None, depot_of=None,
                 crew_limit=None, horizon_days=None, max_dry_probability=1.0,
                 start="2026-03-02") -> PlanningProblem:
    """A PlanningProblem from plain numbers (scalars are broadcast over terminals / days)."""
    demand = np.asarray(demand, dtype=float)
    if demand.ndim == 2:
        demand = demand[None]
    t_count, _, d_count = demand.shape

    def per_terminal(x):
        return np.broadcast_to(np.asarray(x, dtype=float), (t_count,)).copy()

    depot_of = np.zeros(t_count, int) if depot_of is None else np.asarray(depot_of)
    k_count = int(depot_of.max()) + 1
    crew = np.full((k_count, d_count), t_count) if crew_limit is None else \
        np.broadcast_to(np.asarray(crew_limit, int), (k_count, d_count)).copy()
    return PlanningProblem(
        terminal_ids=tuple(f"BRH-{i + 1:03d}" for i in range(t_count)),
        depots=tuple(f"Depot {chr(65 + k)}" for k in range(k_count)),
        depot_of=depot_of,
        dates=pd.date_range(start, periods=d_count, freq="D"),
        horizon_days=d_count if horizon_days is None else horizon_days,
        demand=demand,
        start_balance=per_terminal(start_balance),
        limit=per_terminal(limit),
        bundle=per_terminal(bundle),
        allowed=np.ones((t_count, d_count), bool) if allowed is None else np.asarray(allowed),
        fixed_load=np.full((t_count, d_count), np.nan) if fixed_load is None
        else np.asarray(fixed_load, dtype=float),
        visit_fee=np.broadcast_to(np.asarray(visit_fee, dtype=float), (t_count, d_count)).copy(),
        crew_limit=crew,
        rates=rates,
        mode=mode,
        max_dry_probability=max_dry_probability,
    )


# Invented rates of a tiny network: carry inflated (a week of cash costs more than a visit)
# so that the trade-off between visiting and loading is visible within 4–7 days.
TINY_RATES = CostRates(carry_rate_daily=0.004, handling_per_1000=0.8, dry_day_penalty=300.0,
                       shortfall_penalty_per_1000=5.0)


def seeded_problem(seed: int, *, terminals=2, paths=12, days=6, tail_days=1, mode="swap",
                   bundles=8, max_dry_probability=0.2, crew_limit=None, **extra) -> PlanningProblem:
    """Invented demand around 2,000 a day (gamma, persistent level per path, whole tens);
    limit `bundles` × 1,000; start balance below a day or two of demand."""
    rng = np.random.default_rng(seed)
    base = rng.uniform(1500, 2500, size=(terminals, 1, 1))
    level = rng.lognormal(0.0, 0.15, size=(terminals, paths, 1))
    demand = np.round(base * level * rng.gamma(6.0, 1 / 6.0, size=(terminals, paths, days)), -1)
    start = np.round(rng.uniform(1000, 4000, size=terminals), -1)
    return make_problem(demand, start_balance=extra.pop("start_balance", start), limit=bundles * 1000.0, bundle=1000.0,
                        rates=extra.pop("rates", TINY_RATES), mode=mode,
                        visit_fee=extra.pop("visit_fee", 100.0), crew_limit=crew_limit,
                        horizon_days=days - tail_days,
                        max_dry_probability=max_dry_probability, **extra)


# --------------------------------------------------------------------------------------------
# Brute force: every visit pattern × every load level, exactly costed by `costs.simulate`
# --------------------------------------------------------------------------------------------


def _terminal_plans(problem: PlanningProblem, t: int):
    """All plans of terminal t: (patterns [M, D] bool, loads [M, D])."""
    d_count = problem.shape[2]
    levels = problem.bundle[t] * np.arange(int(problem.limit[t] // problem.bundle[t]) + 1)
    committed = ~np.isnan(problem.fixed_load[t])
    free = np.flatnonzero(problem.allowed[t] & ~committed)
    patterns, loads = [], []
    for chosen in itertools.product([False, True], repeat=len(free)):
        days = free[np.array(chosen, bool)]
        for amounts in itertools.product(levels, repeat=len(days)):
            visit = committed.copy()
            load = np.where(committed, problem.fixed_load[t], 0.0)
            visit[days] = True
            load[days] = amounts
            patterns.append(visit)
            loads.append(load)
    return np.array(patterns).reshape(-1, d_count), np.array(loads).reshape(-1, d_count)


def brute_force(problem: PlanningProblem) -> float:
    """The optimum by enumeration (tiny instances only: ~10⁴ plans per terminal)."""
    t_count, p_count, d_count = problem.shape
    rule = service_rule(problem)
    best_by_pattern = []     # per terminal: {visit pattern: least expected cost}
    for t in range(t_count):
        visits, loads = _terminal_plans(problem, t)
        m = len(visits)
        ledger = simulate(visits, loads, np.full(m, problem.start_balance[t]),
                          np.broadcast_to(problem.demand[t], (m, p_count, d_count)),
                          np.full(m, problem.limit[t]),
                          np.broadcast_to(problem.visit_fee[t], (m, d_count)),
                          problem.rates, problem.mode)
        cost = ledger.expected_cost()
        ok = rule.excess(visits, cycle_dry_counts(ledger, visits), np.full(m, t)) == 0
        best: dict[tuple, float] = {}
        for pattern, c in zip(map(tuple, visits[ok]), cost[ok]):
            best[pattern] = min(best.get(pattern, math.inf), c)
        best_by_pattern.append(best)
    return crew_feasible_optimum(problem, best_by_pattern)


# --------------------------------------------------------------------------------------------
# The monolithic model is exact: its objective is the accounting of its own plan
# --------------------------------------------------------------------------------------------


def check_monolithic(problem: PlanningProblem):
    visits, loads, objective, status = solve_monolithic(problem, time_limit_s=60)
    assert status == "optimal"
    ledger = evaluate_plan(problem, visits, loads)
    assert objective == pytest.approx(ledger.expected_cost().sum(), rel=1e-9)
    assert meets_target(problem, visits, ledger)
    return visits, loads, objective


def check_same_optimum(problem: PlanningProblem):
    """solve_plan's objective equals the monolithic optimum; returns both results."""
    _, _, reference = check_monolithic(problem)
    result = optimize.solve_plan(problem, time_limit_s=60)
    assert meets_target(problem, result.visits, result.ledger)
    assert result.objective == pytest.approx(reference, rel=REL), (
        f"solve_plan {result.objective:.6f} ({result.status}) vs monolithic {reference:.6f}")
    return result, reference


# --------------------------------------------------------------------------------------------
# Decomposition = monolithic = brute force
# --------------------------------------------------------------------------------------------


def tiniest_problem(mode: str) -> PlanningProblem:
    # 1 terminal, 8 paths, 4 days (3 in the horizon + 1 tail), 6 load levels:
    # (1 + 6)^4 = 2,401 plans for the brute force.
    return seeded_problem(3, terminals=1, paths=8, days=4, tail_days=1, bundles=6, mode=mode,
                          max_dry_probability=0.25)


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_monolithic_equals_brute_force_on_tiniest(mode):
    problem = tiniest_problem(mode)
    _, _, objective = check_monolithic(problem)
    assert objective == pytest.approx(brute_force(problem), rel=1e-9)


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_monolithic_equals_brute_force_above_limit_with_committed_visit(mode):
    # start balance above the limit (the top-up returns the excess) and a committed visit
    fixed = np.full((1, 4), np.nan)
    fixed[0, 1] = 2000.0
    problem = seeded_problem(7, terminals=1, paths=6, days=4, tail_days=1, bundles=5, mode=mode,
                             max_dry_probability=0.2, start_balance=[6500.0], fixed_load=fixed)
    _, _, objective = check_monolithic(problem)
    assert objective == pytest.approx(brute_force(problem), rel=1e-9)


def test_monolithic_equals_brute_force_with_crew_limit():
    # two terminals, one crew a day: the brute force combines the terminals' best plan per
    # visit pattern under the crew limit
    shape = dict(terminals=2, paths=6, days=4, tail_days=1, bundles=8, max_dry_probability=0.34)
    problem = seeded_problem(5, crew_limit=1, **shape)
    _, _, objective = check_monolithic(problem)
    assert objective == pytest.approx(brute_force(problem), rel=1e-9)
    assert brute_force(seeded_problem(5, crew_limit=2, **shape)) < objective - 1.0   # binds


def test_monolithic_cbc_agrees_with_highs():
    problem = tiniest_problem("swap")
    _, _, highs, _ = solve_monolithic(problem, solver="highs")
    _, _, cbc, status = solve_monolithic(problem, solver="cbc")
    assert status == "optimal"
    assert cbc == pytest.approx(highs, rel=1e-6)


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_decomposition_equals_brute_force_on_tiniest(mode):
    problem = tiniest_problem(mode)
    result = optimize.solve_plan(problem, time_limit_s=60)
    assert result.objective == pytest.approx(brute_force(problem), rel=REL)


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_decomposition_equals_monolithic_swap(seed):
    check_same_optimum(seeded_problem(seed, terminals=2, paths=8, days=5, tail_days=1))


def test_decomposition_equals_monolithic_binding_service_target():
    # dry days cheap, cash dear: without the service target the optimum accepts dry paths
    rates = CostRates(carry_rate_daily=0.01, handling_per_1000=0.8, dry_day_penalty=20.0)
    tight = seeded_problem(21, terminals=1, paths=10, days=6, tail_days=1, rates=rates,
                           max_dry_probability=0.1)
    loose = seeded_problem(21, terminals=1, paths=10, days=6, tail_days=1, rates=rates,
                           max_dry_probability=1.0)
    result, reference = check_same_optimum(tight)
    _, _, unconstrained, _ = solve_monolithic(loose)
    assert unconstrained < reference - 1.0                       # the target binds
    assert result.dry_probability[0] <= 0.1 + 1e-12


def test_decomposition_equals_monolithic_binding_crew_limit():
    # three terminals of one depot, one crew a day; a limit of 12 bundles lets one visit
    # last the horizon, and the start balances let every terminal wait a day or more
    shape = dict(terminals=3, paths=8, days=5, tail_days=1, bundles=12, max_dry_probability=0.25,
                 start_balance=[4000.0, 6000.0, 8000.0])
    tight = seeded_problem(31, crew_limit=1, **shape)
    free = seeded_problem(31, crew_limit=3, **shape)
    result, reference = check_same_optimum(tight)
    _, _, unconstrained, _ = solve_monolithic(free)
    assert unconstrained < reference - 1.0                       # the crew limit binds
    per_day = np.zeros_like(tight.crew_limit)
    np.add.at(per_day, tight.depot_of, result.visits.astype(int))
    assert (per_day <= tight.crew_limit).all()


def test_decomposition_equals_monolithic_committed_visit():
    fixed = np.full((2, 5), np.nan)
    fixed[0, 2] = 4000.0                                          # committed: day 2, 4 bundles
    allowed = np.ones((2, 5), bool)
    allowed[:, :2] = False                                        # two lock days
    allowed[0, 2] = True
    problem = seeded_problem(41, terminals=2, paths=8, days=5, tail_days=1, fixed_load=fixed,
                             allowed=allowed, start_balance=[5000.0, 6000.0])
    result, _ = check_same_optimum(problem)
    assert result.visits[0, 2] and result.loads[0, 2] == 4000.0
    assert not result.visits[:, :2].any()


@pytest.mark.parametrize("seed, terminals, paths", [(51, 1, 10), (52, 2, 8)])
def test_decomposition_against_monolithic_topup(seed, terminals, paths):
    """Top-up does not separate by cycle (the residual stays in the machine); the decomposition
    is compared and its difference reported, not hidden."""
    problem = seeded_problem(seed, terminals=terminals, paths=paths, days=5, tail_days=1,
                             mode="topup")
    _, _, reference = check_monolithic(problem)
    result = optimize.solve_plan(problem, time_limit_s=60)
    assert result.objective == pytest.approx(
        evaluate_plan(problem, result.visits, result.loads).expected_cost().sum(), rel=1e-9)
    difference = (result.objective - reference) / reference
    print(f"top-up: solve_plan {result.objective:.6f} ({result.status}), "
          f"monolithic {reference:.6f}, relative difference {difference:.3e}")
    assert difference >= -REL                                     # the reference is the optimum
    assert difference <= REL, f"decomposition not exact in top-up mode: {difference:.3e}"


# Beyond `planner.optimize.topup.ENUMERATION_LIMIT` plans per terminal (here 10^6 and more:
# 6–7 free days, 10–12 load levels) a top-up terminal small enough for its own reference MILP
# (paths × days ≤ `planner.optimize.topup.EXACT_PRICING_LIMIT`) is priced exactly by it in
# column generation, with a Lagrangian bound. Beyond that limit the decomposition searches
# loads and visit days and proves no bound; measured with that search alone: seeds 60–71 (1 and
# 2 terminals) all reach the monolithic optimum; of 124 random one-terminal instances of this
# size, 2 did not (+0.27 %, +0.81 %); the first is kept as TOPUP_MISSED.
TOPUP_LARGE = dict(terminals=1, paths=10, days=6, tail_days=1, mode="topup", bundles=10)
TOPUP_MISSED = dict(seed=572495, terminals=1, paths=13, days=7, tail_days=1, mode="topup",
                    bundles=9, visit_fee=50.0, max_dry_probability=0.3,
                    rates=CostRates(carry_rate_daily=0.01, handling_per_1000=3.0,
                                    dry_day_penalty=1000.0))
# two terminals beyond enumeration sharing one crew a day: the crew row binds
TOPUP_CREWS = dict(terminals=2, paths=8, days=6, tail_days=1, mode="topup", bundles=10,
                   crew_limit=1)


def topup_case(case) -> PlanningProblem:
    if case == "missed":
        options = dict(TOPUP_MISSED)
        return seeded_problem(options.pop("seed"), **options)
    if case == "crews":
        return seeded_problem(61, **TOPUP_CREWS)
    return seeded_problem(case, **TOPUP_LARGE)


@functools.lru_cache(maxsize=None)
def topup_reference(case) -> float:
    return check_monolithic(topup_case(case))[2]


@pytest.mark.parametrize("case", [67, "missed", "crews"])
def test_topup_beyond_enumeration_equals_monolithic(case):
    problem = topup_case(case)
    assert all(topup.plan_count(problem, t) * problem.shape[1] * problem.shape[2]
               > topup.ENUMERATION_LIMIT for t in range(problem.shape[0]))
    reference = topup_reference(case)
    result = optimize.solve_plan(problem, time_limit_s=120)
    print(f"top-up beyond enumeration, case {case}: solve_plan {result.objective:.4f} "
          f"({result.status}, bound {result.bound:.4f}), monolithic {reference:.4f}")
    assert result.objective == pytest.approx(reference, rel=REL)
    assert result.status == "optimal"
    assert result.bound <= reference * (1 + REL)     # a true bound
    assert result.gap <= 0.005
    if case == "crews":
        assert (result.visits.sum(axis=0) <= 1).all()
        two = replace(problem, crew_limit=np.full_like(problem.crew_limit, 2))
        assert optimize.solve_plan(two, time_limit_s=120).objective < result.objective - 1e-6


@pytest.mark.parametrize("case", [67, "missed"])
def test_topup_search_beyond_exact_pricing_is_honest(case, monkeypatch):
    """Without exact pricing (larger terminals) the search proves nothing and says so."""
    monkeypatch.setattr(topup, "EXACT_PRICING_LIMIT", 0)
    problem = topup_case(case)
    reference = topup_reference(case)
    result = optimize.solve_plan(problem, time_limit_s=60)
    difference = (result.objective - reference) / reference
    print(f"top-up search, case {case}: solve_plan {result.objective:.4f} "
          f"({result.status}, gap {result.gap:.0%}), monolithic {reference:.4f}, "
          f"relative difference {difference:.3e}")
    assert difference >= -REL                       # never below the optimum
    assert result.bound <= reference * (1 + REL)    # the bound it reports is a true bound
    if difference > REL:
        assert result.status != "optimal" and result.gap > 0


# --------------------------------------------------------------------------------------------
# Baumol (1952): square-root law of the cash balance
# --------------------------------------------------------------------------------------------


def test_baumol_square_root_load():
    # Baumol, W. (1952) QJE 66(4) 545–556: C* = √(2bT/i); per day with constant demand d,
    # visit fee F and daily carry rate r: load* = √(2Fd/r), cycle* = load*/d days.
    d, fee, r = 1000.0, 120.0, 0.01            # invented; cycle* = √24 = 4.90 days
    days = 60
    load_star = math.sqrt(2 * fee * d / r)     # 4,898.98
    cycle_star = load_star / d
    problem = make_problem(np.full((1, days), d), start_balance=0.0, limit=20_000.0,
                           bundle=1000.0, visit_fee=fee, max_dry_probability=0.0,
                           rates=CostRates(carry_rate_daily=r, handling_per_1000=0.0,
                                           dry_day_penalty=1e6))
    result = optimize.solve_plan(problem, time_limit_s=60)
    visit_days = np.flatnonzero(result.visits[0])
    cycles = np.diff(np.append(visit_days, days))
    loads = result.loads[0, visit_days]
    # The plan works in whole days: the cost of one cycle of k days is F + r·d·k(k − 1)/2
    # (carry on the nights' balances), convex in k, so with 60 days the optimum is 12 equal
    # cycles of 5 days (cycle* = 4.90): 12 × (120 + 10 · 10) = 2,640. Cycles of 4 days would
    # cost 15 × (120 + 10 · 6) = 2,700 and of 6 days 10 × (120 + 10 · 15) = 2,700.
    assert round(cycle_star) == 5
    assert list(cycles) == [5] * 12
    assert list(loads) == [5 * d] * 12              # exactly the cycle's demand, no dry day
    assert abs(loads[0] - load_star) <= d          # the square-root load in whole days
    assert result.objective == pytest.approx(2_640.0)
    assert 2_640.0 < 15 * (fee + r * d * 6) and 2_640.0 < 10 * (fee + r * d * 15)


# --------------------------------------------------------------------------------------------
# Wagner & Whitin (1958): dynamic lot sizing
# --------------------------------------------------------------------------------------------

# Wagner, H. & Whitin, T. (1958) "Dynamic version of the economic lot size model",
# Management Science 5(1) 89–96, the 12-period example (values as in the shared references).
WW_DEMAND = [69, 29, 36, 61, 61, 26, 34, 67, 45, 67, 79, 56]
WW_SETUP = [85, 102, 102, 101, 98, 114, 105, 86, 119, 110, 98, 114]
WW_OPTIMUM = 864                                   # Wagner & Whitin (1958)
WW_ORDERS = [(1, 2), (3, 4), (5, 7), (8, 9), (10, 10), (11, 12)]   # periods covered, 1-based


def wagner_whitin_problem() -> PlanningProblem:
    # Mapping: a period is a day (no tail: D = horizon = 12); setup cost → visit fee of the
    # day; holding 1 per unit carried into the next period → carry_rate_daily = 1 on the end
    # balance (WW holds the stock left at the end of a period, our end balance); bundle 1;
    # start balance 0; limit and dry penalty huge so that every period's demand is met; no
    # handling. Swap mode: WW orders arrive when the stock is zero (the zero-inventory
    # property of its optimum), so the residual returned at a visit is 0 and swap = top-up;
    # the machine ends the last period empty (carry on anything left would only add cost).
    return make_problem(np.array([WW_DEMAND], float), start_balance=0.0, limit=10_000.0,
                        bundle=1.0, visit_fee=np.array(WW_SETUP, float), max_dry_probability=0.0,
                        rates=CostRates(carry_rate_daily=1.0, handling_per_1000=0.0,
                                        dry_day_penalty=1e7))


def test_wagner_whitin_arithmetic():
    # 864 = setups 85 + 102 + 98 + 86 + 110 + 98 = 579, plus holding on the end balances
    # 29 (p1) + 61 (p3) + 60 + 34 (p5, p6) + 45 (p8) + 56 (p11) = 285.
    setups = sum(WW_SETUP[a - 1] for a, _ in WW_ORDERS)
    holding = sum(sum(WW_DEMAND[t:b]) for a, b in WW_ORDERS for t in range(a, b))
    assert (setups, holding, setups + holding) == (579, 285, WW_OPTIMUM)


@pytest.mark.parametrize("solver", ["decomposition", "monolithic"])
def test_wagner_whitin_optimum(solver):
    problem = wagner_whitin_problem()
    if solver == "decomposition":
        result = optimize.solve_plan(problem, time_limit_s=60)
        visits, loads, objective = result.visits[0], result.loads[0], result.objective
    else:
        visits, loads, objective, _ = solve_monolithic(problem)
        visits, loads = visits[0], loads[0]
    assert objective == pytest.approx(WW_OPTIMUM, abs=1e-6)
    assert list(np.flatnonzero(visits) + 1) == [a for a, _ in WW_ORDERS]
    assert list(loads[visits]) == [sum(WW_DEMAND[a - 1:b]) for a, b in WW_ORDERS]


# --------------------------------------------------------------------------------------------
# Newsvendor critical fractile and the service target as a quantile
# --------------------------------------------------------------------------------------------

# Abramowitz & Stegun (1964), Table 26.5 (also NIST e-Handbook 1.3.6.7.1): upper-tail normal
# quantiles.
Z_TABLE = {0.90: 1.281552, 0.95: 1.644854, 0.99: 2.326348}


def test_normal_quantiles_match_scipy():
    for p, z in Z_TABLE.items():
        assert norm.ppf(p) == pytest.approx(z, abs=5e-7)   # table printed to 6 decimals


NEWSVENDOR_PATHS = 20_001   # 0.8 · 20,001 is not whole: the sample quantile is unique
MU, SIGMA = 1000.0, 200.0   # demand Normal(1000, 200) (the shared references' example)


def newsvendor_demand() -> np.ndarray:
    rng = np.random.default_rng(20260302)
    return np.maximum(np.round(rng.normal(MU, SIGMA, size=(1, NEWSVENDOR_PATHS, 1))), 0.0)


def quantile_tolerance(p: float) -> float:
    # Standard error of a sample p-quantile: √(p(1 − p)/P) / f(x_p) with f the normal density
    # (asymptotic result, e.g. any text on order statistics); 4 standard errors.
    return 4 * math.sqrt(p * (1 - p) / NEWSVENDOR_PATHS) / (norm.pdf(norm.ppf(p)) / SIGMA)


def test_newsvendor_critical_fractile():
    # Newsvendor (Arrow, Harris & Marschak 1951): underage cu = 40 per unit short (shortfall
    # penalty 40,000 per 1,000), overage co = 10 per unit left (carry on the end balance, one
    # day) → F(Q*) = cu / (cu + co) = 0.8, Q* = 1000 + 200 · z(0.8) = 1168.32.
    demand = newsvendor_demand()
    problem = make_problem(demand, start_balance=0.0, limit=3000.0, bundle=1.0, visit_fee=0.0,
                           rates=CostRates(carry_rate_daily=10.0, handling_per_1000=0.0,
                                           dry_day_penalty=0.0, shortfall_penalty_per_1000=40_000.0))
    q_star = MU + SIGMA * norm.ppf(0.8)
    assert q_star == pytest.approx(1168.32, abs=0.005)      # shared references
    result = optimize.solve_plan(problem, time_limit_s=60)
    load = result.loads[0, 0]
    # the sample-average optimum is the sample's critical-fractile order statistic exactly:
    # the cost's slope 10·#{x < Q} − 40·#{x > Q} changes sign at the ⌈0.8·P⌉-th smallest demand
    assert load == np.sort(demand.ravel())[math.ceil(0.8 * NEWSVENDOR_PATHS) - 1]
    assert abs(load - q_star) <= quantile_tolerance(0.8)


@pytest.mark.parametrize("p", sorted(Z_TABLE))
def test_service_target_is_a_demand_quantile(p):
    # With a dry penalty of 0 and carry on what is left, the cheapest load meeting
    # "P(dry) ≤ 1 − p" is the p-quantile of demand: μ + σ · z(p) (Abramowitz & Stegun 26.5).
    demand = newsvendor_demand()
    problem = make_problem(demand, start_balance=0.0, limit=3000.0, bundle=1.0, visit_fee=0.0,
                           max_dry_probability=1 - p,
                           rates=CostRates(carry_rate_daily=1.0, handling_per_1000=0.0,
                                           dry_day_penalty=0.0))
    result = optimize.solve_plan(problem, time_limit_s=60)
    load = result.loads[0, 0]
    allowed_dry = math.floor((1 - p) * NEWSVENDOR_PATHS + 1e-9)
    # the least load leaving at most `allowed_dry` paths with demand above it
    assert load == np.sort(demand.ravel())[NEWSVENDOR_PATHS - allowed_dry - 1]
    assert abs(load - (MU + SIGMA * Z_TABLE[p])) <= quantile_tolerance(p)
