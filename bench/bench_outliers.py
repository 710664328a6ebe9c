"""Recording-error flags against the injected list: precision and recall, one run.

Each invented network keeps the recording errors its generator injected
(``truth/injected.csv``, kind ``outlier``). The cleaning stage flags outliers by the modified
z-score on the calendar-adjusted log residuals (:mod:`planner.cleaning`). Printed per network:
injected errors, flagged days, precision (flags that are injected errors) and recall (injected
errors flagged). Targets: precision ≥ 0.8, recall ≥ 0.9.

    OPENBLAS_NUM_THREADS=1 python bench/bench_outliers.py [SCENARIO …]

Without arguments: the demo network and the two hold-out networks (never tuned on).
"""
from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

from planner.cleaning import clean_history
from planner.demo import demo_path
from planner.scenario import load_scenario


def measure(folder: Path) -> dict:
    scenario = load_scenario(folder)
    daily = clean_history(scenario).daily
    injected = pd.read_csv(Path(folder) / "truth" / "injected.csv", parse_dates=["date"])
    errors = injected[injected["kind"] == "outlier"]
    truth = set(zip(errors["terminal_id"], errors["date"]))
    flagged = daily[daily["flag"].str.contains("outlier")]
    found = set(zip(flagged["terminal_id"], pd.to_datetime(flagged["date"])))
    hits = len(truth & found)
    return {"network": scenario.name, "days": int(daily["observed"].notna().sum()),
            "injected": len(truth), "flagged": len(found),
            "precision": hits / len(found) if found else 1.0,
            "recall": hits / len(truth) if truth else 1.0}


def main(folders) -> None:
    print(f"{'network':44} {'days':>7} {'injected':>8} {'flagged':>8} {'precision':>9} "
          f"{'recall':>6}")
    for folder in folders:
        m = measure(folder)
        print(f"{m['network'][:44]:44} {m['days']:7d} {m['injected']:8d} {m['flagged']:8d} "
              f"{m['precision']:9.2f} {m['recall']:6.2f}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:] or [demo_path(), demo_path("holdout/saltreach"),
                          demo_path("holdout/brannock")])
