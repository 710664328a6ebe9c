"""Exact Gaussian maximum likelihood of a regression with ARMA(p, q) errors, the regression
coefficients profiled out.

The model (after ``d`` differences of the series and of the regressors)::

    w_t = z_t − x_t'β,   φ(B) w_t = θ(B) ε_t,   ε_t ~ N(0, σ²)

For fixed ARMA parameters ψ = (φ, θ) the Kalman filter of the ARMA part (Harvey's state
space form, the state started from its stationary distribution) is linear in the data, and
its gains and innovation variances ``F_t`` do not depend on the data. Filtering ``z`` and
every column of ``X`` with the same gains gives the standardised innovations
``z̃ = L⁻¹ z``, ``X̃ = L⁻¹ X``; the exact generalised least squares estimate is then
``β̂(ψ) = argmin ‖z̃ − X̃ β‖²`` and, with σ² concentrated out too, the profile log-likelihood

    ℓ(ψ) = −n/2 · (log 2π + 1 + log(S(ψ)/n)) − ½ Σ log F_t,   S(ψ) = ‖z̃ − X̃ β̂(ψ)‖²

(Harvey 1989, *Forecasting, Structural Time Series Models and the Kalman Filter*, ch. 3.4;
Durbin & Koopman 2012, *Time Series Analysis by State Space Methods*, ch. 7). Only ψ — at
most two numbers on the model's grid — is searched numerically, under the stationarity and
invertibility transform of Monahan (1984) as statsmodels implements it. The optimum is the
one statsmodels ``SARIMAX`` finds by searching all of (β, ψ) at once; the tests hold the two
to the same log-likelihood, coefficients and forecasts. It exists because that search costs
about a quarter of a second per order on two years of days, and the forecasting stage runs it
on every terminal whose conditional fit sits near a unit root.

With ``d = 1`` the likelihood is that of the differenced data, as ``SARIMAX`` computes it (it
leaves the first ``d`` observations out of the likelihood: its diffuse part), and the AIC
counts β, ψ and σ² as ``SARIMAX`` does.
"""
from __future__ import annotations

import math
from functools import cache

import numpy as np
from scipy import linalg, optimize


@cache
def _compiled():
    """:func:`_filter` compiled by numba (on first use; the machine code is cached on disk)."""
    from numba import njit

    return njit(cache=True)(_filter)


def _filter(W, T, RR, P0, out, log_f):
    """The ARMA Kalman filter on every column of ``W`` ``[n, m]`` at once: writes the
    standardised innovations into ``out`` ``[n, m]`` and ``log F_t`` into ``log_f``."""
    n, m = W.shape
    r = T.shape[0]
    P = P0.copy()
    a = np.zeros((r, m))
    new = np.zeros(r)
    K = np.zeros(r)
    TP = np.zeros((r, r))
    for t in range(n):
        f = max(P[0, 0], 1e-300)
        log_f[t] = math.log(f)
        sf = math.sqrt(f)
        # gain K = T P Z' / F, with Z = e_1
        for i in range(r):
            s = 0.0
            for j in range(r):
                s += T[i, j] * P[j, 0]
            K[i] = s / f
        for c in range(m):
            v = W[t, c] - a[0, c]
            out[t, c] = v / sf
            for i in range(r):
                s = K[i] * v
                for j in range(r):
                    s += T[i, j] * a[j, c]
                new[i] = s
            for i in range(r):
                a[i, c] = new[i]
        # P <- T P T' - K K' F + R R'
        for i in range(r):
            for j in range(r):
                s = 0.0
                for k in range(r):
                    s += T[i, k] * P[k, j]
                TP[i, j] = s
        for i in range(r):
            for j in range(r):
                s = 0.0
                for k in range(r):
                    s += TP[i, k] * T[j, k]
                P[i, j] = s - K[i] * K[j] * f + RR[i, j]


def _system(phi: np.ndarray, theta: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Transition ``T``, ``R R'`` and the stationary state covariance of ARMA(φ, θ), σ² = 1."""
    r = max(len(phi), len(theta) + 1, 1)
    T = np.zeros((r, r))
    T[:len(phi), 0] = phi
    T[:-1, 1:] = np.eye(r - 1)
    R = np.zeros(r)
    R[0] = 1.0
    R[1:len(theta) + 1] = theta
    RR = np.outer(R, R)
    P0 = linalg.solve_discrete_lyapunov(T, RR)
    return T, RR, P0


def profile(z: np.ndarray, X: np.ndarray, phi: np.ndarray,
            theta: np.ndarray) -> tuple[float, np.ndarray, float]:
    """The profile log-likelihood ``ℓ(ψ)`` of the (already differenced) ``z`` on ``X``, the GLS
    coefficients ``β̂(ψ)`` and ``S(ψ) / n`` (the ML estimate of σ²)."""
    n = len(z)
    T, RR, P0 = _system(np.asarray(phi, float), np.asarray(theta, float))
    W = np.ascontiguousarray(np.column_stack([z, X]), dtype=float)
    out = np.empty_like(W)
    log_f = np.empty(n)
    _compiled()(W, T, RR, P0, out, log_f)
    zt, Xt = out[:, 0], out[:, 1:]
    if Xt.shape[1]:
        beta = np.linalg.lstsq(Xt, zt, rcond=None)[0]
        resid = zt - Xt @ beta
    else:
        beta, resid = np.zeros(0), zt
    s2 = float(resid @ resid) / n
    llf = -0.5 * n * (math.log(2.0 * math.pi) + 1.0 + math.log(max(s2, 1e-300))) \
        - 0.5 * float(log_f.sum())
    return llf, beta, s2


def fit_exact(z: np.ndarray, X: np.ndarray, order: tuple[int, int, int],
              start: tuple[np.ndarray, np.ndarray] | None = None) -> dict:
    """Exact ML of ``z`` (levels) on ``X`` with ARIMA ``order`` errors. With ``d = 1`` the
    series and the regressors are differenced and ``X``'s first column (the constant) is
    dropped; the returned ``beta`` then starts with 0 for it. ``start``: (φ, θ) to start the
    search from (inside the stationary and invertible region). Returns ``order``, ``beta``,
    ``phi``, ``theta``, ``sigma``, ``aic`` and ``llf``."""
    from statsmodels.tsa.statespace.tools import (constrain_stationary_univariate,
                                                  unconstrain_stationary_univariate)

    p, d, q = order
    z = np.asarray(z, float)
    X = np.asarray(X, float)
    if d:
        z = np.diff(z, n=d)
        X = np.diff(X, n=d, axis=0)[:, 1:]

    def split(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        phi = constrain_stationary_univariate(u[:p]) if p else np.zeros(0)
        # invertibility: θ(B) = 1 + θ₁B + … has the roots of a stationary AR with −θ
        theta = -constrain_stationary_univariate(u[p:]) if q else np.zeros(0)
        return phi, theta

    def negative(u: np.ndarray) -> float:
        return -profile(z, X, *split(u))[0]

    u0 = np.zeros(p + q)
    if start is not None:
        phi0, theta0 = (np.clip(np.asarray(a, float), -0.98, 0.98) for a in start)
        try:
            u0 = np.concatenate([unconstrain_stationary_univariate(phi0) if p else [],
                                 unconstrain_stationary_univariate(-theta0) if q else []])
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            u0 = np.zeros(p + q)
        if not np.all(np.isfinite(u0)):
            u0 = np.zeros(p + q)
    best = optimize.minimize(negative, u0, method="BFGS").x if p + q else u0
    phi, theta = split(best)
    llf, beta, s2 = profile(z, X, phi, theta)
    if d:
        beta = np.concatenate(([0.0], beta))
    k = X.shape[1] + p + q + 1
    return {"order": order, "beta": beta, "phi": phi, "theta": theta,
            "sigma": math.sqrt(s2), "aic": -2.0 * llf + 2.0 * k, "llf": llf}
