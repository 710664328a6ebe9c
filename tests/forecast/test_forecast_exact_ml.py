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


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("order", GRID)
def test_the_profiled_exact_fit_finds_the_optimum_of_sarimax(case, order):
    # planner.forecast.exact searches only the ARMA part (the regression profiled out by GLS);
    # statsmodels SARIMAX (the reference library) searches all coefficients at once
    from statsmodels.tsa.statespace.sarimax import SARIMAX

    y, exog = CASES[case]()
    fit_y, fit_x, future = _split(y, exog)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        own = RegressionARIMA(orders=(order,), method="exact").fit(fit_y, fit_x)
        ref = RegressionARIMA(orders=(order,), method="mle").fit(fit_y, fit_x)
    assert own.aic_ <= ref.aic_ + 1e-3                     # never a worse optimum
    if own.aic_ < ref.aic_ - 0.05:
        # a higher maximum than SARIMAX's search stopped at (macrodata's AR(1): φ 0.9996
        # where SARIMAX stops at 0.931): SARIMAX's own likelihood confirms it
        p, d, q = order
        z = np.log1p(fit_y)
        X = own._regressors(fit_x, len(fit_y), 0)
        model = SARIMAX(z, exog=X[:, 1:] if d else X, order=order, trend="n",
                        concentrate_scale=True)
        beta = own.beta_[1:] if d else own.beta_
        assert model.loglike(np.r_[beta, own.phi_, own.theta_]) == pytest.approx(
            -0.5 * own.aic_ + (X.shape[1] - (1 if d else 0) + p + q + 1), abs=1e-3)
        return
    np.testing.assert_allclose(np.r_[own.phi_, own.theta_], np.r_[ref.phi_, ref.theta_],
                               atol=0.01)
    assert own.sigma_ == pytest.approx(ref.sigma_, rel=1e-3)
    a, b = own.mean(H, future), ref.mean(H, future)
    assert np.max(np.abs(a / b - 1)) < 0.005


@pytest.mark.parametrize("order", GRID)
def test_the_profile_likelihood_is_that_of_sarimax(order):
    # the likelihood itself, not only its optimum: at any ARMA parameters, with the
    # regression at its GLS estimate, the same value as SARIMAX's exact (Kalman) likelihood
    from statsmodels.tsa.statespace.sarimax import SARIMAX

    from planner.forecast.exact import profile

    y, exog = demo_terminal("KSF-002")
    z = np.log1p(y)
    X = np.column_stack([np.ones(len(z)), exog[:, exog.any(axis=0)]])
    p, d, q = order
    phi, theta = np.array([0.5, -0.2][:p]), np.array([-0.6][:q])
    zd, Xd = (np.diff(z), np.diff(X, axis=0)[:, 1:]) if d else (z, X)
    llf, beta, s2 = profile(zd, Xd, phi, theta)
    model = SARIMAX(z, exog=X[:, 1:] if d else X, order=order, trend="n",
                    concentrate_scale=True)
    assert llf == pytest.approx(model.loglike(np.r_[beta, phi, theta]), abs=1e-4)
    # and β̂ is the maximum over the regression: moving it lowers SARIMAX's likelihood
    nudged = model.loglike(np.r_[beta + 0.01, phi, theta])
    assert nudged < llf
