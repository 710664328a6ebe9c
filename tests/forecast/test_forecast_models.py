"""Tests of the candidate demand models (planner.forecast.models).

Outside references: statsmodels as the reference implementation of Holt-Winters and of
regression with ARIMA errors (SARIMAX). For
daily series with weekly seasonality no published fitted figure exists, so those models are
checked on simulated series of a known process (known answer by construction).
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special

from planner.forecast.models import (LEVELS, HoltWinters, ModelFitError,
                                     RegressionARIMA, SeasonalNaive, hw_errors)
from planner.forecast.profile import NetworkProfile

WEEKDAY_LOG = np.log([0.9, 0.9, 1.0, 1.1, 1.4, 1.5, 0.5])


def weekly_ar1(n: int, *, phi: float = 0.6, sigma: float = 0.15, level: float = 8000.0,
               seed: int = 0, payday_every: int = 0, payday_lift: float = 0.0):
    """Demand ``level · weekday · exp(u_t + payday)``, ``u`` AR(1) on the log scale.

    Returns ``(y, u, exog)``; ``exog`` has one payday column when ``payday_every`` > 0.
    """
    rng = np.random.default_rng(seed)
    shocks = rng.normal(0.0, sigma, n)
    u = np.empty(n)
    u[0] = shocks[0] / np.sqrt(1 - phi ** 2)
    for t in range(1, n):
        u[t] = phi * u[t - 1] + shocks[t]
    exog = None
    lift = np.zeros(n)
    if payday_every:
        exog = (np.arange(n) % payday_every == payday_every - 1).astype(float)[:, None]
        lift = payday_lift * exog[:, 0]
    z = np.log(level) + WEEKDAY_LOG[np.arange(n) % 7] + u + lift
    return np.expm1(z), u, exog


# ---------------------------------------------------------------------------------------------
# Holt-Winters against statsmodels
# ---------------------------------------------------------------------------------------------


def _ets_recursion(z, alpha, gamma, initial):
    """ETS(A,N,A) by its state equations, one day at a time (Hyndman et al. 2008, ch. 2)."""
    level, season = 0.0, list(initial)
    errors = []
    for t, value in enumerate(z):
        err = value - (level + season[t % 7])
        errors.append(err)
        level += alpha * err
        season[t % 7] += gamma * err
    return np.array(errors)


def test_holt_winters_error_filter_equals_state_recursion():
    y, _, _ = weekly_ar1(200, seed=3)
    z = np.log1p(y)
    initial = np.log(8000) + WEEKDAY_LOG
    fast, _ = hw_errors(z, 0.3, 0.15, initial=initial)
    np.testing.assert_allclose(fast, _ets_recursion(z, 0.3, 0.15, initial), atol=1e-10)


@pytest.mark.parametrize("seed", [1, 2, 5, 8])
def test_holt_winters_matches_statsmodels_exponential_smoothing(seed):
    from statsmodels.tsa.holtwinters import ExponentialSmoothing

    y, _, _ = weekly_ar1(400, seed=seed)
    y = y * np.exp(np.cumsum(np.random.default_rng(seed).normal(0, 0.01, len(y))))
    z = np.log1p(y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = ExponentialSmoothing(z, seasonal="add", seasonal_periods=7).fit()
    ours = HoltWinters().fit(y)
    # statsmodels' plain fit (its own brute-force start) as the reference: ours starts the same
    # estimator elsewhere and then takes the least-squares initial states, so its SSE may only
    # be lower, and the same optimum gives the same forecast
    assert ours.sse_ <= ref.sse * (1 + 1e-6)
    assert ours.sse_ == pytest.approx(ref.sse, rel=1e-4)
    np.testing.assert_allclose(np.log1p(ours.point(14)), ref.forecast(14), atol=2e-3)


def test_holt_winters_interval_follows_ets_variance_formula():
    y, _, _ = weekly_ar1(300, seed=4)
    model = HoltWinters().fit(y)
    mu, sd, _ = model.log_moments(15)
    a, g = model.alpha_, model.gamma_
    h = np.arange(1, 16)
    k = (h - 1) // 7
    # ETS(A,N,A): v_h = σ²[1 + α²(h−1) + γk(2α + γ)] (Hyndman et al. 2008, Table 6.1)
    expected = model.sigma_ ** 2 * (1 + a ** 2 * (h - 1) + g * k * (2 * a + g))
    np.testing.assert_allclose(sd ** 2, expected, rtol=1e-10)


# ---------------------------------------------------------------------------------------------
# Regression with ARIMA errors
# ---------------------------------------------------------------------------------------------


def test_regression_arima_recovers_known_process_and_agrees_with_sarimax():
    # known process: AR(1) errors with φ = 0.6, σ = 0.15, payday lift 0.3 on the log scale
    y, _, exog = weekly_ar1(700, phi=0.6, sigma=0.15, seed=5, payday_every=30,
                            payday_lift=0.3)
    css = RegressionARIMA(orders=((1, 0, 0),)).fit(y, exog)
    assert css.phi_[0] == pytest.approx(0.6, abs=0.06)
    assert css.sigma_ == pytest.approx(0.15, rel=0.08)
    assert css.beta_[-1] == pytest.approx(0.3, abs=0.06)
    weekday = css.beta_[1:7]                       # phases 1…6 against phase 0
    np.testing.assert_allclose(weekday, WEEKDAY_LOG[1:] - WEEKDAY_LOG[0], atol=0.04)
    # statsmodels SARIMAX (exact maximum likelihood) as the reference implementation
    mle = RegressionARIMA(orders=((1, 0, 0),), method="mle").fit(y, exog)
    assert css.phi_[0] == pytest.approx(mle.phi_[0], abs=0.01)
    np.testing.assert_allclose(css.beta_, mle.beta_, atol=0.01)
    assert css.sigma_ == pytest.approx(mle.sigma_, rel=0.02)


def test_regression_arima_order_by_aic_finds_integrated_errors():
    # errors (1 − B) w = (1 − 0.5 B) e: a drifting level; AIC must pick the (0,1,1) order
    rng = np.random.default_rng(6)
    e = rng.normal(0, 0.1, 600)
    w = np.cumsum(e - 0.5 * np.r_[0.0, e[:-1]])
    y = np.expm1(np.log(5000) + WEEKDAY_LOG[np.arange(600) % 7] + w)
    model = RegressionARIMA().fit(y)
    assert model.order_ == (0, 1, 1)
    assert model.theta_[0] == pytest.approx(-0.5, abs=0.08)
    stationary, _, _ = weekly_ar1(600, seed=6)
    assert RegressionARIMA().fit(stationary).order_[1] == 0


def test_known_process_quantiles_and_path_quantiles_match_analytic():
    phi, sigma, level = 0.6, 0.15, 8000.0
    y, u, _ = weekly_ar1(3000, phi=phi, sigma=sigma, level=level, seed=7)
    model = RegressionARIMA(orders=((1, 0, 0),)).fit(y)
    h, n = 14, len(y)
    j = np.arange(1, h + 1)
    # analytic: log y_{n+j} ~ N(log level + s + φ^j u_n, σ² (1 − φ^{2j}) / (1 − φ²))
    mean = np.log(level) + WEEKDAY_LOG[(n + j - 1) % 7] + phi ** j * u[-1]
    sd = sigma * np.sqrt((1 - phi ** (2 * j)) / (1 - phi ** 2))
    z = special.ndtri(np.array(LEVELS))
    analytic = np.expm1(mean[None, :] + z[:, None] * sd[None, :])
    # the fitted parameters carry estimation error (about 1 % on the level with 3,000 days)
    np.testing.assert_allclose(model.quantiles(h, levels=LEVELS), analytic, rtol=0.04)
    paths = model.simulate(h, 20000, np.random.default_rng(0))
    np.testing.assert_allclose(np.quantile(paths, LEVELS, axis=0), analytic, rtol=0.045)


def test_paths_are_joint_over_days():
    phi = 0.6
    y, _, _ = weekly_ar1(1000, phi=phi, seed=8)
    model = RegressionARIMA(orders=((1, 0, 0),)).fit(y)
    logs = np.log1p(model.simulate(3, 20000, np.random.default_rng(1)))
    corr = np.corrcoef(logs[:, 0], logs[:, 1])[0, 1]
    # AR(1): corr(w_{n+1}, w_{n+2}) = φ / sqrt(1 + φ²) given the origin; independent draws
    # per day would give 0
    assert corr == pytest.approx(model.phi_[0] / np.sqrt(1 + model.phi_[0] ** 2), abs=0.03)


# ---------------------------------------------------------------------------------------------
# Every model: interface, path quantiles against the model's own quantiles, properties
# ---------------------------------------------------------------------------------------------


def _fitted_models():
    y, _, exog = weekly_ar1(420, seed=9, payday_every=30, payday_lift=0.2)
    exog_future = np.zeros((21, 1))
    models = [SeasonalNaive().fit(y), HoltWinters().fit(y), RegressionARIMA().fit(y, exog),
              SeasonalNaive(min_analogues=10_000).fit(y),
              NetworkProfile(level=5000, level_sd=0.3, noise_sd=0.2,
                             weekday_profile=tuple(np.exp(WEEKDAY_LOG)),
                             first_weekday=2).fit()]
    return y, exog, exog_future, models


@pytest.mark.parametrize("index", range(5))
def test_day_wise_path_quantiles_agree_with_model_quantiles(index):
    _, _, exog_future, models = _fitted_models()
    model = models[index]
    h = 21
    q = model.quantiles(h, exog_future, LEVELS)
    paths = model.simulate(h, 20000, np.random.default_rng(index), exog_future)
    assert paths.shape == (20000, h)
    share_below = (paths[None, :, :] <= q[:, None, :]).mean(axis=1)
    # binomial sd of a share of 20,000 draws is at most 0.0035; 0.015 is > 4 sd
    np.testing.assert_allclose(share_below, np.broadcast_to(np.array(LEVELS)[:, None],
                                                            share_below.shape), atol=0.015)
    mean = model.mean(h, exog_future)
    np.testing.assert_allclose(paths.mean(axis=0), mean, rtol=0.03)


def test_apply_on_the_same_series_reproduces_the_fit():
    y, exog, exog_future, models = _fitted_models()
    for model in models[:4]:
        ex = exog if isinstance(model, RegressionARIMA) else None
        fut = exog_future[:14] if isinstance(model, RegressionARIMA) else None
        np.testing.assert_allclose(model.apply(y, ex).quantiles(14, fut),
                                   model.quantiles(14, fut), rtol=1e-10)


def test_too_short_series_raise_model_fit_error():
    y, _, _ = weekly_ar1(20, seed=10)
    for model in (HoltWinters(), RegressionARIMA()):
        with pytest.raises(ModelFitError, match="at least"):
            model.fit(y)
    with pytest.raises(ModelFitError):
        SeasonalNaive().fit(y[:10])


def test_event_lift_offset_moves_the_forecast():
    y, _, _ = weekly_ar1(300, seed=11)
    exog = np.zeros((300, 1))
    future = np.zeros((7, 1))
    future[3, 0] = np.log(1.4)
    for model in (HoltWinters(offset_column=0), RegressionARIMA(offset_column=0)):
        fitted = model.fit(y, exog)
        ratio = (1 + fitted.point(7, future)) / (1 + fitted.point(7, np.zeros((7, 1))))
        np.testing.assert_allclose(ratio, [1, 1, 1, 1.4, 1, 1, 1], rtol=1e-9)


@settings(max_examples=12, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), zeros=st.floats(0.0, 0.4), n=st.integers(60, 200))
def test_paths_non_negative_and_seeded(seed, zeros, n):
    rng = np.random.default_rng(seed)
    y, _, _ = weekly_ar1(n, seed=seed, sigma=0.4)
    y[rng.random(n) < zeros] = 0.0                   # machines with many empty days
    for cls in (SeasonalNaive, HoltWinters, RegressionARIMA):
        try:
            model = cls().fit(y)
        except ModelFitError:
            continue
        a = model.simulate(14, 50, np.random.default_rng(seed))
        b = model.simulate(14, 50, np.random.default_rng(seed))
        c = model.simulate(14, 50, np.random.default_rng(seed + 1))
        assert np.all(a >= 0) and np.all(np.isfinite(a))
        assert np.array_equal(a, b)
        assert not np.array_equal(a, c)
        assert np.all(model.quantiles(14) >= 0)
