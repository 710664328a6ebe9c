"""The forecasting stage: every terminal's champion model and its demand paths.

For each terminal (in parallel processes when ``jobs > 1``):

1. its cleaned daily demand (``CleanHistory.daily["demand"]``; dry days are already estimated
   there) and the calendar features of its days;
2. a rolling-origin backtest of every candidate (:mod:`planner.forecast.backtest`); a model
   that cannot be fitted is left out, with the reason in ``fallbacks``;
3. the champion — lowest mean scaled pinball loss — is refitted on the whole history (on
   failure the next best takes its place, again recorded);
4. its quantiles and ``path_count`` joint demand paths over the forecast days.

Terminals without history are forecast from the network-average weekday profile scaled to the
median level (:mod:`planner.forecast.network`); terminals with too little history for any model
from the same profile scaled to their own mean. Both are named in ``fallbacks``.

When a terminal's history ends before the day before the first planning day, the forecast
starts after its last day and the days in between are simulated and dropped.
"""
from __future__ import annotations

import inspect
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from planner.calendar import FEATURE_COLUMNS, calendar_features
from planner.errors import InputError, Problem
from planner.forecast.backtest import backtest_model, champion_reason, origin_days, rank_models
from planner.forecast.models import LEVELS, MODELS, DemandModel, ModelFitError
from planner.forecast.network import NetworkProfile, network_profile
from planner.forecast.paths import simulate_paths, terminal_seeds

DEFAULT_MODELS = ("regression_arima", "holt_winters", "seasonal_naive")
BACKTEST_HORIZON = 14
MIN_TRAIN_DAYS = 56
QUANTILE_COLUMNS = ("q05", "q10", "q50", "q90", "q95")
ACCURACY_COLUMNS = ("terminal_id", "model", "mase", "smape", "pinball_10", "pinball_50",
                    "pinball_90", "coverage_80", "coverage_95", "score", "origins")


@dataclass(frozen=True)
class ForecastResult:
    """Forecasts of every terminal of a scenario.

    - ``terminal_ids``: terminals in the order of ``terminals.csv`` (the first axis of
      ``paths``);
    - ``dates``: the forecast days (the third axis of ``paths``);
    - ``paths``: demand paths ``[terminal, path, day]`` in currency units, ≥ 0, joint over the
      days, reproducible from the seed;
    - ``quantiles``: long frame ``terminal_id, date, model`` (the champion),
      ``q05, q10, q50, q90, q95, mean`` (currency units, from the model, not from the paths);
    - ``champion``: indexed by ``terminal_id``: ``model``, ``score`` (mean scaled pinball loss
      in the backtest; NaN without a backtest), ``reason``, ``spec`` (the fitted
      specification, e.g. the ARIMA order);
    - ``accuracy``: one row per terminal and backtested model: ``terminal_id, model, mase,
      smape`` (percent), ``pinball_10, pinball_50, pinball_90`` (currency units),
      ``coverage_80, coverage_95`` (fractions), ``score``, ``origins`` (count);
    - ``fallbacks``: one sentence per model failure or fallback;
    - ``residuals``: ``terminal_id -> Series`` of the champion's one-step in-sample residuals
      (log1p scale for the log models), indexed by date.
    """

    terminal_ids: tuple[str, ...]
    dates: pd.DatetimeIndex
    paths: np.ndarray
    quantiles: pd.DataFrame
    champion: pd.DataFrame
    accuracy: pd.DataFrame
    fallbacks: list[str]
    residuals: dict[str, pd.Series] = field(default_factory=dict)


@dataclass(frozen=True)
class TerminalTask:
    """Everything one terminal's forecast needs (picklable, for worker processes).

    ``exog`` holds the calendar features of the history days followed by those of the
    ``horizon_total`` forecast days; the last ``keep`` forecast days are returned.
    ``fallback`` is the network profile used when no candidate can be fitted.
    """

    terminal_id: str
    y: np.ndarray
    exog: np.ndarray
    horizon_total: int
    keep: int
    path_count: int
    seed: np.random.SeedSequence
    origins: int
    candidates: tuple[DemandModel, ...]
    fallback: NetworkProfile
    backtest_horizon: int = BACKTEST_HORIZON
    min_train: int = MIN_TRAIN_DAYS


@dataclass(frozen=True)
class TerminalForecast:
    """One terminal's result: paths ``[path, day]``, quantiles ``[level, day]`` at
    :data:`~planner.forecast.models.LEVELS`, mean ``[day]``, champion, accuracy rows."""

    terminal_id: str
    paths: np.ndarray
    quantiles: np.ndarray
    mean: np.ndarray
    model: str
    score: float
    reason: str
    spec: str
    accuracy: list[dict]
    fallbacks: list[str]
    residuals: np.ndarray


def candidate_models(models: Sequence[str | DemandModel] | Mapping[str, DemandModel] | None,
                     offset_column: int | None) -> tuple[DemandModel, ...]:
    """Unfitted prototypes of the candidate models, in fallback order.

    ``models``: None (the default candidates), model names (see
    :data:`~planner.forecast.models.MODELS`) or model instances. Raises
    :class:`~planner.errors.InputError` for an unknown name.
    """
    items = list(models.values()) if isinstance(models, Mapping) else \
        list(DEFAULT_MODELS if models is None else models)
    out: list[DemandModel] = []
    for item in items:
        if isinstance(item, DemandModel):
            out.append(item)
            continue
        cls = MODELS.get(str(item))
        if cls is None:
            raise InputError(Problem("models", f"unknown forecasting model {item!r}",
                                     f"use one of {', '.join(MODELS)}"))
        kwargs = {}
        if "offset_column" in inspect.signature(cls).parameters:
            kwargs["offset_column"] = offset_column
        out.append(cls(**kwargs))
    if not out:
        raise InputError(Problem("models", "no forecasting model given",
                                 f"give at least one of {', '.join(MODELS)}"))
    return tuple(out)


def forecast_terminal(task: TerminalTask) -> TerminalForecast:
    """Backtest, champion, quantiles and paths of one terminal (see the module docstring)."""
    tid, y, h = task.terminal_id, task.y, task.horizon_total
    n = len(y)
    exog_hist, exog_future = task.exog[:n], task.exog[n:]
    fallbacks: list[str] = []
    accuracy: list[dict] = []
    order = [m.name for m in task.candidates]
    model: DemandModel | None = None
    score, reason = float("nan"), ""
    origins = origin_days(n, origins=task.origins, horizon=task.backtest_horizon,
                          min_train=task.min_train)
    if len(origins) and len(origins) < task.origins:
        fallbacks.append(f"{tid}: only {len(origins)} of {task.origins} backtest origins fit "
                         f"in {n} days of history")
    metrics: dict[str, dict[str, float]] = {}
    backtested: dict[str, DemandModel] = {}
    if len(origins):
        for proto in task.candidates:
            try:
                result = backtest_model(proto, y, exog_hist, origins, task.backtest_horizon)
            except ModelFitError as exc:
                fallbacks.append(f"{tid}: {proto.name} left out of the backtest: {exc}")
                continue
            metrics[proto.name] = result.metrics()
            backtested[proto.name] = result.model
            accuracy.append({"terminal_id": tid, "model": proto.name, **metrics[proto.name],
                             "origins": len(origins)})
    ranking = rank_models(metrics, order) if metrics else []
    if not origins.size and n:
        fallbacks.append(f"{tid}: no backtest with {n} days of history (needs "
                         f"{task.min_train + task.backtest_horizon}); the first model of the "
                         "list that can be fitted is used")
    tried: list[str] = []
    for name in ranking + [m for m in order if m not in ranking]:
        proto = task.candidates[order.index(name)]
        try:
            model = (backtested[name].refit(y, exog_hist) if name in backtested
                     else proto.clone().fit(y, exog_hist)) if n else None
        except ModelFitError as exc:
            fallbacks.append(f"{tid}: {name} could not be fitted on the full history: {exc}")
            tried.append(name)
            continue
        if model is None:
            break
        if name in metrics:
            score = metrics[name]["score"]
            reason = champion_reason(metrics, ranking, len(origins), task.backtest_horizon)
            if tried:
                reason += f"; {', '.join(tried)} could not be refitted"
        else:
            reason = "first model of the list that can be fitted (no backtest)"
        break
    if model is None:
        model = task.fallback
        if n:
            fallbacks.append(f"{tid}: {n} days of history are too few for any model; paths from "
                             "the network-average weekday profile scaled to its own mean level")
            reason = "too little history for any model: network profile at its own level"
        else:
            fallbacks.append(f"{tid}: no history; paths from the network-average weekday "
                             "profile scaled to the median level of the network")
            reason = "no history: network profile at the median level"
    fut = exog_future if exog_future.size else None
    cut = h - task.keep
    quantiles = model.quantiles(h, fut, LEVELS)[:, cut:]
    mean = model.mean(h, fut)[cut:]
    paths = simulate_paths(model, h, task.path_count, task.seed, fut, keep=task.keep)
    return TerminalForecast(tid, paths, quantiles, mean, model.name, score, reason,
                            model.describe(), accuracy, fallbacks,
                            np.asarray(getattr(model, "residuals_", np.zeros(0))))


def _series(clean, terminal_ids: Sequence[str]) -> dict[str, tuple[pd.Timestamp, np.ndarray]]:
    """terminal_id -> (first date, demand array) from the cleaned long frame."""
    daily = clean.daily
    out: dict[str, tuple[pd.Timestamp, np.ndarray]] = {}
    for tid, g in daily.groupby("terminal_id", sort=False):
        demand = g["demand"].to_numpy(dtype=float)
        ok = np.isfinite(demand)
        if not ok.any():
            continue
        if not ok.all():
            # fill="none" leaves gaps: bridge them linearly so the models see whole weeks
            idx = np.arange(len(demand))
            demand = np.interp(idx, idx[ok], demand[ok])
        out[str(tid)] = (pd.Timestamp(g["date"].iloc[0]), np.maximum(demand, 0.0))
    return {tid: out[tid] for tid in terminal_ids if tid in out}


def forecast_scenario(scenario, clean, *, horizon_days: int, path_count: int, seed: int,
                      jobs: int = 1, origins: int = 8,
                      models: Sequence[str | DemandModel] | Mapping[str, DemandModel] | None
                      = None, progress: Callable[[int, int], None] | None = None
                      ) -> ForecastResult:
    """Forecast every terminal of ``scenario`` from its cleaned history ``clean``.

    ``horizon_days`` from ``scenario.start_date`` (the optimizer asks for its horizon plus
    tail days); ``path_count`` demand paths per terminal from ``seed``; ``jobs > 1`` runs
    terminals in that many processes (identical results); ``origins`` weekly backtest
    origins; ``models`` the candidates (see :func:`candidate_models`); ``progress(done,
    total)`` is called after each terminal. Returns a
    :class:`ForecastResult`. Raises :class:`~planner.errors.InputError` for an unknown model.
    """
    terminal_ids = tuple(scenario.terminal_ids)
    dates = pd.date_range(scenario.start_date, periods=horizon_days, freq="D")
    offset_column = list(FEATURE_COLUMNS).index("event_log_lift")
    candidates = candidate_models(models, offset_column)
    series = _series(clean, terminal_ids)
    net = network_profile(series)
    first_day = min([first for first, _ in series.values()] + [dates[0]])
    calendar = calendar_features(pd.date_range(first_day, dates[-1], freq="D"),
                                 scenario.calendar)
    features = calendar[list(FEATURE_COLUMNS)].to_numpy(dtype=float)
    seeds = terminal_seeds(seed, len(terminal_ids))
    tasks = []
    for i, tid in enumerate(terminal_ids):
        if tid in series:
            first, y = series[tid]
        else:
            first, y = dates[0], np.zeros(0)
        start_row = (first - first_day).days
        total = (dates[-1] - first).days + 1 - len(y)     # forecast days after the history
        level = float(np.mean(y[-56:])) if len(y) else net["level"]
        level_sd = (net["noise_sd"] / np.sqrt(len(y))) if len(y) else net["level_sd"]
        last = first + pd.Timedelta(days=len(y))
        fallback = NetworkProfile(level=level, level_sd=float(level_sd),
                                  noise_sd=net["noise_sd"],
                                  weekday_profile=net["weekday_profile"],
                                  first_weekday=last.weekday())
        tasks.append(TerminalTask(
            terminal_id=tid, y=y, exog=features[start_row:start_row + len(y) + total],
            horizon_total=total, keep=horizon_days, path_count=path_count, seed=seeds[i],
            origins=origins, candidates=candidates, fallback=fallback))
    results = []
    if jobs > 1 and len(tasks) > 1:
        with ProcessPoolExecutor(max_workers=jobs) as pool:
            chunk = max(1, len(tasks) // (4 * jobs))
            for r in pool.map(forecast_terminal, tasks, chunksize=chunk):
                results.append(r)
                if progress is not None:
                    progress(len(results), len(tasks))
    else:
        for task in tasks:
            results.append(forecast_terminal(task))
            if progress is not None:
                progress(len(results), len(tasks))
    return _assemble(terminal_ids, dates, results, series)


def _assemble(terminal_ids: tuple[str, ...], dates: pd.DatetimeIndex,
              results: list[TerminalForecast],
              series: dict[str, tuple[pd.Timestamp, np.ndarray]]) -> ForecastResult:
    h = len(dates)
    paths = np.stack([r.paths for r in results]) if results else np.zeros((0, 0, h))
    quant = pd.DataFrame({
        "terminal_id": np.repeat(terminal_ids, h),
        "date": np.tile(dates.to_numpy(), len(results)),
        "model": np.repeat([r.model for r in results], h),
        **{col: np.concatenate([r.quantiles[k] for r in results]) if results else []
           for k, col in enumerate(QUANTILE_COLUMNS)},
        "mean": np.concatenate([r.mean for r in results]) if results else [],
    })
    champion = pd.DataFrame({
        "model": [r.model for r in results], "score": [r.score for r in results],
        "reason": [r.reason for r in results], "spec": [r.spec for r in results],
    }, index=pd.Index(terminal_ids, name="terminal_id"))
    rows = [row for r in results for row in r.accuracy]
    accuracy = pd.DataFrame(rows, columns=list(ACCURACY_COLUMNS))
    fallbacks = [text for r in results for text in r.fallbacks]
    residuals = {}
    for r in results:
        if r.terminal_id in series and len(r.residuals):
            first, y = series[r.terminal_id]
            days = pd.date_range(first, periods=len(y), freq="D")[len(y) - len(r.residuals):]
            residuals[r.terminal_id] = pd.Series(r.residuals, index=days, name=r.model)
    return ForecastResult(terminal_ids, dates, paths, quant, champion, accuracy, fallbacks,
                          residuals)

