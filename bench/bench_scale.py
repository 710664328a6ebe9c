"""A whole plan run on invented large networks, one run per size (never collected as a test).

    OPENBLAS_NUM_THREADS=1 python bench/bench_scale.py [--sizes 1000 2000 5000 10000]
        [--engines local dask] [--jobs 2] [--days 365] [--paths 500]

Each size is an invented network (``planner.demo.make_large``: 250 machines per depot, crews
that bind on busy days, 365 days of history in dispense.parquet, 500 paths) planned end to end
by ``run_plan`` with the run folder written (report and workbook included), on local worker
processes and on a 2-worker ``dask.distributed`` LocalCluster.

Printed per size and engine, from that one run: wall time and peak memory of every stage (the
stages the progress bars show; memory is the resident memory of this process and all its
worker processes together, sampled every 0.2 s), the total, memory per terminal, the report's
size, and the ratios to the targets: 1,000 terminals ≤ 2.5 min, 10,000 ≤ 20 min and ≤ 8 GB,
time(10k) / time(1k) ≤ 11, report ≤ 10 MB. Writing the network is not timed.
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import threading
import time
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from planner.demo.make_large import write_network  # noqa: E402
from planner.options import PlanOptions  # noqa: E402
from planner.pipeline import run_plan  # noqa: E402

TARGET_1K_S = 150.0
TARGET_10K_S = 1200.0
TARGET_10K_GB = 8.0
TARGET_GROWTH = 11.0
TARGET_REPORT_MB = 10.0


class StageClock:
    """Wall time and peak memory (this process and its children) per stage."""

    def __init__(self) -> None:
        self.me = psutil.Process(os.getpid())
        self.stage = "start"
        self.started = time.perf_counter()
        self.times: dict[str, float] = {}
        self.peaks: dict[str, float] = {}
        self._since = self.started
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._sample, daemon=True)

    def __enter__(self) -> "StageClock":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self.switch("end")
        self._stop.set()
        self._thread.join()

    def _resident(self) -> float:
        total = 0.0
        for proc in [self.me, *self.me.children(recursive=True)]:
            try:
                total += proc.memory_info().rss
            except (psutil.NoSuchProcess, psutil.AccessDenied):
                pass
        return total

    def _sample(self) -> None:
        while not self._stop.is_set():
            rss = self._resident()
            self.peaks[self.stage] = max(self.peaks.get(self.stage, 0.0), rss)
            self._stop.wait(0.2)

    def switch(self, stage: str) -> None:
        if stage == self.stage:
            return
        now = time.perf_counter()
        self.times[self.stage] = self.times.get(self.stage, 0.0) + now - self._since
        self._since = now
        self.stage = stage

    def progress(self, stage: str, done: int, total: int) -> None:
        self.switch(stage)

    @property
    def total(self) -> float:
        return sum(self.times.values())

    @property
    def peak(self) -> float:
        return max(self.peaks.values(), default=0.0)


def plan_once(folder: Path, out: Path, engine: str, jobs: int) -> tuple[StageClock, float]:
    options = PlanOptions(jobs=jobs, engine=engine)
    with StageClock() as clock:
        run_plan(folder, out, options=options, progress=clock.progress)
    report_mb = (out / "report.html").stat().st_size / 1e6
    return clock, report_mb


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000, 5000, 10000])
    parser.add_argument("--engines", nargs="+", default=["local", "dask"],
                        choices=["local", "dask"])
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--days", type=int, default=365)
    parser.add_argument("--paths", type=int, default=500)
    args = parser.parse_args()
    totals: dict[tuple[str, int], float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for size in args.sizes:
            folder = write_network(Path(tmp) / f"net{size}", size, days=args.days,
                                   paths=args.paths)
            for engine in args.engines:
                clock, report_mb = plan_once(folder, Path(tmp) / f"run{size}{engine}",
                                             engine, args.jobs)
                totals[(engine, size)] = clock.total
                print(f"{size:,} terminals, {engine} ({args.jobs} workers): "
                      f"{clock.total:.1f} s, peak {clock.peak / 1e9:.2f} GB "
                      f"({clock.peak / size / 1e6:.2f} MB per terminal), "
                      f"report {report_mb:.2f} MB (ratio to 10 MB {report_mb / 10:.2f})")
                for stage, seconds in clock.times.items():
                    if stage in ("start", "end"):
                        continue
                    print(f"    {stage:<10} {seconds:8.1f} s  {100 * seconds / clock.total:5.1f} %"
                          f"  peak {clock.peaks.get(stage, 0.0) / 1e9:6.2f} GB")
                if size == 1000:
                    print(f"    ratio to the 1,000-terminal target (150 s): "
                          f"{clock.total / TARGET_1K_S:.2f}")
                if size == 10000:
                    print(f"    ratio to the 10,000-terminal targets: time "
                          f"{clock.total / TARGET_10K_S:.2f} (20 min), memory "
                          f"{clock.peak / 1e9 / TARGET_10K_GB:.2f} (8 GB)")
                sys.stdout.flush()
    for engine in args.engines:
        if (engine, 1000) in totals and (engine, 10000) in totals:
            growth = totals[(engine, 10000)] / totals[(engine, 1000)]
            print(f"{engine}: time(10k) / time(1k) = {growth:.2f} (target <= {TARGET_GROWTH:.0f})")


if __name__ == "__main__":
    main()
