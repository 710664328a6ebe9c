"""The forecasting stage: every terminal's champion model and its demand paths.

For each terminal (on the run's executor, :mod:`planner.executor`, in chunks of terminals):

1. its cleaned daily demand (``CleanHistory.daily["demand"]``; dry days are already estimated
   there) and the calendar features of its days;
2. a rolling-origin backtest of every candidate (:mod:`planner.forecast.scoring`); a model
   that cannot be fitted is left out, with the reason in ``fallbacks``;
3. the champion — lowest mean scaled pinball loss — is refitted on the whole history (on
   failure the next best takes its place, again recorded);
4. its quantiles and ``path_count`` joint demand paths over the forecast days.

Terminals without history are forecast from the network-average weekday profile scaled to the
median level (:mod:`planner.forecast.profile`); terminals with too little history for any model
from the same profile scaled to their own mean. Both are named in ``fallbacks``.

When a terminal's history ends before the day before the first planning day, the forecast
starts after its last day and the days in between are simulated and dropped.

The result keeps the fitted models (:class:`FittedForecast`): ``result.draw_paths(seed,
count, days)`` draws more demand paths from them without fitting again — the same paths the
stage itself draws for that seed. The stage remembers its fitted models for the cleaned
history object it was given (for as long as that object lives), so that a later step of the
same run that only needs fresh paths (:func:`fitted_forecast`, used by the out-of-sample
check) draws them instead of running the stage again.
"""
from __future__ import annotations

import inspect
import weakref
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from planner.calendar import FEATURE_COLUMNS, calendar_features
from planner.errors import InputError, Problem
from planner.executor import Executor, LocalExecutor, task_chunks
from planner.forecast.scoring import (backtest_model, champion_reason, fit_network_spread,
                                       origin_days, rank_models, spread_by_day, widen)
from planner.forecast.models import CANDIDATES, LEVELS, DemandModel, ModelFitError
from planner.forecast.profile import NetworkProfile, network_profile
from planner.forecast.paths import simulate_paths, terminal_seeds

DEFAULT_MODELS = ("regression_arima", "holt_winters", "seasonal_naive")
BACKTEST_HORIZON = 14
MIN_TRAIN_DAYS = 56
QUANTILE_COLUMNS = ("q05", "q10", "q50", "q90", "q95")
ACCURACY_COLUMNS = ("terminal_id", "model", "mase", "smape", "pinball_10", "pinball_50",
                    "pinball_90", "coverage_80", "coverage_95", "score", "origins")


@dataclass(frozen=True)
class FittedTerminal:
    """One terminal's fitted champion, ready to draw demand paths without refitting.

    ``exog_future``: calendar features of the days from the day after the terminal's history
    to the last forecast day of the stage; ``gap``: how many of those days lie before the
    first forecast day (simulated and dropped).
    """

    model: DemandModel
    exog_future: np.ndarray
    gap: int
    spread: np.ndarray | None = None      # [side, lead group] calibrated factors (None: 1)

    def draw(self, count: int, seed: np.random.SeedSequence, days: int,
             extra_exog: np.ndarray | None = None) -> np.ndarray:
        """Demand paths ``[count, days]`` from the first forecast day, drawn from ``seed``
        and spread by the calibrated factors around the model's median
        (:func:`~planner.forecast.scoring.widen`); ``extra_exog`` holds the calendar
        features of the days beyond the stage's last day when ``days`` asks for more."""
        h = self.gap + int(days)
        fut = self.exog_future
        if h > len(fut):
            fut = np.vstack([fut, np.asarray(extra_exog)[: h - len(fut)]])
        paths = simulate_paths(self.model, h, int(count), seed, fut[:h], keep=int(days))
        if self.spread is None:
            return paths
        median = self.model.quantiles(h, fut[:h], (0.5,))[0][self.gap:]
        return widen(paths, median, spread_by_day(self.spread, h)[:, self.gap:])


@dataclass(frozen=True)
class FittedForecast:
    """The fitted champions of every terminal of one run of the stage.

    ``terminal_ids`` in the order of ``terminals.csv``; ``start`` the first forecast day;
    ``days`` the number of forecast days the stage was run for; ``calendar`` the scenario's
    calendar settings (for the features of later days).
    """

    terminal_ids: tuple[str, ...]
    start: pd.Timestamp
    days: int
    calendar: object
    terminals: tuple[FittedTerminal, ...]

    def draw_paths(self, seed: int, count: int, days: int | None = None) -> np.ndarray:
        """Joint demand paths ``[terminal, path, day]`` for ``days`` days from ``start``
        (default: the stage's days), ``count`` per terminal, seeded per terminal position by
        :func:`~planner.forecast.paths.terminal_seeds` — for the same seed, count and days
        exactly the paths :func:`forecast_scenario` draws."""
        days = self.days if days is None else int(days)
        if days < 1 or count < 0:
            raise ValueError(f"draw_paths needs days >= 1 and count >= 0, got {days}, {count}")
        extra = None
        if days > self.days:
            later = pd.date_range(self.start + pd.Timedelta(days=self.days),
                                  periods=days - self.days, freq="D")
            extra = calendar_features(later, self.calendar)[list(FEATURE_COLUMNS)] \
                .to_numpy(dtype=float)
        seeds = terminal_seeds(int(seed), len(self.terminals))
        out = np.empty((len(self.terminals), int(count), days))
        for i, terminal in enumerate(self.terminals):
            out[i] = terminal.draw(count, seeds[i], days, extra)
        return out


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
      (log1p scale for the log models), indexed by date;
    - ``fitted``: the fitted champions (:class:`FittedForecast`; None for a result built
      without the stage), from which :meth:`draw_paths` draws more paths.
    """

    terminal_ids: tuple[str, ...]
    dates: pd.DatetimeIndex
    paths: np.ndarray
    quantiles: pd.DataFrame
    champion: pd.DataFrame
    accuracy: pd.DataFrame
    fallbacks: list[str]
    residuals: dict[str, pd.Series] = field(default_factory=dict)
    fitted: FittedForecast | None = None

    def draw_paths(self, seed: int, count: int, days: int | None = None) -> np.ndarray:
        """Fresh joint demand paths ``[terminal, path, day]`` from the fitted champions, no
        refit (see :meth:`FittedForecast.draw_paths`): ``draw_paths(s, P, D)`` equals the
        ``paths`` of the stage run with seed ``s``, ``P`` paths and ``D`` days."""
        if self.fitted is None:
            raise ValueError("this forecast keeps no fitted models to draw paths from")
        return self.fitted.draw_paths(seed, count, days)


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
    fitted: FittedTerminal
    backtest: Any = None          # the champion's rolling-origin backtest (None without one)


def candidate_models(models: Sequence[str | DemandModel] | Mapping[str, DemandModel] | None,
                     offset_column: int | None) -> tuple[DemandModel, ...]:
    """Unfitted prototypes of the candidate models, in fallback order.

    ``models``: None (the default candidates), model names (see
    :data:`~planner.forecast.models.CANDIDATES`) or model instances. Raises
    :class:`~planner.errors.InputError` for an unknown name.
    """
    items = list(models.values()) if isinstance(models, Mapping) else \
        list(DEFAULT_MODELS if models is None else models)
    out: list[DemandModel] = []
    for item in items:
        if isinstance(item, DemandModel):
            out.append(item)
            continue
        cls = CANDIDATES.get(str(item))
        if cls is None:
            raise InputError(Problem("models", f"unknown forecasting model {item!r}",
                                     f"use one of {', '.join(CANDIDATES)}"))
        kwargs = {}
        if "offset_column" in inspect.signature(cls).parameters:
            kwargs["offset_column"] = offset_column
        out.append(cls(**kwargs))
    if not out:
        raise InputError(Problem("models", "no forecasting model given",
                                 f"give at least one of {', '.join(CANDIDATES)}"))
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
    backtests: dict = {}
    if len(origins):
        for proto in task.candidates:
            try:
                result = backtest_model(proto, y, exog_hist, origins, task.backtest_horizon)
            except ModelFitError as exc:
                fallbacks.append(f"{tid}: {proto.name} left out of the backtest: {exc}")
                continue
            metrics[proto.name] = result.metrics()
            backtested[proto.name] = result.model
            backtests[proto.name] = result
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
    cut = h - task.keep
    quantiles = model.quantiles(h, exog_future, LEVELS)[:, cut:]
    mean = model.mean(h, exog_future)[cut:]
    fitted = FittedTerminal(model, exog_future, cut)
    paths = fitted.draw(task.path_count, task.seed, task.keep)
    return TerminalForecast(tid, paths, quantiles, mean, model.name, score, reason,
                            model.describe(), accuracy, fallbacks,
                            np.asarray(getattr(model, "residuals_", np.zeros(0))), fitted,
                            backtests.get(model.name) if model.name in metrics else None)


def forecast_terminals(tasks: list[TerminalTask]) -> list[TerminalForecast]:
    """:func:`forecast_terminal` of every task of one chunk (the executor's unit of work)."""
    return [forecast_terminal(task) for task in tasks]


def calibrated(result: TerminalForecast, factors: np.ndarray) -> TerminalForecast:
    """One terminal's quantiles and paths spread by the network's calibrated factors
    (:func:`~planner.forecast.scoring.fit_network_spread`), around the champion's median;
    its fitted champion keeps the factors for later draws."""
    gap, keep = result.fitted.gap, result.paths.shape[1]
    by_day = spread_by_day(factors, gap + keep)[:, gap:]
    median = result.quantiles[list(LEVELS).index(0.5)]
    return replace(result, quantiles=widen(result.quantiles, median, by_day),
                   paths=widen(result.paths, median, by_day),
                   fitted=replace(result.fitted, spread=np.asarray(factors, dtype=float)))


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
                      executor: Executor | None = None, origins: int = 8,
                      models: Sequence[str | DemandModel] | Mapping[str, DemandModel] | None
                      = None, progress: Callable[[int, int], None] | None = None
                      ) -> ForecastResult:
    """Forecast every terminal of ``scenario`` from its cleaned history ``clean``.

    ``horizon_days`` from ``scenario.start_date`` (the optimizer asks for its horizon plus
    tail days); ``path_count`` demand paths per terminal from ``seed``; ``executor`` runs
    the terminals (:mod:`planner.executor`; default: here; identical results); ``origins`` weekly backtest
    origins; ``models`` the candidates (see :func:`candidate_models`); ``progress(done,
    total)`` is called once at the start (``done = 0``) and after each terminal. Returns a
    :class:`ForecastResult`. Raises :class:`~planner.errors.InputError` for an unknown model.
    """
    terminal_ids = tuple(scenario.terminal_ids)
    if progress is not None:
        progress(0, len(terminal_ids))
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
    runner = executor if executor is not None else LocalExecutor(1)
    chunks = task_chunks(tasks, runner.workers)
    done = runner.map(forecast_terminals, chunks, weights=[len(c) for c in chunks],
                      progress=progress)
    results = [r for chunk in done for r in chunk]
    # the bands and paths calibrated on the champions' rolling-origin errors (module text)
    spread = fit_network_spread([r.backtest for r in results if r.backtest is not None])
    results = [calibrated(r, spread) for r in results]
    fitted = FittedForecast(terminal_ids, dates[0], len(dates), scenario.calendar,
                            tuple(r.fitted for r in results))
    _remember(clean, _fit_key(scenario, origins, candidates), fitted)
    return _assemble(terminal_ids, dates, results, series, fitted)


# The fitted models of the stage, per cleaned history object (by identity, for as long as it
# lives) and per settings that change the fit.
_FITTED: dict[int, tuple[weakref.ref, dict[tuple, FittedForecast]]] = {}


def _fit_key(scenario, origins: int, candidates: tuple[DemandModel, ...]) -> tuple:
    """What the fitted models depend on besides the cleaned history."""
    return (tuple(scenario.terminal_ids), pd.Timestamp(scenario.start_date),
            repr(scenario.calendar), int(origins), tuple(repr(c) for c in candidates))


def _remember(clean, key: tuple, fitted: FittedForecast) -> None:
    try:
        ref = weakref.ref(clean, lambda _ref, k=id(clean): _FITTED.pop(k, None))
    except TypeError:                       # an object that cannot be referenced weakly
        return
    entry = _FITTED.get(id(clean))
    if entry is None or entry[0]() is not clean:
        entry = _FITTED[id(clean)] = (ref, {})
    entry[1][key] = fitted


def fitted_forecast(scenario, clean, *, days: int, executor: Executor | None = None,
                    origins: int = 8,
                    models: Sequence[str | DemandModel] | Mapping[str, DemandModel] | None
                    = None) -> FittedForecast:
    """The stage's fitted models for ``scenario`` and its cleaned history ``clean``: those of
    an earlier :func:`forecast_scenario` call on the same ``clean`` object with the same
    terminals, first planning day, calendar, origins and models; otherwise the stage is run
    once (``days`` forecast days, no paths) and its fit kept."""
    offset_column = list(FEATURE_COLUMNS).index("event_log_lift")
    key = _fit_key(scenario, origins, candidate_models(models, offset_column))
    entry = _FITTED.get(id(clean))
    if entry is not None and entry[0]() is clean and key in entry[1]:
        return entry[1][key]
    result = forecast_scenario(scenario, clean, horizon_days=int(days), path_count=0, seed=0,
                               executor=executor, origins=origins, models=models)
    return result.fitted


def _assemble(terminal_ids: tuple[str, ...], dates: pd.DatetimeIndex,
              results: list[TerminalForecast],
              series: dict[str, tuple[pd.Timestamp, np.ndarray]],
              fitted: FittedForecast) -> ForecastResult:
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
                          residuals, fitted)

