"""The small array model layer (planner/optimize/milp.py) against published LP and MILP
examples and scipy's HiGHS interface as the reference library."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linprog, milp as scipy_milp, Bounds, LinearConstraint

from planner.optimize import milp


def wyndor(integer: bool = False) -> milp.LinearModel:
    """Hillier & Lieberman, "Introduction to Operations Research", the Wyndor Glass example:
    max 3x + 5y s.t. x ≤ 4, 2y ≤ 12, 3x + 2y ≤ 18, x, y ≥ 0; optimum x = 2, y = 6, Z = 36,
    shadow prices 0, 1.5, 1 (values from memory of the textbook; checked by scipy below).
    Written as a minimisation of −3x − 5y."""
    model = milp.LinearModel(name="wyndor")
    cols = model.add_variables(["x", "y"], np.array([-3.0, -5.0]), 0.0, milp.INF,
                               integer=integer)
    model.add_constraints(["plant-1", "plant-2", "plant-3"], np.array([0, 1, 2, 2]),
                          cols[[0, 1, 0, 1]], np.array([1.0, 2.0, 3.0, 2.0]),
                          upper=np.array([4.0, 12.0, 18.0]))
    return model


@pytest.mark.parametrize("solver", ["highs", "cbc"])
def test_wyndor_glass_optimum(solver):
    if solver == "highs" and not milp.highs_available():
        pytest.skip("highspy is not installed")
    sol = milp.solve(wyndor(), solver=solver, time_limit_s=30)
    assert sol.status == "optimal"
    np.testing.assert_allclose(sol.x, [2.0, 6.0], atol=1e-7)
    assert sol.objective == pytest.approx(-36.0)
    reference = linprog([-3, -5], A_ub=[[1, 0], [0, 2], [3, 2]], b_ub=[4, 12, 18],
                        method="highs")
    assert sol.objective == pytest.approx(reference.fun)


def test_wyndor_shadow_prices_match_scipy():
    if not milp.highs_available():
        pytest.skip("highspy is not installed")
    sol = milp.solve(wyndor(), solver="highs", time_limit_s=30)
    reference = linprog([-3, -5], A_ub=[[1, 0], [0, 2], [3, 2]], b_ub=[4, 12, 18],
                        method="highs")
    # a ≤ row of a minimisation has a dual ≤ 0: the textbook's shadow prices with their sign
    np.testing.assert_allclose(sol.row_dual, reference.ineqlin.marginals, atol=1e-9)
    np.testing.assert_allclose(-sol.row_dual, [0.0, 1.5, 1.0], atol=1e-9)


@pytest.mark.parametrize("solver", ["pulp-highs", "cbc"])
def test_integer_knapsack_against_scipy_milp(solver):
    """A 0-1 knapsack (invented weights and values) solved to optimality by our layer and by
    scipy.optimize.milp as the reference: the same optimal value."""
    values = np.array([10.0, 13.0, 7.0, 8.0, 12.0, 5.0])
    weights = np.array([5.0, 7.0, 3.0, 4.0, 6.0, 2.0])
    capacity = 15.0
    model = milp.LinearModel(name="knapsack")
    cols = model.add_variables([f"take-{i}" for i in range(6)], -values, 0.0, 1.0,
                               integer=True)
    model.add_constraints(["capacity"], np.zeros(6, int), cols, weights, upper=capacity)
    sol = milp.solve(model, solver=solver, time_limit_s=30, mip_rel_gap=0.0)
    reference = scipy_milp(-values, constraints=LinearConstraint(weights[None, :], -np.inf,
                                                                  capacity),
                           integrality=np.ones(6), bounds=Bounds(0, 1))
    assert sol.status == "optimal"
    assert sol.objective == pytest.approx(reference.fun)
    assert set(np.round(sol.x)) <= {0.0, 1.0}
    assert weights @ np.round(sol.x) <= capacity
