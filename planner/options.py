"""Options of one run: overrides of the scenario's settings and what the run does."""
from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

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
    jobs: int = 1
    time_limit_s: float = 60.0
    tail_days: int | None = None             # None: see tail_for
    origins: int = 8
    evaluate: bool = True
    calibrate: bool = True                   # calibrate the chance constraint on fresh paths
    diagnose: bool = True
    report: bool = True
    backtest_weeks: int = 0                  # > 0: also replay that many past weeks
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
        are set."""
        changes = {key: int(getattr(self, key)) for key in ("horizon_days", "path_count", "seed")
                   if getattr(self, key) is not None}
        return replace(scenario, **changes) if changes else scenario
