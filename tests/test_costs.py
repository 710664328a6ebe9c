"""The day's accounting against small cases computed by hand (rules: planner.costs)."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.costs import CostRates, simulate

# simple rates so that hand computation stays readable: 1 % carry per day, handling 1 per 1,000,
# dry day 100, shortfall 5 per 1,000
RATES = CostRates(carry_rate_daily=0.01, handling_per_1000=1.0, dry_day_penalty=100.0,
                  shortfall_penalty_per_1000=5.0)


def one(visits, loads, start, demand, *, limit=1e9, fee=10.0, mode="swap", rates=RATES):
    d = len(demand)
    return simulate(np.array(visits, bool), np.array(loads, float), start,
                    np.array([demand], float), limit, np.full(d, fee), rates, mode)


def test_swap_returns_residual_and_pays_handling_on_load_plus_residual():
    # start 100; demand 30, 50, 40, 20; swap visit on day 2 loading 200
    led = one([0, 0, 1, 0], [0, 0, 200, 0], 100, [30, 50, 40, 20])
    # by hand: end balances 70, 20, 160, 140; residual 20 returned on day 2
    np.testing.assert_allclose(led.end_balance[0, 0], [70, 20, 160, 140])
    np.testing.assert_allclose(led.returned[0, 0], [0, 0, 20, 0])
    np.testing.assert_allclose(led.balance_open[0, 0], [100, 70, 200, 160])
    np.testing.assert_allclose(led.handling[0, 0], [0, 0, 0.22, 0])     # (200 + 20) / 1000
    np.testing.assert_allclose(led.carry[0, 0], [0.7, 0.2, 1.6, 1.4])   # carry on end balance
    np.testing.assert_allclose(led.visit[0], [0, 0, 10, 0])
    # 0.7 + 0.2 + 0.22 + 10 + 1.6 + 1.4
    assert led.total()[0, 0] == pytest.approx(14.12)
    assert not led.dry.any()


def test_dry_days_count_strictly_and_shortfall_is_priced():
    # start 50; demand 30, 50, 40, no visit: day 1 dispenses 20 (short 30), day 2 nothing (short 40)
    led = one([0, 0, 0], [0, 0, 0], 50, [30, 50, 40])
    np.testing.assert_array_equal(led.dry[0, 0], [False, True, True])
    np.testing.assert_allclose(led.dispensed[0, 0], [30, 20, 0])
    np.testing.assert_allclose(led.shortfall[0, 0], [0, 30, 40])
    np.testing.assert_allclose(led.end_balance[0, 0], [20, 0, 0])
    # 2 dry days · 100 + 70 · 5 / 1000 + carry 20 · 0.01
    assert led.total()[0, 0] == pytest.approx(200 + 0.35 + 0.2)
    # demand equal to the balance empties the machine without a dry day
    led = one([0], [0], 30, [30])
    assert not led.dry.any() and led.end_balance[0, 0, 0] == 0


def test_topup_adds_to_the_balance_and_returns_what_does_not_fit():
    # start 100, limit 150; load 80 on day 1 fits exactly (70 + 80 = 150)
    led = one([0, 1, 0], [0, 80, 0], 100, [30, 20, 10], limit=150, mode="topup")
    np.testing.assert_allclose(led.balance_open[0, 0], [100, 150, 130])
    np.testing.assert_allclose(led.returned[0, 0], [0, 0, 0])
    np.testing.assert_allclose(led.handling[0, 0], [0, 0.08, 0])
    # load 100: 70 + 100 = 170, excess 20 returned, handling on 100 + 20
    led = one([0, 1, 0], [0, 100, 0], 100, [30, 20, 10], limit=150, mode="topup")
    np.testing.assert_allclose(led.balance_open[0, 0], [100, 150, 130])
    np.testing.assert_allclose(led.returned[0, 0], [0, 20, 0])
    np.testing.assert_allclose(led.handling[0, 0], [0, 0.12, 0])
    # same plan as swap: the residual 70 goes back, the balance is the load
    led = one([0, 1, 0], [0, 100, 0], 100, [30, 20, 10], limit=150, mode="swap")
    np.testing.assert_allclose(led.balance_open[0, 0], [100, 100, 80])
    np.testing.assert_allclose(led.handling[0, 0], [0, 0.17, 0])


def test_loads_without_a_visit_are_ignored_and_fees_follow_the_day():
    d = 3
    led = simulate(np.array([[False, True, False]]), np.array([[500.0, 100.0, 700.0]]),
                   np.array([0.0]), np.zeros((1, 1, d)), np.array([1e9]),
                   np.array([[1.0, 2.0, 3.0]]), RATES, "swap")
    np.testing.assert_allclose(led.visit[0], [0, 2, 0])
    np.testing.assert_allclose(led.balance_open[0, 0], [0, 100, 100])


def test_vectorised_over_terminals_and_paths_equals_one_by_one():
    rng = np.random.default_rng(7)
    t, p, d = 3, 4, 6
    demand = rng.gamma(2.0, 50.0, size=(t, p, d))
    visits = rng.random((t, d)) < 0.4
    loads = rng.integers(1, 6, size=(t, d)) * 100.0
    start = rng.integers(0, 4, size=t) * 100.0
    limit = np.array([400.0, 500.0, 300.0])
    fee = rng.integers(5, 20, size=(t, d)).astype(float)
    for mode in ("swap", "topup"):
        whole = simulate(visits, loads, start, demand, limit, fee, RATES, mode)
        for i in range(t):
            single = simulate(visits[i], loads[i], start[i], demand[i], limit[i], fee[i],
                              RATES, mode)
            np.testing.assert_allclose(whole.total()[i], single.total()[0])
            np.testing.assert_array_equal(whole.dry[i], single.dry[0])


def test_parts_add_up_and_dry_probability_counts_paths():
    demand = np.array([[[10, 10, 10], [10, 60, 10], [10, 10, 60]]], float)   # 1 × 3 paths × 3
    led = simulate(np.zeros((1, 3), bool), np.zeros((1, 3)), np.array([50.0]), demand,
                   np.array([100.0]), np.full((1, 3), 10.0), RATES, "swap")
    # path 2 dry on day 1, path 3 dry on day 2
    assert led.dry_probability(1)[0] == 0
    assert led.dry_probability(2)[0] == pytest.approx(1 / 3)
    assert led.dry_probability()[0] == pytest.approx(2 / 3)
    parts = led.parts()
    assert list(parts.columns) == ["carry", "visit", "handling", "dry_penalty",
                                   "shortfall_penalty", "total"]
    assert parts["total"].iloc[0] == pytest.approx(parts.iloc[0, :5].sum())
    assert parts["total"].iloc[0] == pytest.approx(led.expected_cost()[0])


def test_unknown_mode_is_refused():
    with pytest.raises(ValueError, match="swap"):
        one([0], [0], 0, [0], mode="refill")


@settings(max_examples=60, deadline=None, derandomize=True)
@given(st.lists(st.integers(0, 90), min_size=2, max_size=8), st.integers(0, 400),
       st.data())
def test_swap_cycle_identities(demand, load, data):
    """Swap: after a visit with load L on day a, dry on t iff C(a, t) > L and demand[t] > 0,
    end balance max(L − C(a, t), 0), shortfall over the cycle max(C(a, b − 1) − L, 0), residual
    at the next visit b max(L − C(a, b − 1), 0) (exact in integers)."""
    d = len(demand)
    a = data.draw(st.integers(0, d - 2))
    b = data.draw(st.integers(a + 1, d - 1))
    visits = np.zeros(d, bool)
    visits[[a, b]] = True
    loads = np.zeros(d)
    loads[a], loads[b] = load, 50
    led = one(visits, loads, 0, demand)
    cum = np.cumsum(demand[a:b])
    positive = np.array(demand[a:b]) > 0
    np.testing.assert_array_equal(led.dry[0, 0, a:b], (cum > load) & positive)
    assert led.dry[0, 0, a:b].any() == (cum[-1] > load)
    assert led.shortfall[0, 0, a:b].sum() == max(cum[-1] - load, 0)
    np.testing.assert_allclose(led.end_balance[0, 0, a:b], np.maximum(load - cum, 0))
    assert led.returned[0, 0, b] == max(load - cum[-1], 0)
