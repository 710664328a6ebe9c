"""Reading and checking a large dispense history from dispense.parquet, one run.

An invented network of ``--terminals`` machines (default 10,000) with ``--days`` days each
(default 1,100: three years, 11 million rows) is written as a scenario folder whose history is
dispense.parquet; ``load_scenario`` then reads and checks it with the same checks as
dispense.csv. Printed: rows, seconds to read and check, rows per second, peak memory of this
process, and the ratio to the target (60 s for 11 million rows).

    OPENBLAS_NUM_THREADS=1 python bench/bench_parquet.py [--terminals N] [--days D]
"""
from __future__ import annotations

import argparse
import resource
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from planner.scenario import load_scenario

TARGET_S = 60.0
TARGET_ROWS = 11_000_000


def write_network(folder: Path, terminals: int, days: int, seed: int = 3) -> int:
    """An invented network (ids ``PQN-00001`` …, one depot per 500 machines)."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True)
    (folder / "scenario.toml").write_text(
        'name = "Parquet trial network (invented)"\ncurrency = "EUR"\n'
        "[costs]\ncarry_rate_annual = 0.05\nvisit_fee = 120\ndry_day_penalty = 600\n")
    ids = np.array([f"PQN-{i + 1:05d}" for i in range(terminals)])
    depots = np.array([f"Depot {i // 500 + 1}" for i in range(terminals)])
    pd.DataFrame({"depot": np.unique(depots), "max_visits_per_day": 50}).to_csv(
        folder / "depots.csv", index=False)
    pd.DataFrame({"terminal_id": ids, "depot": depots, "capacity": 120000,
                  "insurance_limit": 100000, "bundle": 1000, "balance_now": 40000,
                  "visit_days": "Mon|Wed|Fri"}).to_csv(folder / "terminals.csv", index=False)
    dates = pd.date_range("2023-11-01", periods=days, freq="D")
    amount = np.round(rng.lognormal(np.log(6000.0), 0.4, terminals * days), -1)
    status = np.where(rng.random(terminals * days) < 0.02, "dry", "ok")
    frame = pd.DataFrame({"terminal_id": np.repeat(ids, days),
                          "date": np.tile(dates.to_numpy(), terminals),
                          "amount": amount, "status": status})
    frame.to_parquet(folder / "dispense.parquet", index=False)
    return len(frame)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--terminals", type=int, default=10_000)
    parser.add_argument("--days", type=int, default=1_100)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "network"
        rows = write_network(folder, args.terminals, args.days)
        start = time.perf_counter()
        scenario = load_scenario(folder)
        seconds = time.perf_counter() - start
    peak_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 ** 2
    scaled = seconds * TARGET_ROWS / rows
    print(f"rows {rows:,} ({len(scenario.terminals):,} terminals); read and checked in "
          f"{seconds:.1f} s ({rows / seconds:,.0f} rows/s); peak memory {peak_gb:.2f} GB")
    print(f"time for {TARGET_ROWS:,} rows at this rate against the {TARGET_S:.0f} s target: "
          f"{scaled:.1f} s, ratio {scaled / TARGET_S:.2f}")


if __name__ == "__main__":
    main()
