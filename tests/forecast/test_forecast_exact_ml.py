"""The regression with ARIMA errors against exact maximum likelihood (statsmodels SARIMAX,
the reference library): for every order of the grid the fast fit's 14-day forecasts agree
within 2 % and the order chosen over the grid is the same.

Data: statsmodels' bundled ``macrodata`` (log real consumption on log real disposable
income, quarterly 1959–2009: a trending series whose conditional fit sits near a unit root,
where the model falls back to exact ML), two demo terminals, and a simulated series with known
parameters."""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from planner.calendar import FEATURE_COLUMNS, calendar_features
from planner.cleaning import clean_history
from planner.demo import demo_path
from planner.forecast.models import RegressionARIMA
from planner.scenario import load_scenario

GRID = ((1, 0, 0), (2, 0, 0), (1, 0, 1), (0, 1, 1))
H = 14


def macrodata():
    import statsmodels.api as sm

    data = sm.datasets.macrodata.load_pandas().data
    y = data["realcons"].to_numpy(dtype=float)
    exog = np.log(data["realdpi"].to_numpy(dtype=float))[:, None]
    return y, exog


def demo_terminal(tid: str):
    scenario = load_scenario(demo_path())
    daily = clean_history(scenario).daily
    rows = daily[daily["terminal_id"] == tid]
    exog = calendar_features(pd.DatetimeIndex(rows["date"]), scenario.calendar)[
        list(FEATURE_COLUMNS)].to_numpy(dtype=float)
    return rows["demand"].to_numpy(dtype=float), exog


def simulated():
    # known by construction: log demand = 8 + weekday effect + AR(1) errors, φ = 0.6, σ = 0.2
    rng = np.random.default_rng(11)
    n = 420
    week = np.log(np.array([1.0, 0.9, 0.95, 1.05, 1.3, 1.2, 0.6]))
    e = np.zeros(n)
    for t in range(1, n):
        e[t] = 0.6 * e[t - 1] + rng.normal(0.0, 0.2)
    y = np.expm1(8.0 + week[np.arange(n) % 7] + e)
    return y, None


CASES = {"macrodata": macrodata, "BRH-001": lambda: demo_terminal("BRH-001"),
         "KSF-002": lambda: demo_terminal("KSF-002"), "simulated": simulated}


def _split(y, exog):
    fit_y = y[:-H]
    fit_x = None if exog is None else exog[:-H]
    future = None if exog is None else exog[-H:]
    return fit_y, fit_x, future


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("order", GRID)
def test_forecasts_agree_with_exact_ml(case, order):
    y, exog = CASES[case]()
    fit_y, fit_x, future = _split(y, exog)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fast = RegressionARIMA(orders=(order,)).fit(fit_y, fit_x)
        exact = RegressionARIMA(orders=(order,), method="mle").fit(fit_y, fit_x)
    a, b = fast.mean(H, future), exact.mean(H, future)
    assert np.max(np.abs(a / b - 1)) < 0.02


@pytest.mark.parametrize("case", sorted(CASES))
def test_the_chosen_order_is_that_of_exact_ml(case):
    y, exog = CASES[case]()
    fit_y, fit_x, _ = _split(y, exog)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fast = RegressionARIMA(orders=GRID).fit(fit_y, fit_x)
        exact = RegressionARIMA(orders=GRID, method="mle").fit(fit_y, fit_x)
    assert fast.order_ == exact.order_


def test_near_a_unit_root_the_fit_is_exact_and_says_so():
    y, exog = macrodata()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = RegressionARIMA(orders=GRID).fit(y, exog)
        again = model.refit(y, exog)
    assert model.fit_method_.startswith("mle")
    assert "fitted by mle" in model.describe()
    assert again.fit_method_ == model.fit_method_
    # the demo's terminals stay on the fast conditional fit
    y, exog = demo_terminal("BRH-001")
    assert RegressionARIMA(orders=GRID).fit(y, exog).fit_method_ == "css"


def test_simulated_parameters_are_recovered():
    y, _ = simulated()
    model = RegressionARIMA(orders=((1, 0, 0),)).fit(y)
    assert model.phi_[0] == pytest.approx(0.6, abs=0.06)
    assert model.sigma_ == pytest.approx(0.2, rel=0.1)
