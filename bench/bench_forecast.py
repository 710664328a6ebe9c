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
(c) **Outlier flags** against the recording errors the generator injected
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
                        default=[str(ROOT / "planner/demo/northvale"),
                                 str(ROOT / "planner/demo/holdout/saltreach"),
                                 str(ROOT / "planner/demo/holdout/brannock")])
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
    if (Path(folder) / "truth" / "injected.csv").is_file():
        o = outliers(Path(folder))
        print(f"(c) outlier flags against the injected errors: {o['flagged']} flagged, "
              f"{o['injected']} injected, precision {o['precision']:.2f}, recall "
              f"{o['recall']:.2f} (targets >= 0.8, >= 0.9)")


if __name__ == "__main__":
    main()
