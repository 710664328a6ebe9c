"""Candidate demand models behind one interface.

Models only see arrays: ``y`` is daily demand of one terminal on the original scale (currency
units, ≥ 0, no NaN, one value per consecutive day) and ``exog`` an ``[n, k]`` matrix of calendar
regressors for the same days (columns as :func:`planner.calendar.calendar_features`, in a fixed
order; ``None`` when there are none). Looping over terminals, fallbacks, backtest windows and
processes lives elsewhere (:mod:`planner.forecast.scoring`, :mod:`planner.forecast.stage`).

The interface, in the manner of scikit-learn (the constructor only stores keyword-only
parameters; learned attributes end in ``_``):

- ``fit(y, exog=None) -> self``; raises :class:`ModelFitError` (with the reason) when the
  series is too short or the estimation fails.
- ``apply(y, exog=None) -> model``: a new fitted model with the *same parameters*, filtered
  over ``y`` (a series that starts on the same day as the one fitted, e.g. a longer or shorter
  prefix of it). The rolling-origin backtest uses this to move the forecast origin without
  refitting (like ``apply`` of statsmodels' state-space results).
- ``quantiles(h, exog_future=None, levels=LEVELS) -> [len(levels), h]``, ``point(h, ...)``
  (the point forecast used for MASE and sMAPE), ``mean(h, ...)``: the next ``h`` days.
- ``simulate(h, n_paths, rng, exog_future=None) -> [n_paths, h]``: demand paths, ≥ 0, joint
  over the days (one path is one realisation of the model's dynamics, never independent draws
  per day).
- ``residuals_``: in-sample one-step residuals on the model's scale (log1p for the log models).

Withdrawals are multiplicative (README, "How a plan is made", step 4), so the models work on ``z = log1p(y)`` and map
back with ``expm1`` (monotone, so quantiles map exactly; the result is clipped at 0).

The three candidates (:data:`CANDIDATES`, also the models the stage can be given by name):

- :class:`SeasonalNaive` — weekly seasonal naive; band and paths from its own historical
  forecast errors (every past 14-day window is one joint error vector).
- :class:`HoltWinters` — exponential smoothing with additive weekly seasonality on log1p
  demand, ETS(A,N,A), fitted by statsmodels' ``ExponentialSmoothing`` (least squares); the
  fitted model is then carried in the shared ARMA form below.
- :class:`RegressionARIMA` — regression of log1p demand on weekday dummies and the calendar
  features with ARIMA(p,d,q) errors, the order chosen by AIC on a small grid. Default
  ``method="css"``: conditional sum of squares (feasible GLS: OLS, ARMA on the residuals,
  GLS re-estimate of the regression, twice); ``method="exact"``: exact maximum likelihood
  with the regression profiled out (:mod:`planner.forecast.exact`, what the default falls
  back to near a unit root); ``method="mle"``: exact maximum likelihood with statsmodels
  ``SARIMAX`` (the reference the tests hold both to).

The regression's fast default exists because the whole forecasting stage of a terminal
(cleaning, backtest of every candidate, 500 paths) must take no more than three plain
statsmodels Holt-Winters fits (``bench/bench_forecast.py``); the tests check it against
statsmodels as the reference implementation.

The linear log models (Holt-Winters, regression with ARIMA errors) share one representation:
log demand ``z_t = shift_t + w_t`` with ``Φ(B) w_t = θ(B) e_t``, ``e_t ~ N(0, σ²)``, where
``Φ`` includes any differencing. Forecasts come from the ARMA recursion, intervals from the
ψ-weights (``Var = σ² Σ ψ_j²``), and paths as ``w = ŵ + L ε`` with ``L`` the lower triangular
Toeplitz matrix of the ψ-weights: exactly the model's recursion with the shocks carried from
day to day, vectorised over paths.
"""
from __future__ import annotations

import math
import warnings
from typing import Any, ClassVar

import numpy as np
from scipy import linalg, signal, special

from planner.forecast.exact import fit_exact

LEVELS = (0.05, 0.1, 0.5, 0.9, 0.95)
WEEK = 7


class ModelFitError(Exception):
    """A model could not be fitted to a series; ``str(err)`` says why."""


# --------------------------------------------------------------------------------------------
# Shared helpers
# --------------------------------------------------------------------------------------------


def _solve_ols(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Least squares by the normal equations, with a tiny ridge for rank deficiency.

    Normal equations instead of ``lstsq``: the design is small and well scaled (dummies and
    a constant), and LAPACK's SVD path is slow for many small problems.
    """
    xtx = X.T @ X
    xtx[np.diag_indices_from(xtx)] += 1e-10 * (1.0 + np.trace(xtx) / max(len(xtx), 1))
    return np.linalg.solve(xtx, X.T @ y)


def _arma_forecast(ar: np.ndarray, ma: np.ndarray, w: np.ndarray, e: np.ndarray,
                   h: int) -> np.ndarray:
    """Forecast ``w`` for ``h`` days by the recursion ``ar(B) w = ma(B) e`` with future e = 0.

    ``ar`` and ``ma`` are polynomials in ``B`` with leading 1 (``[1, -φ1, …]``,
    ``[1, θ1, …]``); ``w`` and ``e`` are the past values (the last ones matter).
    """
    order = max(len(ar), len(ma)) - 1
    if order == 0:
        return np.zeros(h)
    zi = _filter_state(ma, ar, w[::-1][:order], e[::-1][:order])
    return signal.lfilter(ma, ar, np.zeros(h), zi=zi)[0]


def _filter_state(b: np.ndarray, a: np.ndarray, y_past: np.ndarray, x_past: np.ndarray
                  ) -> np.ndarray:
    """Initial state of ``lfilter(b, a, ·)`` from past outputs and inputs, most recent first
    (what ``scipy.signal.lfiltic`` computes, without its per-call overhead)::

        zi[m] = Σ_{i > m} b[i] x[-(i-m)] − a[i] y[-(i-m)]
    """
    order = max(len(a), len(b)) - 1
    bb = np.zeros(order + 1)
    bb[: len(b)] = b
    aa = np.zeros(order + 1)
    aa[: len(a)] = a
    xp = np.zeros(order)
    xp[: len(x_past)] = x_past[:order]
    yp = np.zeros(order)
    yp[: len(y_past)] = y_past[:order]
    zi = np.empty(order)
    for m in range(order):
        zi[m] = bb[m + 1:] @ xp[: order - m] - aa[m + 1:] @ yp[: order - m]
    return zi


def _psi_weights(ar: np.ndarray, ma: np.ndarray, h: int) -> np.ndarray:
    """The first ``h`` ψ-weights of ``ma(B) / ar(B)`` (ψ_0 = 1)."""
    impulse = np.zeros(h)
    impulse[0] = 1.0
    return signal.lfilter(ma, ar, impulse)


def _poly_mul(*polys: np.ndarray) -> np.ndarray:
    out = np.array([1.0])
    for p in polys:
        out = np.convolve(out, p)
    return out


def _lognormal_quantiles(mu: np.ndarray, sd: np.ndarray, levels) -> np.ndarray:
    z = special.ndtri(np.asarray(levels, dtype=float))
    return np.maximum(np.expm1(mu[None, :] + z[:, None] * sd[None, :]), 0.0)


def _check_length(y: np.ndarray, need: int, name: str) -> None:
    if len(y) < need:
        raise ModelFitError(f"{name} needs at least {need} days of history, got {len(y)}")


class DemandModel:
    """Base of every demand model: parameter handling and the shared interface."""

    name: ClassVar[str] = "model"

    def get_params(self) -> dict[str, Any]:
        """The constructor's parameters (stored under their own names)."""
        return {k: v for k, v in vars(self).items()
                if not (k.endswith("_") or k.startswith("_"))}

    def clone(self) -> "DemandModel":
        """An unfitted copy with the same parameters."""
        return type(self)(**self.get_params())

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.get_params().items())
        return f"{type(self).__name__}({args})"

    # interface, implemented by subclasses
    def fit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "DemandModel":
        raise NotImplementedError

    def apply(self, y: np.ndarray, exog: np.ndarray | None = None) -> "DemandModel":
        raise NotImplementedError

    def refit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "DemandModel":
        """Fit again on a longer series, reusing what this fit learnt where the model can
        (the chosen order, starting values); by default a plain new fit."""
        return self.clone().fit(y, exog)

    def quantiles(self, h: int, exog_future: np.ndarray | None = None,
                  levels=LEVELS) -> np.ndarray:
        raise NotImplementedError

    def point(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        return self.quantiles(h, exog_future, (0.5,))[0]

    def point_and_quantiles(self, h: int, exog_future: np.ndarray | None = None,
                            levels=LEVELS) -> tuple[np.ndarray, np.ndarray]:
        """``point(h)`` and ``quantiles(h, levels)`` together (one pass where possible)."""
        return self.point(h, exog_future), self.quantiles(h, exog_future, levels)

    def mean(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        raise NotImplementedError

    def simulate(self, h: int, n_paths: int, rng: np.random.Generator,
                 exog_future: np.ndarray | None = None) -> np.ndarray:
        raise NotImplementedError

    def describe(self) -> str:
        """A short text naming the fitted specification (e.g. the chosen order)."""
        return self.name


class _LogLinearModel(DemandModel):
    """Log1p demand = known shift + a linear ARIMA-type process (see the module docstring).

    Subclasses set ``ar_``, ``ma_``, ``sigma_``, ``w_`` (past values of the process), ``e_``
    (past innovations) and implement ``_shift(h, exog_future)``.
    """

    def _shift(self, h: int, exog_future: np.ndarray | None) -> np.ndarray:
        raise NotImplementedError

    def log_moments(self, h: int, exog_future: np.ndarray | None = None
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Mean and standard deviation of log1p demand for the next ``h`` days, and the
        ψ-weights."""
        mu = _arma_forecast(self.ar_, self.ma_, self.w_, self.e_, h) + self._shift(h, exog_future)
        psi = _psi_weights(self.ar_, self.ma_, h)
        sd = self.sigma_ * np.sqrt(np.cumsum(psi ** 2))
        return mu, sd, psi

    def quantiles(self, h: int, exog_future: np.ndarray | None = None,
                  levels=LEVELS) -> np.ndarray:
        mu, sd, _ = self.log_moments(h, exog_future)
        return _lognormal_quantiles(mu, sd, levels)

    def point(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        mu, _, _ = self.log_moments(h, exog_future)
        return np.maximum(np.expm1(mu), 0.0)

    def point_and_quantiles(self, h: int, exog_future: np.ndarray | None = None,
                            levels=LEVELS) -> tuple[np.ndarray, np.ndarray]:
        mu, sd, _ = self.log_moments(h, exog_future)
        return np.maximum(np.expm1(mu), 0.0), _lognormal_quantiles(mu, sd, levels)

    def mean(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        mu, sd, _ = self.log_moments(h, exog_future)
        return np.maximum(np.expm1(mu + 0.5 * sd ** 2), 0.0)

    def simulate(self, h: int, n_paths: int, rng: np.random.Generator,
                 exog_future: np.ndarray | None = None) -> np.ndarray:
        mu, _, psi = self.log_moments(h, exog_future)
        shocks = rng.standard_normal((n_paths, h)) * self.sigma_
        carry = linalg.toeplitz(psi, np.zeros(h))      # carry[j, i] = ψ_{j-i}
        return np.maximum(np.expm1(mu[None, :] + shocks @ carry.T), 0.0)


def _offset(exog: np.ndarray | None, column: int | None, n: int) -> np.ndarray:
    if exog is None or column is None:
        return np.zeros(n)
    return np.asarray(exog[:, column], dtype=float)


# --------------------------------------------------------------------------------------------
# Weekly seasonal naive
# --------------------------------------------------------------------------------------------


# Plain names for people (report, spreadsheet, terminal); the codes stay in CSV columns.
MODEL_LABELS = {
    "seasonal_naive": "weekly seasonal naive",
    "holt_winters": "Holt-Winters",
    "regression_arima": "regression with ARIMA errors",
    "network_profile": "network weekday profile",
}


def model_label(code: str) -> str:
    """The plain name of a model code (:data:`MODEL_LABELS`; the code itself if unknown)."""
    return MODEL_LABELS.get(str(code), str(code))


class SeasonalNaive(DemandModel):
    """Weekly seasonal naive: tomorrow's demand is demand seven days before.

    Point forecast for day ``j`` (0-based) of the horizon: ``y[n + j - 7k]``, ``k = j // 7 + 1``.
    Band and paths are *empirical*: every past origin ``o`` gives the vector of the log errors
    this forecast would have made over the next ``h`` days; the quantiles of day ``j`` are the
    empirical quantiles of those errors and a path draws one whole error vector (so paths keep
    the day-to-day dependence of real errors). With fewer than ``min_analogues`` past windows
    the band is Gaussian on the log scale with variance ``k·σ²`` (σ² = mean squared one-week
    log difference), i.e. a weekly seasonal random walk.
    """

    name = "seasonal_naive"

    def __init__(self, *, min_days: int = 14, min_analogues: int = 28):
        self.min_days = min_days
        self.min_analogues = min_analogues

    def fit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "SeasonalNaive":
        y = np.asarray(y, dtype=float)
        _check_length(y, max(self.min_days, WEEK + 1), self.name)
        self.y_ = y
        self.z_ = np.log1p(y)
        self.residuals_ = self.z_[WEEK:] - self.z_[:-WEEK]
        self._errors: dict[int, np.ndarray | None] = {}
        return self

    def apply(self, y: np.ndarray, exog: np.ndarray | None = None) -> "SeasonalNaive":
        return self.clone().fit(y, exog)

    def _base(self, h: int) -> np.ndarray:
        j = np.arange(h)
        return len(self.z_) + j - WEEK * (j // WEEK + 1)

    def errors(self, h: int) -> np.ndarray | None:
        """Past log errors ``[window, h]`` of the h-day forecast (None when too few)."""
        if h not in self._errors:
            n = len(self.z_)
            origins = np.arange(WEEK, n - h + 1)
            if len(origins) < self.min_analogues:
                self._errors[h] = None
            else:
                j = np.arange(h)
                idx = origins[:, None] + j[None, :]
                self._errors[h] = self.z_[idx] - self.z_[idx - WEEK * (j // WEEK + 1)]
        return self._errors[h]

    def _gauss_sd(self, h: int) -> np.ndarray:
        sigma = math.sqrt(float(np.mean(self.residuals_ ** 2)))
        return sigma * np.sqrt(np.arange(h) // WEEK + 1.0)

    def point(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        return self.y_[self._base(h)]

    def quantiles(self, h: int, exog_future: np.ndarray | None = None,
                  levels=LEVELS) -> np.ndarray:
        base = self.z_[self._base(h)]
        err = self.errors(h)
        if err is None:
            return _lognormal_quantiles(base, self._gauss_sd(h), levels)
        q = np.quantile(err, np.asarray(levels, dtype=float), axis=0)
        return np.maximum(np.expm1(base[None, :] + q), 0.0)

    def mean(self, h: int, exog_future: np.ndarray | None = None) -> np.ndarray:
        base = self.z_[self._base(h)]
        err = self.errors(h)
        if err is None:
            return np.maximum(np.expm1(base + 0.5 * self._gauss_sd(h) ** 2), 0.0)
        return np.maximum(np.expm1(base[None, :] + err), 0.0).mean(axis=0)

    def simulate(self, h: int, n_paths: int, rng: np.random.Generator,
                 exog_future: np.ndarray | None = None) -> np.ndarray:
        base = self.z_[self._base(h)]
        err = self.errors(h)
        if err is None:
            # weekly seasonal random walk: day j carries the shocks of days j, j-7, j-14, …
            psi = (np.arange(h) % WEEK == 0).astype(float)
            shocks = rng.standard_normal((n_paths, h)) * self._gauss_sd(1)[0]
            dev = shocks @ linalg.toeplitz(psi, np.zeros(h)).T
            return np.maximum(np.expm1(base[None, :] + dev), 0.0)
        rows = rng.integers(0, len(err), size=n_paths)
        return np.maximum(np.expm1(base[None, :] + err[rows]), 0.0)


# --------------------------------------------------------------------------------------------
# Holt-Winters / ETS(A,N,A) on log1p demand
# --------------------------------------------------------------------------------------------


def hw_polynomials(alpha: float, gamma: float, m: int = WEEK) -> tuple[np.ndarray, np.ndarray]:
    """ARIMA form of ETS(A,N,A): ``(1-B)(1-B^m) z_t = θ(B) e_t`` with
    ``θ(B) = 1 - (1-α)B - (1-γ)B^m + (1-α-γ)B^{m+1}``.

    From ``z_t = l_{t-1} + s_{t-m} + e_t``, ``l_t = l_{t-1} + α e_t``,
    ``s_t = s_{t-m} + γ e_t`` (Hyndman et al. 2008, ch. 11). Returns ``(ar, ma)``.
    """
    ar = np.zeros(m + 2)
    ar[[0, 1, m, m + 1]] = [1.0, -1.0, -1.0, 1.0]
    ma = np.zeros(m + 2)
    ma[[0, 1, m, m + 1]] = [1.0, -(1.0 - alpha), -(1.0 - gamma), 1.0 - alpha - gamma]
    return ar, ma


def _hw_initial_basis(m: int) -> np.ndarray:
    """Filter states ``[m+1, m]`` that start the error filter from the initial seasonal
    values: column ``j`` is a pre-sample with no errors and level+season 1 on phase ``j``.

    With no past errors the state depends only on the past inputs, so it does not depend on
    α and γ.
    """
    ar, _ = hw_polynomials(0.0, 0.0, m)
    out = np.zeros((m + 1, m))
    lags = np.arange(1, m + 2)                       # pre-sample days -1 … -(m+1)
    for j in range(m):
        past = ((-lags) % m == j).astype(float)
        out[:, j] = signal.lfiltic(ar, [1.0], y=np.zeros(m + 1), x=past)
    return out


_HW_BASIS = {WEEK: _hw_initial_basis(WEEK)}


def hw_errors(z: np.ndarray, alpha: float, gamma: float, m: int = WEEK,
              initial: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """One-step errors of ETS(A,N,A) on ``z``; the ``m`` initial values (level + season of each
    phase ``t mod m``) are least-squares optimal when ``initial`` is None.

    Returns ``(errors, initial)``. The errors are linear in the initial values,
    ``e = e0 + G c``, so the optimum is one small least-squares problem.
    """
    basis = _HW_BASIS.get(m)
    if basis is None:
        basis = _HW_BASIS[m] = _hw_initial_basis(m)
    ar, ma = hw_polynomials(alpha, gamma, m)
    if initial is not None:
        return signal.lfilter(ar, ma, z, zi=basis @ initial)[0], initial
    n = len(z)
    inputs = np.zeros((m + 1, n))
    inputs[0] = z
    states = np.zeros((m + 1, m + 1))
    states[1:] = basis.T
    out = signal.lfilter(ar, ma, inputs, axis=-1, zi=states)[0]
    e0, g = out[0], out[1:].T
    c = -_solve_ols(g, e0)
    return e0 + g @ c, c


def _hw_sse(params: np.ndarray, z: np.ndarray, m: int) -> float:
    alpha, g = params
    e, _ = hw_errors(z, alpha, g * (1.0 - alpha), m)
    value = float(e @ e)
    return value if math.isfinite(value) else 1e300


def hw_start(z: np.ndarray, alpha_gamma: tuple[float, float] | None = None,
             m: int = WEEK) -> np.ndarray:
    """Start values for statsmodels' ``ExponentialSmoothing`` fit, in its order
    ``[α, γ, l0, s0 … s_{m-1}]``.

    α and γ are the best of a coarse grid (the least-squares surface can have a shallow second
    valley) unless given; the initial level and seasons are then least-squares optimal for
    them (:func:`hw_errors`). This replaces statsmodels' own brute-force search for a start,
    which takes about as long as the fit itself.
    """
    if alpha_gamma is None:
        grid = [(a, g) for a in (0.05, 0.2, 0.5) for g in (0.05, 0.3)]
        a, g = min(grid, key=lambda p: _hw_sse(np.array(p), z, m))
        alpha_gamma = (a, g * (1.0 - a))
    alpha, gamma = alpha_gamma
    _, c = hw_errors(z, alpha, gamma, m)
    level = float(c.mean())
    return np.r_[alpha, gamma, level, c - level]


class HoltWinters(_LogLinearModel):
    """Holt-Winters exponential smoothing with additive weekly seasonality on log1p demand,
    ETS(A,N,A) (no trend: cash demand drifts, it rarely trends for weeks on end).

    α and γ are estimated by statsmodels' ``ExponentialSmoothing(z, seasonal="add",
    seasonal_periods=7)`` (least squares within its bounds ``0 ≤ α ≤ 1``, ``0 ≤ γ ≤ 1 − α``),
    started from :func:`hw_start`. The seven initial values are then the least-squares optimum
    for those α and γ (:func:`hw_errors`; never worse than statsmodels' own), and
    σ² = SSE/(n − 9). ``offset_column``: an exog column that is a known log lift
    (``event_log_lift``), removed before smoothing and added back to the forecast.
    """

    name = "holt_winters"

    def __init__(self, *, offset_column: int | None = None, min_days: int = 28):
        self.offset_column = offset_column
        self.min_days = min_days

    def fit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "HoltWinters":
        y = np.asarray(y, dtype=float)
        _check_length(y, max(self.min_days, 3 * WEEK), self.name)
        z = np.log1p(y) - _offset(exog, self.offset_column, len(y))
        alpha, gamma = self._fit_statsmodels(z, hw_start(z, getattr(self, "_start", None)))
        e, c = hw_errors(z, alpha, gamma)
        sse = float(e @ e)
        if not math.isfinite(sse):
            raise ModelFitError(f"{self.name}: the fit did not converge (non-finite errors)")
        self.alpha_, self.gamma_, self.initial_ = alpha, gamma, c
        self.sse_ = sse
        self.sigma_ = math.sqrt(sse / max(len(z) - (WEEK + 2), 1))
        self._set_state(z, e)
        return self

    def refit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "HoltWinters":
        """Fit again on ``y``, starting from the current smoothing parameters."""
        new = self.clone()
        new._start = (self.alpha_, self.gamma_)
        return new.fit(y, exog)

    @staticmethod
    def _fit_statsmodels(z: np.ndarray, start: np.ndarray) -> tuple[float, float]:
        from statsmodels.tsa.holtwinters import ExponentialSmoothing

        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                res = ExponentialSmoothing(z, seasonal="add", seasonal_periods=WEEK).fit(
                    start_params=start, use_brute=False)
            except (ValueError, np.linalg.LinAlgError) as exc:
                raise ModelFitError(f"holt_winters: statsmodels' fit failed ({exc})") from exc
        alpha = float(res.params["smoothing_level"])
        gamma = float(res.params["smoothing_seasonal"])
        if not (math.isfinite(alpha) and math.isfinite(gamma)):
            raise ModelFitError("holt_winters: statsmodels' fit did not converge")
        return alpha, gamma

    def _set_state(self, z: np.ndarray, e: np.ndarray) -> None:
        self.ar_, self.ma_ = hw_polynomials(self.alpha_, self.gamma_)
        self.w_, self.e_ = z, e
        self.residuals_ = e

    def apply(self, y: np.ndarray, exog: np.ndarray | None = None) -> "HoltWinters":
        new = self.clone()
        new.alpha_, new.gamma_, new.initial_ = self.alpha_, self.gamma_, self.initial_
        new.sse_, new.sigma_ = self.sse_, self.sigma_
        z = np.log1p(np.asarray(y, dtype=float)) - _offset(exog, self.offset_column, len(y))
        e, _ = hw_errors(z, self.alpha_, self.gamma_, initial=self.initial_)
        new._set_state(z, e)
        return new

    def _shift(self, h: int, exog_future: np.ndarray | None) -> np.ndarray:
        return _offset(exog_future, self.offset_column, h)

    def describe(self) -> str:
        return f"ETS(A,N,A) on log1p, alpha={self.alpha_:.3f}, gamma={self.gamma_:.3f}"


# --------------------------------------------------------------------------------------------
# Regression on calendar features with ARIMA errors
# --------------------------------------------------------------------------------------------


def weekday_dummies(start_phase: int, n: int) -> np.ndarray:
    """Six 0/1 columns for phases 1…6 of ``(start_phase + t) mod 7`` (phase 0 is the base)."""
    phase = (start_phase + np.arange(n)) % WEEK
    return (phase[:, None] == np.arange(1, WEEK)[None, :]).astype(float)


def _lag(a: np.ndarray, k: int) -> np.ndarray:
    """``a`` delayed by ``k`` days (zeros before the start), along the first axis."""
    out = np.zeros_like(a)
    out[k:] = a[: len(a) - k]
    return out


def _admissible(phi: np.ndarray, theta: np.ndarray) -> bool:
    """True when the AR part is stationary and the MA part invertible."""
    for poly in (np.concatenate(([1.0], -phi)), np.concatenate(([1.0], theta))):
        if len(poly) == 2:
            if abs(poly[1]) >= 0.999:
                return False
        elif len(poly) == 3:
            # the stationarity triangle of a second-order polynomial 1 − a1 B − a2 B²
            a1, a2 = -poly[1], -poly[2]
            if not (a1 + a2 < 0.999 and a2 - a1 < 0.999 and abs(a2) < 0.999):
                return False
        elif len(poly) > 3:
            if np.any(np.abs(np.roots(poly[::-1])) <= 1.001):
                return False
    return True


def _css_start(u: np.ndarray, p: int, q: int) -> tuple[np.ndarray, np.ndarray]:
    """Starting ARMA coefficients by Hannan & Rissanen (1982): a long autoregression gives
    innovations, then one regression on lagged values and lagged innovations."""
    if p == 0 and q == 0:
        return np.zeros(0), np.zeros(0)
    m = 10 if q else p
    lags = np.column_stack([_lag(u, i) for i in range(1, m + 1)])
    ehat = np.zeros_like(u)
    if q:
        coef = _solve_ols(lags[m:], u[m:])
        ehat[m:] = u[m:] - lags[m:] @ coef
    start = m + q
    cols = [_lag(u, i) for i in range(1, p + 1)] + [_lag(ehat, j) for j in range(1, q + 1)]
    coef = _solve_ols(np.column_stack(cols)[start:], u[start:])
    phi, theta = coef[:p], np.clip(coef[p:], -0.9, 0.9)
    if not _admissible(phi, np.zeros(0)):
        phi = np.zeros(p)
    return phi, theta


def css_regression_arma(dz: np.ndarray, dX: np.ndarray, p: int, q: int, cond: int,
                        start: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
                        max_iter: int = 50) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Regression with ARMA(p, q) errors by conditional sum of squares, jointly in all
    parameters, by Gauss–Newton with step halving::

        e_t = θ(B)⁻¹ φ(B) (dz_t − dX_t β),   minimise Σ_{t ≥ cond} e_t²

    (zero pre-sample values). The Jacobian comes from filtering: ∂e/∂β = −θ⁻¹φ dX,
    ∂e/∂φ_i = −θ⁻¹ u_{t−i}, ∂e/∂θ_j = −θ⁻¹ e_{t−j}. Starts from OLS and Hannan–Rissanen unless
    ``start = (beta, phi, theta)`` is given. Returns ``(beta, phi, theta, sse)``; raises
    :class:`ModelFitError` when no admissible fit is found.
    """
    data = np.column_stack([dz, dX])
    if start is None:
        beta = _solve_ols(dX, dz)
        phi, theta = _css_start(dz - dX @ beta, p, q)
    else:
        beta, phi, theta = (np.array(v, dtype=float) for v in start)

    def residuals(beta, phi, theta):
        filtered = signal.lfilter(np.concatenate(([1.0], -phi)),
                                  np.concatenate(([1.0], theta)), data, axis=0)
        return filtered[:, 0] - filtered[:, 1:] @ beta, filtered

    e, filtered = residuals(beta, phi, theta)
    sse = float(e[cond:] @ e[cond:])
    if not math.isfinite(sse):
        raise ModelFitError(f"ARMA({p},{q}) errors: the starting values give no finite fit")
    k = len(beta)
    for _ in range(max_iter):
        ma = np.concatenate(([1.0], theta))
        u = dz - dX @ beta
        cols = [filtered[:, 1:]]
        if p:
            a = u if q == 0 else signal.lfilter([1.0], ma, u)
            cols += [_lag(a, i)[:, None] for i in range(1, p + 1)]
        if q:
            b = signal.lfilter([1.0], ma, e)
            cols += [_lag(b, j)[:, None] for j in range(1, q + 1)]
        jac = np.hstack(cols)[cond:]
        step = _solve_ols(jac, e[cond:])
        accepted = False
        for _halving in range(10):
            nb, nphi, nth = beta + step[:k], phi + step[k:k + p], theta + step[k + p:]
            if _admissible(nphi, nth):
                ne, nf = residuals(nb, nphi, nth)
                nsse = float(ne[cond:] @ ne[cond:])
                if math.isfinite(nsse) and nsse <= sse:
                    accepted = True
                    break
            step = step / 2.0
        if not accepted:
            break
        gain = sse - nsse
        beta, phi, theta, e, filtered, sse = nb, nphi, nth, ne, nf, nsse
        if gain <= 1e-10 * sse:
            break
    if not (math.isfinite(sse) and sse > 0):
        raise ModelFitError(f"ARMA({p},{q}) errors: the sum of squares is not positive")
    return beta, phi, theta, sse


def _near_unit_root(phi: np.ndarray, theta: np.ndarray, limit: float) -> bool:
    """Whether the AR polynomial ``1 − φ1 B − …`` or the MA polynomial ``1 + θ1 B + …`` has an
    inverse root of modulus above ``limit`` (a root near the unit circle)."""
    for poly in (np.concatenate(([1.0], -np.asarray(phi, float))),
                 np.concatenate(([1.0], np.asarray(theta, float)))):
        if len(poly) > 1 and np.max(np.abs(np.roots(poly))) > limit:
            return True
    return False


class RegressionARIMA(_LogLinearModel):
    """Regression of log1p demand on weekday dummies and calendar features with ARIMA errors::

        z_t = log1p(y_t) − offset_t = x_t'β + w_t,   φ(B)(1−B)^d w_t = θ(B) e_t

    ``x_t`` = constant (not with d = 1), six weekday dummies (by position in the week, counted
    from the first day of the series), and every exog column that is non-zero on at least
    ``min_occurrences`` days of the history. The order ``(p, d, q)`` is chosen from ``orders``
    by AIC, all candidates conditioned on the same first days so their sums of squares compare.

    ``method="css"`` (default): conditional sum of squares, computed as feasible GLS (OLS of
    the regression, ARMA by CSS on its residuals, GLS re-estimate of β on the ARMA-filtered
    data; two rounds). ``method="exact"``: exact Gaussian maximum likelihood, the regression
    profiled out (:func:`planner.forecast.exact.fit_exact`, the same optimum as ``SARIMAX`` at
    a tenth of its time). ``method="mle"``: exact Gaussian maximum likelihood with
    statsmodels ``SARIMAX`` for every order of the grid (slow; the reference).

    Near the edge of the parameter space the conditional fit drifts from the exact one (an AR
    root near the unit circle on a trending series, where the conditional AIC picks the
    undifferenced order and exact ML the differenced one, as on statsmodels' ``macrodata``; an
    MA root near it on an over-differenced series). When any order of the grid has an AR or
    MA root of modulus above ``NEAR_UNIT`` (in the inverse-root sense: the polynomial's roots
    inside ``1 / NEAR_UNIT``), the whole grid is fitted again by exact ML (``"exact"``) and
    chosen by its AIC, leaving out the orders without differencing whose AR part has a root
    at the circle (a difference in disguise; their AIC does not compare with the differenced
    orders'; an order whose conditional fit already shows such a root is not fitted again at
    all); ``fit_method_`` and :meth:`describe` say so. Elsewhere the two agree to well within
    1 % in their 14-day forecasts (tests: statsmodels' ``macrodata``, demo terminals,
    simulated series), at a fraction of the cost.
    """

    NEAR_UNIT = 0.95

    name = "regression_arima"

    def __init__(self, *, orders: tuple[tuple[int, int, int], ...] = ((1, 0, 0), (2, 0, 0),
                                                                       (1, 0, 1), (0, 1, 1)),
                 offset_column: int | None = None, method: str = "css",
                 min_occurrences: int = 3, min_days: int = 42):
        self.orders = tuple(tuple(o) for o in orders)
        self.offset_column = offset_column
        self.method = method
        self.min_occurrences = min_occurrences
        self.min_days = min_days

    # ---- design ------------------------------------------------------------------------
    def _regressors(self, exog: np.ndarray | None, n: int, start: int) -> np.ndarray:
        cols = [np.ones((n, 1)), weekday_dummies(start, n)]
        if exog is not None and self.exog_columns_:
            cols.append(np.asarray(exog, dtype=float)[:, self.exog_columns_])
        return np.hstack(cols)

    def _choose_columns(self, exog: np.ndarray | None) -> list[int]:
        if exog is None:
            return []
        exog = np.asarray(exog, dtype=float)
        keep = []
        for j in range(exog.shape[1]):
            if j == self.offset_column:
                continue
            if np.count_nonzero(exog[:, j]) >= self.min_occurrences:
                keep.append(j)
        return keep

    # ---- fit ---------------------------------------------------------------------------
    def fit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "RegressionARIMA":
        cond = max(p + d + q for p, d, q in self.orders) + 1
        return self._fit_grid(y, exog, self.orders, cond, None)

    def refit(self, y: np.ndarray, exog: np.ndarray | None = None) -> "RegressionARIMA":
        """Fit again on ``y`` (the whole history after the backtest) with the order chosen
        before, starting from the current estimates."""
        new = self.clone()
        columns = new._choose_columns(exog)
        start = (self.beta_, self.phi_, self.theta_) if columns == self.exog_columns_ \
            else None
        if self.fit_method_ != "css":
            # the refit keeps the exact fit the grid needed (statsmodels' own when asked for)
            new.method = "mle" if self.method == "mle" else "exact"
        new._fit_grid(y, exog, (self.order_,), self.cond_, start)
        new.method = self.method
        new.fit_method_ = self.fit_method_
        new.aic_by_order_ = {**self.aic_by_order_, self.order_: new.aic_}
        return new

    def _fit_grid(self, y: np.ndarray, exog: np.ndarray | None,
                  orders: tuple[tuple[int, int, int], ...], cond: int,
                  start: tuple | None) -> "RegressionARIMA":
        y = np.asarray(y, dtype=float)
        self.exog_columns_ = self._choose_columns(exog)
        _check_length(y, max(self.min_days, 2 * (WEEK + len(self.exog_columns_) + 3)),
                      self.name)
        n = len(y)
        z = np.log1p(y) - _offset(exog, self.offset_column, n)
        X = self._regressors(exog, n, 0)
        fits, failures = [], []
        for order in orders:
            try:
                if self.method == "css":
                    fits.append(self._fit_css(z, X, order, cond, start))
                elif self.method == "mle":
                    fits.append(self._fit_mle(z, X, order))
                elif self.method == "exact":
                    fits.append(fit_exact(z, X, order, None if start is None
                                          else start[1:]))
                else:
                    raise ValueError("method must be 'css', 'exact' or 'mle', got "
                                     f"{self.method!r}")
            except (ModelFitError, np.linalg.LinAlgError) as exc:
                failures.append(f"{order}: {exc}")
        if not fits:
            raise ModelFitError(f"{self.name}: no order of the grid could be fitted "
                                f"({'; '.join(failures)})")
        self.fit_method_ = self.method
        if self.method == "css" and any(_near_unit_root(f["phi"], f["theta"], self.NEAR_UNIT)
                                        for f in fits):
            exact = []
            by_order = {f["order"]: f for f in fits}
            integrated = any(o[1] for o in orders)
            for order in orders:
                near = by_order.get(order)
                if (integrated and order[1] == 0 and near is not None
                        and _near_unit_root(near["phi"], np.zeros(0), self.NEAR_UNIT)):
                    continue      # an AR unit root: the integrated orders stand for it
                # the conditional fit starts the exact one where it is not itself at the edge
                start = (None if near is None or _near_unit_root(near["phi"], near["theta"],
                                                                 self.NEAR_UNIT) else near)
                try:
                    exact.append(fit_exact(z, X, order, None if start is None
                                           else (start["phi"], start["theta"])))
                except (ModelFitError, np.linalg.LinAlgError) as exc:
                    failures.append(f"{order} by exact ML: {exc}")
            if exact:
                fits = exact
                self.fit_method_ = "mle (a root near the unit circle)"
        if self.fit_method_ != "css" and any(f["order"][1] for f in fits):
            # an AR root at the unit circle is a difference in disguise: the integrated
            # orders represent such a series (and their AIC is not comparable across d)
            level = [f for f in fits if f["order"][1] or not _near_unit_root(
                f["phi"], np.zeros(0), self.NEAR_UNIT)]
            fits = level or fits
        best = min(fits, key=lambda f: f["aic"])
        self.order_, self.cond_ = best["order"], cond
        self.beta_, self.phi_, self.theta_ = best["beta"], best["phi"], best["theta"]
        self.sigma_ = best["sigma"]
        self.aic_ = best["aic"]
        self.aic_by_order_ = {f["order"]: f["aic"] for f in fits}
        self.failed_orders_ = failures
        self._set_state(z, X)
        return self

    @staticmethod
    def _differenced(a: np.ndarray, d: int) -> np.ndarray:
        return np.diff(a, n=d, axis=0) if d else a

    def _fit_css(self, z: np.ndarray, X: np.ndarray, order: tuple[int, int, int],
                 cond: int, start: tuple | None = None) -> dict[str, Any]:
        p, d, q = order
        dz = self._differenced(z, d)
        dX = self._differenced(X, d)
        if d:
            dX = dX[:, 1:]                       # the constant differences away
            if start is not None:
                start = (start[0][1:], *start[1:])
        c = cond - d                             # same first days conditioned for every order
        beta, phi, theta, sse = css_regression_arma(dz, dX, p, q, c, start=start)
        n_eff = len(dz) - c
        k = len(beta) + p + q + 1
        if d:
            beta = np.concatenate(([0.0], beta))
        return {"order": order, "beta": beta, "phi": phi, "theta": theta,
                "sigma": math.sqrt(sse / max(n_eff - k, 1)),
                "aic": n_eff * math.log(sse / n_eff) + 2 * k}

    def _fit_mle(self, z: np.ndarray, X: np.ndarray,
                 order: tuple[int, int, int]) -> dict[str, Any]:
        """Exact ML by SARIMAX (the variance concentrated out of the likelihood: the same
        optimum, fewer parameters to search), from SARIMAX's own start."""
        from statsmodels.tsa.statespace.sarimax import SARIMAX

        p, d, q = order
        # the constant goes in as a regressor: SARIMAX's own trend="c" is the intercept of
        # the ARMA recursion, not the mean of the regression; with d = 1 it is not identified
        regressors = X if d == 0 else X[:, 1:]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            model = SARIMAX(z, exog=regressors, order=order, trend="n",
                            concentrate_scale=True)
            res = model.fit(disp=False, maxiter=200)
            if not res.mle_retvals.get("converged", True):
                # a hard surface (a root near the circle): Nelder–Mead first, then the
                # quasi-Newton polish from where it stopped
                rough = model.fit(disp=False, method="nm", maxiter=5000)
                res = model.fit(disp=False, start_params=rough.params, maxiter=500)
        if not res.mle_retvals.get("converged", True):
            raise ModelFitError(f"SARIMAX{order} did not converge")
        # SARIMAX orders its parameters as exog, AR, MA (the variance is concentrated out)
        params = np.asarray(res.params)
        k = regressors.shape[1]
        beta, phi, theta = params[:k], params[k:k + p], params[k + p:k + p + q]
        if d:
            beta = np.concatenate(([0.0], beta))
        return {"order": order, "beta": beta, "phi": phi, "theta": theta,
                "sigma": math.sqrt(float(res.scale)), "aic": float(res.aic)}

    def _set_state(self, z: np.ndarray, X: np.ndarray) -> None:
        d = self.order_[1]
        self.ar_ = _poly_mul(np.concatenate(([1.0], -self.phi_)),
                             *([np.array([1.0, -1.0])] * d))
        self.ma_ = np.concatenate(([1.0], self.theta_))
        self.w_ = z - X @ self.beta_
        self.e_ = signal.lfilter(self.ar_, self.ma_, self.w_)
        self.residuals_ = self.e_[max(len(self.ar_), len(self.ma_)):]
        self.n_ = len(z)

    def apply(self, y: np.ndarray, exog: np.ndarray | None = None) -> "RegressionARIMA":
        new = self.clone()
        for key in ("exog_columns_", "order_", "cond_", "beta_", "phi_", "theta_", "sigma_", "aic_",
                    "aic_by_order_", "failed_orders_", "fit_method_"):
            setattr(new, key, getattr(self, key))
        y = np.asarray(y, dtype=float)
        n = len(y)
        z = np.log1p(y) - _offset(exog, self.offset_column, n)
        new._set_state(z, new._regressors(exog, n, 0))
        return new

    def _shift(self, h: int, exog_future: np.ndarray | None) -> np.ndarray:
        X = self._regressors(exog_future, h, self.n_)
        return X @ self.beta_ + _offset(exog_future, self.offset_column, h)

    def describe(self) -> str:
        p, d, q = self.order_
        how = "" if self.fit_method_ == "css" else f", fitted by {self.fit_method_}"
        return (f"regression with ARIMA({p},{d},{q}) errors on log1p, AIC {self.aic_:.1f}"
                f"{how}")


CANDIDATES: dict[str, type[DemandModel]] = {
    SeasonalNaive.name: SeasonalNaive,
    HoltWinters.name: HoltWinters,
    RegressionARIMA.name: RegressionARIMA,
}
