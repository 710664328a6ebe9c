"""Reference schedule model: all terminals, days and demand paths in one MILP.

This is the sample average approximation written out literally, with no decomposition: it is
slow and only meant for tiny instances (1–3 terminals, 4–7 days, ≤ 30 demand paths), where it
is the yardstick the fast solver (`planner.optimize.solve_plan`) must match.

Indices: terminal t, demand path p, day d (0..D-1). With `load[t,d] = bundle[t] · n[t,d]`
(or the committed load) and `before[t,p,d]` the balance before the visit (the start balance
on day 0, the end balance of the day before otherwise), the model states the day's accounting
of `planner.costs` exactly:

    swap     balance_open = load + kept,          returned = before − kept,
             kept = before if no visit else 0
    top-up   balance_open + returned = before + load,
             balance_open = min(before + load, limit) on a visit day, = before otherwise
    dispensed = min(demand, balance_open)            (dry[t,p,d] = 1 ⇔ demand > balance_open)
    end_balance = balance_open − dispensed

    minimise  Σ_t,d visit_fee·visit + handling/1000 · load
              + (1/P) Σ_t,p,d [handling/1000 · returned + dry_day_penalty · dry
                               + shortfall/1000 · (demand − dispensed) + carry_rate · end_balance]

    subject to  per cycle start s (the start balance, or a visit on day a):
                cycle_dry[t,p,s] ≥ dry[t,p,d] − (visits in (s, d]) − (1 − visit[t,s])  (d ≥ s),
                Σ_p cycle_dry[t,p,s] ≤ allowed_dry[t] + extra[t,s] · visit[t, shortest end]
                (the cycle service level of `planner.optimize.problem.ServiceRule`: a cycle
                that ends on the next possible visit keeps its unavoidable risk),
                Σ_{t in depot k} visit[t,d] ≤ crew_limit[k,d],
                committed visits kept, visits only on allowed days, balance after a visit ≤ limit.

At demand == balance the machine is not dry; the model may set dry = 1 there, but that never
lowers the cost (penalties are ≥ 0, and a path counted dry only tightens the service target), so
the optimum is the accounting's optimum.
"""
from __future__ import annotations

import math
import re
import warnings
from dataclasses import dataclass

import numpy as np
import pulp

from planner.optimize.problem import PlanningProblem, service_rule

# The optimality gap must be closed (HiGHS' default mip_rel_gap is 1e-4) for this model to be a
# yardstick at 1e-6. Feasibility tolerances stay at their defaults: tightening them to 1e-9 with
# these big-M rows made HiGHS 1.16 stop at a plan 0.1 % above the optimum while reporting it
# optimal (measured on a 3-terminal top-up instance).
_HIGHS_OPTIONS = {"mip_rel_gap": 1e-9, "mip_abs_gap": 1e-9}


@dataclass
class MonolithicModel:
    """The PuLP problem and its variable families, keyed by (t, d) or (t, p, d)."""

    prob: pulp.LpProblem
    visit: dict          # (t, d) -> binary, or the constant 0/1 where the day is decided
    bundles: dict        # (t, d) -> integer bundles loaded (free visit days only)
    load: dict           # (t, d) -> affine expression or constant (currency)
    balance_open: dict   # (t, p, d) -> balance after the visit, before withdrawals
    returned: dict       # (t, p, d) -> residual (swap) or excess (top-up) returned
    dispensed: dict      # (t, p, d)
    dry: dict            # (t, p, d) -> binary: demand > balance_open
    end_balance: dict    # (t, p, d)
    path_dry: dict       # (t, p, s) -> binary: ≥ 1 dry day in the cycle starting at s (−1 =
                         # the start balance)


def _big_m_balance(problem: PlanningProblem) -> np.ndarray:
    """[T] an upper bound on any balance: nothing ever raises it above these values."""
    committed = np.where(np.isnan(problem.fixed_load), 0.0, problem.fixed_load).max(axis=1)
    return np.maximum.reduce([problem.limit, problem.start_balance, committed]).astype(float)


def _before(model: MonolithicModel, problem: PlanningProblem, t: int, p: int, d: int):
    return float(problem.start_balance[t]) if d == 0 else model.end_balance[t, p, d - 1]


def define_visits_and_loads(model: MonolithicModel, problem: PlanningProblem) -> None:
    """visit[t,d] ∈ {0,1} on allowed days (1 on committed days, 0 elsewhere);
    load = bundle · n with 0 ≤ n ≤ floor(limit / bundle) · visit, or the committed load."""
    T, D = problem.allowed.shape
    for t in range(T):
        max_bundles = math.floor(problem.limit[t] / problem.bundle[t] + 1e-9)
        for d in range(D):
            committed = problem.fixed_load[t, d]
            if not np.isnan(committed):
                model.visit[t, d] = 1
                model.load[t, d] = float(committed)
            elif problem.allowed[t, d]:
                y = model.prob.add_variable(f"visit_{t}_{d}", cat=pulp.LpBinary)
                n = model.prob.add_variable(f"bundles_{t}_{d}", lowBound=0, upBound=max_bundles,
                                    cat=pulp.LpInteger)
                model.prob += n <= max_bundles * y, f"load_only_on_visit_{t}_{d}"
                model.visit[t, d] = y
                model.bundles[t, d] = n
                model.load[t, d] = float(problem.bundle[t]) * n
            else:
                model.visit[t, d] = 0
                model.load[t, d] = 0.0


def define_balances(model: MonolithicModel, problem: PlanningProblem) -> None:
    """Continuous balance_open, returned, dispensed, end_balance ≥ 0 and dry ∈ {0,1}, with
    end_balance = balance_open − dispensed."""
    T, P, D = problem.demand.shape
    for t in range(T):
        for p in range(P):
            for d in range(D):
                key = (t, p, d)
                model.balance_open[key] = model.prob.add_variable(f"balance_open_{t}_{p}_{d}", lowBound=0)
                model.returned[key] = model.prob.add_variable(f"returned_{t}_{p}_{d}", lowBound=0)
                model.dispensed[key] = model.prob.add_variable(
                    f"dispensed_{t}_{p}_{d}", lowBound=0, upBound=float(problem.demand[key]))
                # A day with no demand can never be dry.
                model.dry[key] = (model.prob.add_variable(f"dry_{t}_{p}_{d}", cat=pulp.LpBinary)
                                  if problem.demand[key] > 0 else 0)
                model.end_balance[key] = model.prob.add_variable(f"end_balance_{t}_{p}_{d}", lowBound=0)
                model.prob += (model.end_balance[key]
                               == model.balance_open[key] - model.dispensed[key],
                               f"end_balance_{t}_{p}_{d}")


def define_swap(model: MonolithicModel, problem: PlanningProblem) -> None:
    """balance_open = load + kept, returned = before − kept, where kept (the balance left in
    the machine) = before without a visit and 0 with one: 0 ≤ kept ≤ before,
    kept ≤ M·(1 − visit), kept ≥ before − M·visit."""
    T, P, D = problem.demand.shape
    big_m = _big_m_balance(problem)
    for t in range(T):
        for p in range(P):
            for d in range(D):
                key, before, y = (t, p, d), _before(model, problem, t, p, d), model.visit[t, d]
                kept = model.prob.add_variable(f"kept_{t}_{p}_{d}", lowBound=0)
                model.prob += kept <= before, f"kept_at_most_before_{t}_{p}_{d}"
                model.prob += kept <= big_m[t] * (1 - y), f"kept_none_on_visit_{t}_{p}_{d}"
                model.prob += kept >= before - big_m[t] * y, f"kept_all_without_visit_{t}_{p}_{d}"
                model.prob += (model.balance_open[key] == model.load[t, d] + kept,
                               f"swap_balance_{t}_{p}_{d}")
                model.prob += model.returned[key] == before - kept, f"swap_residual_{t}_{p}_{d}"


def define_topup(model: MonolithicModel, problem: PlanningProblem) -> None:
    """balance_open + returned = before + load; on a visit day balance_open ≤ limit and, with
    full ∈ {0,1} ≤ visit, returned ≤ M·full and balance_open ≥ limit − M·(1 − full): so the
    excess is returned only when the machine is filled to its limit; without a visit
    returned = 0 (load is 0 then), hence balance_open = before."""
    T, P, D = problem.demand.shape
    big_m = _big_m_balance(problem)
    max_load = big_m  # a load never exceeds the limit nor a committed load
    for t in range(T):
        limit = float(problem.limit[t])
        for p in range(P):
            for d in range(D):
                key, before, y = (t, p, d), _before(model, problem, t, p, d), model.visit[t, d]
                full = (model.prob.add_variable(f"full_{t}_{p}_{d}", cat=pulp.LpBinary)
                        if not isinstance(y, int) or y == 1 else 0)
                model.prob += (model.balance_open[key] + model.returned[key]
                               == before + model.load[t, d], f"topup_balance_{t}_{p}_{d}")
                model.prob += (model.balance_open[key] <= limit + big_m[t] * (1 - y),
                               f"topup_limit_{t}_{p}_{d}")
                if not isinstance(full, int) and not isinstance(y, int):
                    model.prob += full <= y, f"full_only_on_visit_{t}_{p}_{d}"
                model.prob += (model.returned[key] <= (big_m[t] + max_load[t]) * full,
                               f"excess_only_when_full_{t}_{p}_{d}")
                model.prob += (model.balance_open[key] >= limit - big_m[t] * (1 - full),
                               f"full_means_at_limit_{t}_{p}_{d}")


def define_dispensing(model: MonolithicModel, problem: PlanningProblem) -> None:
    """dispensed = min(demand, balance_open) through the dry indicator:
    dispensed ≤ balance_open, dispensed ≤ demand (variable bound),
    dispensed ≥ demand·(1 − dry)   (not dry: all demand is served),
    dispensed ≥ balance_open − M·(1 − dry)   (dry: the machine is emptied)."""
    T, P, D = problem.demand.shape
    big_m = _big_m_balance(problem)
    for t in range(T):
        for p in range(P):
            for d in range(D):
                key = (t, p, d)
                demand, w = float(problem.demand[key]), model.dry[key]
                s, o = model.dispensed[key], model.balance_open[key]
                model.prob += s <= o, f"dispense_at_most_balance_{t}_{p}_{d}"
                model.prob += s >= demand * (1 - w), f"dispense_demand_if_not_dry_{t}_{p}_{d}"
                model.prob += s >= o - big_m[t] * (1 - w), f"dispense_balance_if_dry_{t}_{p}_{d}"


def define_service_target(model: MonolithicModel, problem: PlanningProblem) -> None:
    """The cycle service level (module text): per cycle start ``s``, at most the allowance of
    paths have a dry day before the next visit; the rule is the shared one
    (:func:`planner.optimize.problem.service_rule`)."""
    T, P, D = problem.demand.shape
    rule = service_rule(problem)

    def visit(t: int, d: int):
        return model.visit[t, d] if d < D else 1

    for t in range(T):
        starts = [-1] + [a for a in range(D) if not isinstance(model.visit[t, a], int)
                         or model.visit[t, a] == 1]
        for s in starts:
            index = s + 1
            allowed = int(rule.allowed_dry[t])
            extra = max(int(rule.unavoidable[t, index]) - allowed, 0)
            if allowed >= P:
                continue
            opened = 0 if s < 0 else 1 - visit(t, s)
            for p in range(P):
                u = model.prob.add_variable(f"cycle_dry_{t}_{p}_{index}", cat=pulp.LpBinary)
                model.path_dry[t, p, s] = u
                later = 0
                for d in range(max(s, 0), D):
                    if d > s:
                        later = later + visit(t, d)
                    if not (isinstance(model.dry[t, p, d], int) and model.dry[t, p, d] == 0):
                        model.prob += (u >= model.dry[t, p, d] - later - opened,
                                       f"cycle_dry_{t}_{p}_{index}_{d}")
            end = int(rule.shortest_end[t, index])
            model.prob += (pulp.lpSum(model.path_dry[t, p, s] for p in range(P))
                           <= allowed + extra * visit(t, end), f"service_target_{t}_{index}")


def define_crew_limits(model: MonolithicModel, problem: PlanningProblem) -> None:
    """Σ_{t in depot k} visit[t,d] ≤ crew_limit[k,d] (committed visits count)."""
    D = problem.allowed.shape[1]
    for k, depot in enumerate(problem.depots):
        depot_name = re.sub(r"\W", "_", depot)   # PuLP names allow no spaces
        members = np.flatnonzero(problem.depot_of == k)
        for d in range(D):
            visits = pulp.lpSum(model.visit[t, d] for t in members)
            if visits.isNumericalConstant():
                continue  # committed visits only: fixed data, nothing left to decide
            model.prob += (visits <= int(problem.crew_limit[k, d]),
                           f"crew_limit_{depot_name}_{d}")



def define_objective(model: MonolithicModel, problem: PlanningProblem) -> None:
    """Visit fees and handling on loads (the same on every path) plus the path average of
    handling on returns, dry-day and shortfall penalties and carry on the end balance."""
    T, P, D = problem.demand.shape
    rates = problem.rates
    handling = rates.handling_per_1000 / 1000.0
    shortfall = rates.shortfall_penalty_per_1000 / 1000.0
    deterministic = pulp.lpSum(
        float(problem.visit_fee[t, d]) * model.visit[t, d] + handling * model.load[t, d]
        for t in range(T) for d in range(D))
    per_path = pulp.lpSum(
        handling * model.returned[key]
        + rates.dry_day_penalty * model.dry[key]
        + shortfall * (float(problem.demand[key]) - model.dispensed[key])
        + rates.carry_rate_daily * model.end_balance[key]
        for key in model.end_balance)
    model.prob += deterministic + (1.0 / P) * per_path


def build_monolithic_model(problem: PlanningProblem) -> MonolithicModel:
    """The whole reference MILP of `problem` (not solved)."""
    model = MonolithicModel(pulp.LpProblem("reference_schedule", pulp.LpMinimize),
                            {}, {}, {}, {}, {}, {}, {}, {}, {})
    define_visits_and_loads(model, problem)
    define_balances(model, problem)
    if problem.mode == "swap":
        define_swap(model, problem)
    else:
        define_topup(model, problem)
    define_dispensing(model, problem)
    define_service_target(model, problem)
    define_crew_limits(model, problem)
    define_objective(model, problem)
    return model


def _solver(name: str, time_limit_s: float) -> pulp.LpSolver:
    if name == "highs":
        return pulp.HiGHS(msg=False, timeLimit=time_limit_s, threads=1, **_HIGHS_OPTIONS)
    options = dict(msg=False, timeLimit=time_limit_s, gapRel=1e-9, gapAbs=1e-9)
    cbc = pulp.COIN_CMD(**options)
    if cbc.available():
        return cbc
    # the CBC binary bundled with PuLP 3 is reached only through the deprecated PULP_CBC_CMD
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        return pulp.PULP_CBC_CMD(**options)


def _status(prob: pulp.LpProblem) -> str:
    if prob.sol_status == pulp.LpSolutionOptimal:
        return "optimal"
    if prob.sol_status == pulp.LpSolutionIntegerFeasible:
        return "time_limit"
    if prob.status == pulp.LpStatusInfeasible:
        return "infeasible"
    return "not_solved"


def _value(x) -> float:
    return float(x) if isinstance(x, (int, float)) else float(pulp.value(x))


def solve_monolithic(problem: PlanningProblem, *, time_limit_s: float = 120,
                     solver: str = "highs") -> tuple[np.ndarray, np.ndarray, float, str]:
    """Solve the reference MILP of `problem`.

    Returns `(visits [T, D] bool, loads [T, D] currency, objective, status)`: the objective is the
    expected cost over all D days (as `planner.costs.simulate` accounts it); status is
    "optimal", "time_limit" (best plan found), "infeasible" or "not_solved" (then the plan is
    empty and the objective NaN). HiGHS is used, CBC when HiGHS is not installed or fails
    (`solver="cbc"` asks for CBC directly).
    """
    model = build_monolithic_model(problem)
    names = ["highs", "cbc"] if solver == "highs" else ["cbc"]
    status = "not_solved"
    for name in names:
        solver_obj = _solver(name, time_limit_s)
        if not solver_obj.available():
            continue
        model.prob.solve(solver_obj)
        status = _status(model.prob)
        if status != "not_solved":
            break
    T, D = problem.allowed.shape
    if status not in ("optimal", "time_limit"):
        return np.zeros((T, D), bool), np.zeros((T, D)), math.nan, status
    visits = np.array([[_value(model.visit[t, d]) > 0.5 for d in range(D)] for t in range(T)])
    loads = np.zeros((T, D))
    for (t, d), load in model.load.items():
        if (t, d) in model.bundles:
            loads[t, d] = problem.bundle[t] * round(_value(model.bundles[t, d]))
        else:
            loads[t, d] = _value(load)
    return visits, loads, float(pulp.value(model.prob.objective)), status
