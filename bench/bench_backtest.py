"""Benchmark of the rolling backtest on the Northvale demo network (never collected as a test).

Run from the repo root::

    python bench/bench_backtest.py [scenario folder] [--weeks 12] [--paths 200] [--jobs 2]
                                   [--tail DAYS] [--set KEY=VALUE ...]

(``--set`` changes the scenario as a what-if override does, e.g. to see how much of the gap to
the bound the service target explains: ``--set service.max_dry_probability=0.1``.)

Replays the last ``--weeks`` weeks of the history (:func:`planner.evaluate.replay_scenario`)
with the planner, the planner on seasonal naive paths, and the baseline routines (fixed
weekdays Mon/Thu filled to the limit; days of cover 3/7 days + 25 %), all priced by the one
accounting on the realised demand, and prints the figures measured in this one run against the
targets:

(a) planner total cost ≤ 0.65 × the best baseline's, with no more dry days;
(b) planner total cost ≤ 1.3 × the perfect-foresight bound on the same realised demand.

It also prints, for the plan at the scenario's first planning day, the optimizer's expected cost
on its own demand paths against the mean perfect-foresight bound of those same paths: no plan
fixed in advance can do better than that ratio on the forecast's own uncertainty, so it tells
how far target (b) is reachable at all.
"""
from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from planner.evaluate.replay import backtest_scenario, write_backtest  # noqa: E402
from planner.pipeline import PlanOptions  # noqa: E402
from planner.scenario import load_scenario  # noqa: E402

BASELINE_RATIO_TARGET = 0.65
BOUND_RATIO_TARGET = 1.3


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("scenario", nargs="?", default=str(ROOT / "scenarios/northvale"))
    parser.add_argument("--weeks", type=int, default=12)
    parser.add_argument("--paths", type=int, default=None,
                        help="demand paths per plan [default: the scenario's paths.count]")
    parser.add_argument("--jobs", type=int, default=1)
    parser.add_argument("--time-limit", type=float, default=60.0)
    parser.add_argument("--tail", type=int, default=None,
                        help="tail days planned after each horizon [default: the planner's]")
    parser.add_argument("--out", default=None, help="also write the run folder here")
    parser.add_argument("--set", action="append", default=[], dest="sets",
                        help="override a setting, e.g. service.max_dry_probability=0.1")
    args = parser.parse_args(argv)

    scenario = load_scenario(args.scenario)
    if args.sets:
        from planner.compare import apply_overrides, parse_override

        scenario = apply_overrides(scenario, [parse_override(t) for t in args.sets])
        print("settings changed: " + ", ".join(args.sets))
    options = PlanOptions(path_count=args.paths, jobs=args.jobs, time_limit_s=args.time_limit)
    if args.tail is not None:
        options = replace(options, tail_days=args.tail)
    start = time.perf_counter()
    result = backtest_scenario(scenario, args.weeks, options=options,
                               progress=lambda text: print(f"  {text} "
                                                           f"({time.perf_counter() - start:.0f} s)",
                                                           flush=True))
    elapsed = time.perf_counter() - start
    if args.out:
        from planner.runfolder import RunFolderWriter

        with RunFolderWriter(Path(args.out)) as writer:
            write_backtest(writer, result)

    table = result.table.set_index("policy")
    cols = ["total", "carry", "visit", "handling", "dry_penalty", "visits", "emergency_visits",
            "dry_days", "crew_overrun_days", "ratio_to_bound", "saving_vs_best_baseline"]
    print()
    print(table[cols].to_string(float_format=lambda v: f"{v:,.3f}" if abs(v) < 10
                                else f"{v:,.0f}"))
    print()
    for line in result.summary["headline"]:
        print(line)
    s = result.summary
    planner = table.loc["planner"]
    best = table.loc[s["best_baseline"]["policy"]]
    ratio_baseline = planner["total"] / best["total"]
    ratio_bound = planner["total"] / s["bound"]
    ok_a = ratio_baseline <= BASELINE_RATIO_TARGET and planner["dry_days"] <= best["dry_days"]
    ok_b = ratio_bound <= BOUND_RATIO_TARGET
    print()
    print(f"(a) planner / best baseline ({best.name}) = {ratio_baseline:.3f} "
          f"(target ≤ {BASELINE_RATIO_TARGET}); dry days {int(planner['dry_days'])} vs "
          f"{int(best['dry_days'])} -> {'met' if ok_a else 'NOT met'}")
    print(f"(b) planner / perfect-foresight bound = {ratio_bound:.3f} "
          f"(target ≤ {BOUND_RATIO_TARGET}) -> {'met' if ok_b else 'NOT met'}")
    print(f"{args.weeks} weeks, {s['terminals']} terminals, {elapsed:.0f} s; solves: "
          + "; ".join(f"{p} {v['statuses']} max gap {v['max_gap']:.2%}, {v['time_s']:.0f} s"
                      for p, v in s["solver"].items()))

    from planner.evaluate.bound import perfect_foresight
    from planner.pipeline import plan_scenario

    run = plan_scenario(scenario, options=replace(options, evaluate=False)
                        if hasattr(options, "evaluate") else options)
    own = perfect_foresight(run.problem).expected_cost().sum()
    print(f"on its own {run.problem.shape[1]} demand paths the plan of {scenario.start_date:%Y-%m-%d} "
          f"costs {run.result.objective:,.0f}, {run.result.objective / own:.3f} × their mean "
          f"perfect-foresight bound {own:,.0f} (solver {run.result.status}, gap "
          f"{run.result.gap:.2%})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
