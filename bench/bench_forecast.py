"""Benchmark of the forecasting stage on the demo network and the two hold-out networks, one
run (never collected as a test).

Run from the repo root::

    python bench/bench_forecast.py [scenario folder …] [--repeat N]

Per network:

(a) **Accuracy** of the rolling-origin backtest (8 weekly origins × 14 days): the champion's
    median MASE against that of the weekly seasonal naive (target: ratio ≤ 0.80) and the
    champion's coverage of the 80 % and 95 % intervals (targets: 77 %–83 %, 93 %–97 %).
(b) **Speed**: the whole forecasting stage per terminal — ``clean_history`` + backtest and
    model choice + 500 paths × 14 days — against one plain statsmodels
    ``ExponentialSmoothing(y, seasonal="add", seasonal_periods=7).fit()`` on the same
    (cleaned) series, measured in the same run (target: ratio ≤ 3). Each measurement is
    repeated and the fastest kept, interleaved, so load from other programs on the machine
    affects both sides alike.
(c) **Calibrated bands**, as the stage issues them (a spread factor per side of the median and
    lead week, fitted to the champions' pinball loss over the network), measured on origins
    they were not fitted on: each origin's bands widened by the factors fitted on the other
    origins (leave one origin out), against the uncalibrated bands on the same origins.
(d) **Outlier flags** against the recording errors the generator injected
    (``truth/injected.csv``; :mod:`bench_outliers`): precision and recall.
"""
from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from planner.cleaning import clean_history  # noqa: E402
from planner.forecast import forecast_scenario  # noqa: E402
from planner.scenario import load_scenario  # noqa: E402


def _es_fits(series: list[np.ndarray]) -> float:
    from statsmodels.tsa.holtwinters import ExponentialSmoothing

    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for y in series:
            ExponentialSmoothing(y, seasonal="add", seasonal_periods=7).fit()
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("scenario", nargs="*",
                        default=[str(ROOT / "scenarios/northvale"),
                                 str(ROOT / "scenarios/holdout/saltreach"),
                                 str(ROOT / "scenarios/holdout/brannock")])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    for folder in args.scenario:
        measure(folder, args.repeat)


def measure(folder: str, repeat: int) -> None:
    """All figures of one network (see the module text)."""
    from bench_outliers import measure as outliers

    scenario = load_scenario(folder)
    n_terminals = len(scenario.terminals)
    clean = clean_history(scenario)
    series = [g["demand"].to_numpy(dtype=float)
              for _, g in clean.daily.groupby("terminal_id", sort=False)]
    days = int(np.median([len(y) for y in series]))

    t_clean, t_forecast, t_es = [], [], []
    result = None
    _es_fits(series[:2])                                          # warm-up (imports)
    for _ in range(repeat):
        t_es.append(_es_fits(series))
        start = time.perf_counter()
        clean = clean_history(scenario)
        t_clean.append(time.perf_counter() - start)
        start = time.perf_counter()
        result = forecast_scenario(scenario, clean, horizon_days=14, path_count=500,
                                   seed=scenario.seed)
        t_forecast.append(time.perf_counter() - start)

    acc = result.accuracy
    champ = result.champion["model"]
    is_champ = acc["model"].to_numpy() == acc["terminal_id"].map(champ).to_numpy()
    champion_acc = acc[is_champ]
    naive = acc[acc["model"] == "seasonal_naive"]
    ratio_mase = champion_acc["mase"].median() / naive["mase"].median()
    print(f"scenario: {scenario.name}: {n_terminals} terminals, median {days} days of history")
    print("(a) accuracy, rolling origin (8 weekly origins x 14 days)")
    print(f"    median MASE  champion {champion_acc['mase'].median():.3f}   "
          f"seasonal naive {naive['mase'].median():.3f}   ratio {ratio_mase:.3f} "
          "(target <= 0.80)")
    by_model = acc.groupby("model")[["mase", "smape", "score", "coverage_80",
                                     "coverage_95"]].median()
    print("    medians by model:\n" + "\n".join("      " + line for line in
                                                 by_model.round(3).to_string().splitlines()))
    print(f"    champion 80 % coverage: {100 * champion_acc['coverage_80'].mean():.1f} % "
          f"(pooled over terminals; median {100 * champion_acc['coverage_80'].median():.1f} %)"
          " (target 77-83 %)")
    print(f"    champion 95 % coverage: {100 * champion_acc['coverage_95'].mean():.1f} %")
    print(f"    champions: {champ.value_counts().to_dict()}")
    es = min(t_es) / n_terminals
    cl = min(t_clean) / n_terminals
    fc = min(t_forecast) / n_terminals
    print("(b) speed per terminal (fastest of "
          f"{repeat} interleaved runs)")
    print(f"    statsmodels ExponentialSmoothing fit {1000 * es:.1f} ms")
    print(f"    clean_history {1000 * cl:.1f} ms, forecast_scenario {1000 * fc:.1f} ms "
          f"(backtest of {acc['model'].nunique()} models, 500 paths x 14 days)")
    print(f"    ratio (clean + forecast) / ES fit = {(cl + fc) / es:.2f} (target <= 3); "
          f"forecast alone / ES fit = {fc / es:.2f}")
    calibrated_coverage(scenario, clean, result)
    if (Path(folder) / "truth" / "injected.csv").is_file():
        o = outliers(Path(folder))
        print(f"(d) outlier flags against the injected errors: {o['flagged']} flagged, "
              f"{o['injected']} injected, precision {o['precision']:.2f}, recall "
              f"{o['recall']:.2f} (targets >= 0.8, >= 0.9)")


def calibrated_coverage(scenario, clean, result) -> None:
    """Section (c) of the module text."""
    from dataclasses import replace

    import pandas as pd

    from planner.calendar import FEATURE_COLUMNS, calendar_features
    from planner.forecast import candidate_models
    from planner.forecast.scoring import (BACKTEST_LEVELS, backtest_model, fit_network_spread,
                                           origin_days, spread_by_day, widen)

    levels = list(BACKTEST_LEVELS)
    mid = levels.index(0.5)
    by_name = {m.name: m for m in candidate_models(
        None, list(FEATURE_COLUMNS).index("event_log_lift"))}
    tests = []
    for tid, g in clean.daily.groupby("terminal_id", sort=False):
        y = g["demand"].to_numpy(dtype=float)
        exog = calendar_features(pd.DatetimeIndex(g["date"]), scenario.calendar)[
            list(FEATURE_COLUMNS)].to_numpy(dtype=float)
        origins = origin_days(len(y))
        name = result.champion.loc[tid, "model"]
        if len(origins) and name in by_name:
            tests.append(backtest_model(by_name[name], y, exog, origins, 14))
    n = min(len(bt.origins) for bt in tests)
    hits = {"80": [0, 0], "95": [0, 0]}
    count = 0
    for k in range(n):
        keep = [j for j in range(n) if j != k]
        rest = [replace(bt, origins=bt.origins[keep], actual=bt.actual[keep],
                        point=bt.point[keep], quantiles=bt.quantiles[:, keep],
                        scale=bt.scale[keep]) for bt in tests]
        by_day = spread_by_day(fit_network_spread(rest), 14)
        for bt in tests:
            raw = bt.quantiles[:, k]
            cal = widen(raw, raw[mid], by_day)
            a = bt.actual[k]
            for j, q in enumerate((raw, cal)):
                hits["80"][j] += int(((a >= q[levels.index(0.1)]) & (a <= q[levels.index(0.9)])).sum())
                hits["95"][j] += int(((a >= q[levels.index(0.025)])
                                      & (a <= q[levels.index(0.975)])).sum())
            count += a.size
    factors = fit_network_spread(tests)
    print("(c) calibrated bands on origins left out of their fit")
    print(f"    80 % coverage {100 * hits['80'][1] / count:.1f} % (uncalibrated "
          f"{100 * hits['80'][0] / count:.1f} %); 95 % coverage "
          f"{100 * hits['95'][1] / count:.1f} % (uncalibrated {100 * hits['95'][0] / count:.1f} %)")
    print(f"    factors below / above the median: days 1-7 {factors[0, 0]:.2f} / "
          f"{factors[1, 0]:.2f}, days 8-14 {factors[0, -1]:.2f} / {factors[1, -1]:.2f}")


if __name__ == "__main__":
    main()
