"""Does the service promise hold out of sample? Demo and hold-out networks, one run each.

For each network: the plan at the target's own in-sample allowance and the calibrated plan
(:mod:`planner.optimize.calibrate`), both priced on the same fresh paths of the out-of-sample
stream (:func:`planner.evaluate.simulate.sharp_path_count` of them: standard error 0.2 points
at the target). Printed per network: terminals over the target (estimate more than two
standard errors above it) among those whose target is reachable, their share (target ≤ 5 %),
the network mean of cycle dry risk over every visit cycle (target: at or under the target),
and the cost increase of calibration.

    OPENBLAS_NUM_THREADS=1 python bench/bench_service.py [SCENARIO …]

Without arguments: the demo network and the two hold-out networks (never tuned on).
"""
from __future__ import annotations

import sys
import time

import numpy as np

from planner.demo import demo_path
from planner.evaluate.simulate import check_plan, fresh_paths, fresh_seed, sharp_path_count
from planner.optimize import solve_plan
from planner.optimize.calibrate import calibrate
from planner.pipeline import plan_scenario


def measure(source) -> dict:
    started = time.perf_counter()
    run = plan_scenario(source, calibrate=False, evaluate=False, diagnose=False, report=False)
    problem, plain = run.problem, run.result
    t_count, p_count, d_count = problem.shape
    count = sharp_path_count(problem.max_dry_probability, t_count, d_count, least=p_count)
    seed = run.scenario.seed
    validation = fresh_paths(run.scenario, run.clean, problem, seed=fresh_seed(seed, 2),
                             path_count=count)
    fresh = fresh_paths(run.scenario, run.clean, problem, seed=fresh_seed(seed, 1),
                        path_count=count)
    reach = plain.reachable
    calibration = calibrate(problem, validation,
                            lambda p: solve_plan(p, time_limit_s=60))
    out = {"network": run.scenario.name, "terminals": t_count, "reachable": int(reach.sum()),
           "paths": count, "target": problem.max_dry_probability}
    for name, p, r in (("uncalibrated", problem, plain),
                       ("calibrated", calibration.problem, calibration.result)):
        s = check_plan(p, r.visits, r.loads, fresh, reachable=reach).summary
        out[name] = {"over": s["terminals_over_target"], "share": s["share_over_target"],
                     "mean": s["mean_dry_probability"], "cost": r.objective,
                     "status": r.status}
    out["cost_increase"] = out["calibrated"]["cost"] / out["uncalibrated"]["cost"] - 1.0
    out["seconds"] = time.perf_counter() - started
    return out


def main(sources) -> None:
    print("network      reach  paths  | uncalibrated: over  share  mean   | calibrated: over  "
          "share  mean   | cost +  | s")
    for source in sources:
        m = measure(source)
        u, c = m["uncalibrated"], m["calibrated"]
        print(f"{m['network'][:12]:12} {m['reachable']:5d} {m['paths']:6d}  | "
              f"{u['over']:16d} {u['share']:6.1%} {u['mean']:6.2%} | "
              f"{c['over']:15d} {c['share']:6.1%} {c['mean']:6.2%} | "
              f"{m['cost_increase']:+6.2%} | {m['seconds']:.0f}", flush=True)


if __name__ == "__main__":
    args = sys.argv[1:] or [demo_path(), demo_path("holdout/saltreach"),
                            demo_path("holdout/brannock")]
    main(args)
