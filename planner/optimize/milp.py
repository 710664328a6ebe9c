"""A small array-based linear model: named families of variables and constraints, solved by
HiGHS (through ``highspy`` directly, fast for the many small models of the decomposition) or
through PuLP with any of its solvers (``pulp.HiGHS``, CBC as the fallback).

A model is built by ``define_*`` functions that each add one family over its whole index;
every variable and constraint is named after its index (``x-3-7-12``, ``crew-limit-North-4``)
so a written model (:meth:`LinearModel.to_pulp`) reads like its mathematics. Building, solving
and reading the solution are separate steps.
"""
from __future__ import annotations

import math
import os
import sys
from dataclasses import dataclass, field

import numpy as np

INF = math.inf


@dataclass
class LinearModel:
    """``min cost·x`` s.t. ``row_lower ≤ A x ≤ row_upper``, ``lower ≤ x ≤ upper``, some x
    integer."""

    name: str = "model"
    cost: list = field(default_factory=list)
    lower: list = field(default_factory=list)
    upper: list = field(default_factory=list)
    integer: list = field(default_factory=list)
    col_names: list = field(default_factory=list)
    row_lower: list = field(default_factory=list)
    row_upper: list = field(default_factory=list)
    row_names: list = field(default_factory=list)
    # constraint entries as (row, column, value) triples, kept as arrays per family
    entries_row: list = field(default_factory=list)
    entries_col: list = field(default_factory=list)
    entries_val: list = field(default_factory=list)
    offset: float = 0.0

    @property
    def n_cols(self) -> int:
        return sum(len(c) for c in self.cost)

    @property
    def n_rows(self) -> int:
        return sum(len(r) for r in self.row_lower)

    def add_variables(self, names: list[str], cost, lower=0.0, upper=INF,
                      integer: bool = False) -> np.ndarray:
        """Add one family of variables; returns their column indices."""
        n = len(names)
        start = self.n_cols
        self.cost.append(np.broadcast_to(np.asarray(cost, dtype=float), (n,)).copy())
        self.lower.append(np.broadcast_to(np.asarray(lower, dtype=float), (n,)).copy())
        self.upper.append(np.broadcast_to(np.asarray(upper, dtype=float), (n,)).copy())
        self.integer.append(np.full(n, bool(integer)))
        self.col_names.extend(names)
        return np.arange(start, start + n)

    def add_constraints(self, names: list[str], rows: np.ndarray, cols: np.ndarray,
                        values: np.ndarray, lower=-INF, upper=INF) -> np.ndarray:
        """Add one family of constraints ``lower ≤ Σ values·x[cols] ≤ upper``.

        ``rows`` numbers the new constraints from 0 (entry ``i`` belongs to constraint
        ``rows[i]``); returns the global row indices.
        """
        n = len(names)
        start = self.n_rows
        self.row_lower.append(np.broadcast_to(np.asarray(lower, dtype=float), (n,)).copy())
        self.row_upper.append(np.broadcast_to(np.asarray(upper, dtype=float), (n,)).copy())
        self.row_names.extend(names)
        self.entries_row.append(np.asarray(rows, dtype=np.int64) + start)
        self.entries_col.append(np.asarray(cols, dtype=np.int64))
        self.entries_val.append(np.asarray(values, dtype=float))
        return np.arange(start, start + n)

    def arrays(self) -> dict[str, np.ndarray]:
        """The model as flat arrays (column-wise sparse matrix)."""
        cat = lambda parts, dtype=float: (np.concatenate(parts).astype(dtype) if parts
                                          else np.zeros(0, dtype))
        rows = cat(self.entries_row, np.int64)
        cols = cat(self.entries_col, np.int64)
        vals = cat(self.entries_val)
        order = np.lexsort((rows, cols))
        rows, cols, vals = rows[order], cols[order], vals[order]
        n = self.n_cols
        start = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(cols, minlength=n), out=start[1:])
        return {"cost": cat(self.cost), "lower": cat(self.lower), "upper": cat(self.upper),
                "integer": cat(self.integer, bool), "row_lower": cat(self.row_lower),
                "row_upper": cat(self.row_upper), "start": start, "index": rows,
                "value": vals}

    def to_pulp(self):
        """The same model as a ``pulp.LpProblem`` with the same names (for CBC or writing)."""
        import pulp

        a = self.arrays()
        prob = pulp.LpProblem(_pulp_name(self.name), pulp.LpMinimize)
        xs = []
        for j, name in enumerate(self.col_names):
            lo = None if a["lower"][j] == -INF else float(a["lower"][j])
            up = None if a["upper"][j] == INF else float(a["upper"][j])
            cat = pulp.LpInteger if a["integer"][j] else pulp.LpContinuous
            if a["integer"][j] and lo == 0 and up == 1:
                cat = pulp.LpBinary
            xs.append(prob.add_variable(_pulp_name(name), lowBound=lo, upBound=up, cat=cat))
        prob += pulp.lpSum(float(c) * x for c, x in zip(a["cost"], xs) if c != 0) + self.offset
        terms: list[list] = [[] for _ in self.row_names]
        for j in range(len(xs)):
            for i in range(a["start"][j], a["start"][j + 1]):
                terms[a["index"][i]].append((xs[j], float(a["value"][i])))
        for r, raw in enumerate(self.row_names):
            name = _pulp_name(raw)
            expr = pulp.LpAffineExpression(terms[r])
            lo, up = a["row_lower"][r], a["row_upper"][r]
            if lo == up:
                prob += expr == float(lo), name
                continue
            if lo > -INF:
                prob += expr >= float(lo), name if up == INF else f"{name}-low"
            if up < INF:
                prob += expr <= float(up), name if lo == -INF else f"{name}-up"
        return prob, xs


def _pulp_name(name: str) -> str:
    """PuLP (and the LP file format) want names without spaces or operators."""
    return "".join(c if c.isalnum() or c in "_." else "_" for c in name)


@dataclass(frozen=True)
class Solution:
    """``status`` "optimal" | "time_limit" (a solution, not proven) | "infeasible" | "error";
    ``bound`` the solver's proven lower bound on the objective; ``row_dual`` for LPs."""

    status: str
    x: np.ndarray
    objective: float
    bound: float
    row_dual: np.ndarray | None = None


_HIGHS_GREETED = False


def new_highs():
    """A silent ``highspy.Highs`` object.

    HiGHS prints its banner on stdout when the first object of a process is created, before
    any option can be set; that first creation runs with stdout sent to the null device so the
    planner's own output (and ``--json``) stays clean.
    """
    global _HIGHS_GREETED
    import highspy

    if _HIGHS_GREETED:
        h = highspy.Highs()
    else:
        sys.stdout.flush()
        saved, null = os.dup(1), os.open(os.devnull, os.O_WRONLY)
        try:
            os.dup2(null, 1)
            h = highspy.Highs()
        finally:
            os.dup2(saved, 1)
            os.close(saved)
            os.close(null)
        _HIGHS_GREETED = True
    h.setOptionValue("output_flag", False)
    return h


def highs_available() -> bool:
    try:
        import highspy  # noqa: F401
    except ImportError:
        return False
    return True


def solve(model: LinearModel, *, solver: str = "highs", time_limit_s: float = 60.0,
          mip_rel_gap: float = 1e-9, start: np.ndarray | None = None) -> Solution:
    """Solve ``model``. ``solver``: ``"highs"`` (``highspy`` directly; PuLP's CBC when HiGHS
    is not installed) or ``"cbc"`` / ``"pulp-highs"`` (through PuLP)."""
    if solver == "highs" and highs_available():
        return _solve_highspy(model, time_limit_s, mip_rel_gap, start)
    return _solve_pulp(model, "highs" if solver == "pulp-highs" else "cbc", time_limit_s,
                       mip_rel_gap)


def _solve_highspy(model: LinearModel, time_limit_s: float, mip_rel_gap: float,
                   start: np.ndarray | None) -> Solution:
    import highspy

    a = model.arrays()
    h = new_highs()
    h.setOptionValue("threads", 1)
    h.setOptionValue("time_limit", float(max(time_limit_s, 0.01)))
    h.setOptionValue("mip_rel_gap", float(mip_rel_gap))
    h.setOptionValue("mip_abs_gap", 1e-9)
    lp = highspy.HighsLp()
    lp.num_col_ = len(a["cost"])
    lp.num_row_ = len(a["row_lower"])
    lp.col_cost_ = a["cost"]
    lp.col_lower_ = a["lower"]
    lp.col_upper_ = a["upper"]
    lp.row_lower_ = a["row_lower"]
    lp.row_upper_ = a["row_upper"]
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = a["start"]
    lp.a_matrix_.index_ = a["index"]
    lp.a_matrix_.value_ = a["value"]
    lp.offset_ = model.offset
    is_mip = bool(a["integer"].any())
    if is_mip:
        # small models: a short cut pool is faster and changes no optimum (measured ~30 %)
        h.setOptionValue("mip_pool_soft_limit", 1)
        lp.integrality_ = [highspy.HighsVarType.kInteger if i else
                           highspy.HighsVarType.kContinuous for i in a["integer"]]
    h.passModel(lp)
    if start is not None and is_mip:
        sol = highspy.HighsSolution()
        sol.col_value = list(np.asarray(start, dtype=float))
        sol.value_valid = True
        h.setSolution(sol)
    h.run()
    status = h.getModelStatus()
    info = h.getInfo()
    ms = highspy.HighsModelStatus
    if status == ms.kOptimal:
        label = "optimal"
    elif status == ms.kInfeasible:
        return Solution("infeasible", np.zeros(lp.num_col_), INF, INF)
    elif info.primal_solution_status == 2:          # feasible point
        label = "time_limit"
    else:
        return Solution("error", np.zeros(lp.num_col_), INF, -INF)
    solution = h.getSolution()
    x = np.array(solution.col_value)
    objective = float(info.objective_function_value)
    if is_mip:
        bound = float(info.mip_dual_bound)
        if label == "optimal":
            bound = min(bound, objective)
    else:
        bound = objective if label == "optimal" else -INF
    duals = np.array(solution.row_dual) if not is_mip else None
    return Solution(label, x, objective, bound, duals)


def _solve_pulp(model: LinearModel, name: str, time_limit_s: float,
                mip_rel_gap: float) -> Solution:
    import pulp

    prob, xs = model.to_pulp()
    if name == "highs":
        new_highs()  # PuLP's HiGHS creates its own objects: greet HiGHS quietly first
        solver = pulp.HiGHS(msg=False, timeLimit=time_limit_s, mip_rel_gap=mip_rel_gap, threads=1)
    else:
        solver = pulp.PULP_CBC_CMD(msg=False, timeLimit=time_limit_s, gapRel=mip_rel_gap)
    prob.solve(solver)
    if prob.status == pulp.LpStatusInfeasible:
        return Solution("infeasible", np.zeros(len(xs)), INF, INF)
    if prob.sol_status not in (pulp.LpSolutionOptimal, pulp.LpSolutionIntegerFeasible):
        return Solution("error", np.zeros(len(xs)), INF, -INF)
    x = np.array([v.varValue or 0.0 for v in xs])
    objective = float(pulp.value(prob.objective) or 0.0)
    optimal = prob.sol_status == pulp.LpSolutionOptimal
    # CBC through PuLP does not report the MIP bound: an optimal answer is proven up to the
    # gap asked; HiGHS keeps its model on the problem and tells its bound
    bound = objective - mip_rel_gap * abs(objective) if optimal else -INF
    highs_model = getattr(prob, "solverModel", None)
    if name == "highs" and highs_model is not None:
        info = highs_model.getInfo()
        if any(model.integer[i].any() for i in range(len(model.integer))):
            bound = min(float(info.mip_dual_bound) + model.offset, objective)
    duals = None
    if not any(model.integer[i].any() for i in range(len(model.integer))):
        duals = np.zeros(len(model.row_names))
        for r, cname in enumerate(model.row_names):
            c = prob.constraints.get(_pulp_name(cname))
            if c is not None and c.pi is not None:
                duals[r] = c.pi
        bound = objective if optimal else -INF
    return Solution("optimal" if optimal else "time_limit", x, objective, bound, duals)
