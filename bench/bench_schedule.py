"""Speed of the network schedule on invented networks (not a test; prints what one run measured).

    python bench/bench_schedule.py                     # 1,000 and 2,000 terminals, 500 paths
    python bench/bench_schedule.py --sizes 200 --jobs 1

Each network: synthetic lognormal weekday demand (``planner.demo.synthetic``), horizon 14
days + the planner's tail (28 days for a 14-day horizon), 200 terminals per depot (5 depots for 1,000 terminals, 10 for 2,000), crews
per depot and day at ``--crew-share`` of its terminals so that the crew limits bind. For the
first size the plan is also solved with crews ten times as many, to show what the limits cost.
Times are wall-clock seconds of ``solve_plan`` alone (demand generation excluded).
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import replace

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), os.pardir))

from planner.executor import LocalExecutor  # noqa: E402
from planner.optimize.schedule import solve_plan  # noqa: E402
from planner.demo.synthetic import synthetic_problem  # noqa: E402
from planner.pipeline import PlanOptions  # noqa: E402


def run(terminals: int, args, executor) -> dict:
    made = time.perf_counter()
    problem = synthetic_problem(terminals=terminals, depots=max(1, terminals // 200),
                                horizon_days=args.horizon, tail_days=args.tail,
                                paths=args.paths, seed=args.seed, crew_share=args.crew_share,
                                mode=args.mode)
    made = time.perf_counter() - made
    started = time.perf_counter()
    result = solve_plan(problem, time_limit_s=args.time_limit, executor=executor)
    elapsed = time.perf_counter() - started
    used = np.zeros_like(problem.crew_limit)
    np.add.at(used, problem.depot_of, result.visits.astype(int))
    assert (used <= problem.crew_limit).all()
    return {"problem": problem, "result": result, "time": elapsed, "made": made,
            "at_limit": float((used == problem.crew_limit).mean())}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 2000])
    parser.add_argument("--paths", type=int, default=500)
    parser.add_argument("--horizon", type=int, default=14)
    parser.add_argument("--tail", type=int, default=None,
                        help="days planned after the horizon [default: the planner's rule, "
                             "planner.pipeline.PlanOptions.tail_for]")
    parser.add_argument("--crew-share", type=float, default=0.4)
    parser.add_argument("--time-limit", type=float, default=60.0)
    parser.add_argument("--jobs", type=int, default=None)
    parser.add_argument("--seed", type=int, default=5)
    parser.add_argument("--mode", default="swap")
    parser.add_argument("--no-free-crews", action="store_true",
                        help="skip the comparison with crews ten times as many")
    args = parser.parse_args()
    if args.tail is None:
        args.tail = PlanOptions().tail_for(args.horizon)

    print(f"machine: {os.cpu_count()} CPU(s); jobs {args.jobs or os.cpu_count()}; "
          f"{args.paths} paths, {args.horizon} + {args.tail} days, mode {args.mode}")
    print(f"{'terminals':>9} {'depots':>6} {'time s':>8} {'status':>10} {'objective':>14} "
          f"{'bound':>14} {'gap':>8} {'depot-days at crew limit':>25}")
    executor = LocalExecutor(args.jobs or os.cpu_count() or 1)
    runs = []
    for n in args.sizes:
        r = run(n, args, executor)
        res = r["result"]
        runs.append(r)
        print(f"{n:>9} {len(r['problem'].depots):>6} {r['time']:>8.1f} {res.status:>10} "
              f"{res.objective:>14,.0f} {res.bound:>14,.0f} {res.gap:>8.3%} "
              f"{r['at_limit']:>25.1%}")
    if len(runs) >= 2:
        a, b = runs[0], runs[-1]
        print(f"time({args.sizes[-1]}) / time({args.sizes[0]}) = "
              f"{b['time'] / a['time']:.2f}")
    if not args.no_free_crews and runs:
        first = runs[0]
        free_problem = replace(first["problem"], crew_limit=10 * first["problem"].crew_limit)
        free = solve_plan(free_problem, time_limit_s=args.time_limit, executor=executor)
        extra = first["result"].objective / free.objective - 1.0
        print(f"crew limits bind: {args.sizes[0]} terminals cost {free.objective:,.0f} with crews "
              f"×10 and {first['result'].objective:,.0f} with the limits (+{extra:.2%})")
    executor.close()


if __name__ == "__main__":
    main()
