"""Options of one run: overrides of the scenario's settings and what the run does."""
from __future__ import annotations

import os
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

from planner.executor import ClusterSettings, Executor, make_executor

# The plan looks further ahead than it reports, so that its end does not cut the last cycle
# short (README, "How a plan is made", step 5): at least LOOKAHEAD_DAYS
# days in all and at least MIN_TAIL_DAYS after the horizon. Six weeks is about 1.5 × the
# longest cycle of the demo's quiet machines (4 weeks). Measured in the 12-week replay of the
# demo (bench/bench_backtest.py --tail N): 7 tail days 153,161 EUR and 5 dry days, 14 days
# 145,686 and 3, 28 days 145,100 and 3, 42 days 145,010 and 4.
LOOKAHEAD_DAYS = 42
MIN_TAIL_DAYS = 7


@dataclass(frozen=True)
class PlanOptions:
    """Overrides of the scenario's settings for one run (None keeps the scenario's value)."""

    horizon_days: int | None = None
    path_count: int | None = None
    seed: int | None = None
    jobs: int = 1                            # worker processes (or local cluster workers)
    engine: str = "local"                    # "local" processes or a "dask" cluster
    cluster: ClusterSettings | None = None   # the Dask cluster to use (None: a local one)
    time_limit_s: float = 60.0
    tail_days: int | None = None             # None: see tail_for
    origins: int = 8
    evaluate: bool = True
    calibrate: bool = True                   # calibrate the chance constraint on fresh paths
    diagnose: bool = True
    report: bool = True
    backtest_weeks: int = 0                  # > 0: also replay that many past weeks
    max_memory_gb: float | None = None       # refuse a run estimated above this (None: the
                                             # machine's available memory)
    what_if: tuple[str, ...] = ()            # --set texts, one what-if variant each
    variant_files: tuple[str | Path, ...] = ()

    def tail_for(self, horizon_days: int) -> int:
        """Days planned after a horizon of ``horizon_days``: ``tail_days`` when given, else
        ``max(MIN_TAIL_DAYS, LOOKAHEAD_DAYS − horizon_days)``."""
        if self.tail_days is not None:
            return int(self.tail_days)
        return max(MIN_TAIL_DAYS, LOOKAHEAD_DAYS - int(horizon_days))

    def apply(self, scenario):
        """The scenario with the horizon, path count and seed of these options where they
        are set, checked against the same ranges as scenario.toml
        (:data:`planner.scenario.RUN_RANGES`; :class:`InputError` naming the option)."""
        from planner.errors import InputError, Problem
        from planner.scenario import RUN_RANGES, run_setting_problem

        changes, problems = {}, []
        for key, (low, high, _, option) in RUN_RANGES.items():
            value = getattr(self, key)
            if value is None:
                continue
            why = run_setting_problem(key, int(value), option)
            if why:
                problems.append(Problem("command line", why,
                                        f"give {option} a value from {low:,} to {high:,}"))
            changes[key] = int(value)
        if problems:
            raise InputError(problems)
        return replace(scenario, **changes) if changes else scenario


@contextmanager
def run_executor(options: PlanOptions, executor: Executor | None = None) -> Iterator[Executor]:
    """Where a run's per-terminal and per-depot work runs (:mod:`planner.executor`):
    ``executor`` when given (its owner closes it), else one made from ``options.engine``,
    ``options.jobs`` and ``options.cluster`` and closed when the run ends."""
    if executor is not None:
        yield executor
        return
    with make_executor(options.engine, workers=options.jobs, cluster=options.cluster) as made:
        yield made


BASE_BYTES = 300e6       # the interpreter with its libraries (measured: about 0.3 GB)


def memory_estimate(terminals: int, paths: int, days: int, fresh: int) -> float:
    """Bytes a plan run needs at its peak, about: the demand paths and their accounting
    (``8 P`` values per terminal and day), the fresh and validation paths with theirs
    (``6 F``), the cycle tables (``160 D`` bytes per terminal and day) and the interpreter.
    Measured on the demo (60 terminals, 500 paths, 42 days, 4,900 fresh paths): estimate
    0.99 GB, peak resident 0.98 GB."""
    values = float(terminals) * days * (8.0 * paths + 6.0 * fresh)
    return BASE_BYTES + 8.0 * values + 160.0 * terminals * days * days


def available_memory() -> float:
    """Bytes of memory available now (``MemAvailable`` of /proc/meminfo; else the free
    physical pages)."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024.0
    except OSError:
        pass
    try:
        return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return float("inf")


def check_memory(scenario, options: PlanOptions) -> float:
    """The run's memory estimate in bytes; :class:`InputError` (exit 2) when it exceeds
    ``options.max_memory_gb`` or, without it, the memory available now."""
    from planner.errors import InputError, Problem
    from planner.evaluate.simulate import sharp_path_count

    terminals = len(scenario.terminals)
    days = scenario.horizon_days + options.tail_for(scenario.horizon_days)
    fresh = sharp_path_count(scenario.max_dry_probability, terminals, days,
                             least=scenario.path_count)
    need = memory_estimate(terminals, scenario.path_count, days, fresh)
    limit = (options.max_memory_gb * 1e9 if options.max_memory_gb is not None
             else available_memory())
    if need > limit:
        what = ("the --max-memory limit" if options.max_memory_gb is not None
                else "the memory available on this machine")
        raise InputError(Problem(
            "command line", f"this run needs about {need / 1e9:.1f} GB ({terminals} terminals "
            f"× {scenario.path_count:,} paths × {days} days), more than {what} "
            f"({limit / 1e9:.1f} GB)", "lower --paths or --horizon, or raise --max-memory "
            "(in GB) if the machine has the memory"))
    return need
