"""An invented planning run with every documented frame, to preview the report and test it.

``python -m planner.demo.report_preview OUT_DIR [--terminals N]`` writes ``report.html`` and
``plan.xlsx`` of an invented network (Kestrel Valley Bank, invented towns) in seconds, without
fitting forecasts or running the solver: the history is drawn from a weekly profile with
injected dry days, outages, gaps and outliers; the demand paths are lognormal with AR(1) noise;
the visits come from a simple greedy rule under the crew limits. The scenario loader, the
cleaning, the planning problem and the one accounting (:func:`planner.costs.simulate`) are the
real ones, so every figure in the preview is consistent. The greedy visits are **not** a plan:
the preview says so in its name.
"""
from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from planner.forecast.stage import ForecastResult

TOWNS = (("Brenholm", "BRH"), ("Falkstad", "FAL"), ("Wendmoor", "WEN"))
SITES = ("shopping centre", "high street", "station", "village", "campus", "hospital")
VISIT_PATTERNS = ("Mon|Tue|Wed|Thu|Fri", "Mon|Wed|Fri", "Tue|Thu|Sat", "Mon|Tue|Wed|Thu|Fri|Sat")
MODELS = ("seasonal naive", "ETS", "SARIMAX")


def write_sample_scenario(folder: Path, *, terminals: int = 6, seed: int = 7,
                          history_days: int = 140, horizon_days: int = 14) -> Path:
    """Write an invented scenario folder (README, "The scenario folder") and return its path."""
    rng = np.random.default_rng(seed)
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    start = pd.Timestamp("2026-11-30")  # a Monday
    hist = pd.date_range(end=start - pd.Timedelta(days=1), periods=history_days, freq="D")
    rows, disp, committed = [], [], []
    per_town = [0] * len(TOWNS)
    for i in range(terminals):
        k = i % len(TOWNS)
        per_town[k] += 1
        town, code = TOWNS[k]
        tid = f"{code}-{per_town[k]:03d}"
        level = float(rng.uniform(3000, 14000))
        bundle = 2000 if level > 6000 else 1000
        capacity = bundle * int(np.ceil(level * 9 / bundle))
        insurance = bundle * int(np.ceil(level * 7 / bundle))
        week = np.array([1.0, 0.95, 0.95, 1.05, 1.35, 1.2, 0.6]) * rng.uniform(0.9, 1.1, 7)
        z = np.zeros(len(hist))
        for d in range(1, len(hist)):
            z[d] = 0.5 * z[d - 1] + rng.normal(0, 0.18)
        demand = level * week[hist.day_of_week] * np.exp(z)
        status = np.array(["ok"] * len(hist), dtype=object)
        amount = np.round(demand, -1)
        for d in rng.choice(len(hist), size=3, replace=False):       # dry: a lower bound
            status[d], amount[d] = "dry", np.round(amount[d] * rng.uniform(0.3, 0.8), -1)
        down = int(rng.integers(10, len(hist) - 10))
        status[down:down + 3], amount[down:down + 3] = "down", 0.0
        out = int(rng.integers(0, len(hist)))
        if status[out] == "ok":
            amount[out] *= 10                                          # a recording error
        keep = np.ones(len(hist), bool)
        keep[rng.choice(len(hist), size=2, replace=False)] = False    # missing rows (gaps)
        for d in np.flatnonzero(keep):
            disp.append((tid, f"{hist[d]:%Y-%m-%d}", float(amount[d]), status[d]))
        rows.append((tid, town, capacity, insurance, bundle,
                     bundle * int(rng.uniform(2.5, 5) * level / bundle),
                     VISIT_PATTERNS[i % len(VISIT_PATTERNS)], SITES[i % len(SITES)]))
        if i == 0:
            committed.append((tid, f"{start:%Y-%m-%d}", float(insurance // 2 // bundle * bundle)))
    pd.DataFrame(rows, columns=["terminal_id", "depot", "capacity", "insurance_limit", "bundle",
                                "balance_now", "visit_days", "site"]) \
        .to_csv(folder / "terminals.csv", index=False)
    pd.DataFrame([(town, max(1, int(np.ceil(n * 0.5)))) for (town, _), n in
                  zip(TOWNS, per_town) if n],
                 columns=["depot", "max_visits_per_day"]).to_csv(folder / "depots.csv",
                                                                  index=False)
    pd.DataFrame(disp, columns=["terminal_id", "date", "amount", "status"]) \
        .to_csv(folder / "dispense.csv", index=False)
    pd.DataFrame(committed, columns=["terminal_id", "date", "load"]) \
        .to_csv(folder / "committed.csv", index=False)
    name = "Kestrel Valley Bank - report preview (invented data)"
    (folder / "scenario.toml").write_text(f"""name = "{name}"
currency = "EUR"
start_date = {start:%Y-%m-%d}

[planning]
horizon_days = {horizon_days}
replenishment = "swap"
lock_days = 1

[calendar]
holidays = "DE"

[costs]
carry_rate_annual = 0.05
visit_fee = 120
emergency_visit_fee = 400
handling_per_1000 = 0.8
dry_day_penalty = 600

[costs.visit_fee_by_weekday]
Sat = 180

[service]
max_dry_probability = 0.05

[paths]
count = 200
seed = {seed}
""", encoding="utf-8")
    return folder


def sample_forecast(scenario, clean, *, days: int, path_count: int, seed: int) -> ForecastResult:
    """Lognormal demand paths with AR(1) noise around each terminal's weekday means."""
    rng = np.random.default_rng(seed)
    ids = tuple(scenario.terminal_ids)
    dates = pd.date_range(scenario.start_date, periods=days, freq="D")
    daily = clean.daily
    paths = np.empty((len(ids), path_count, days))
    sd = 0.2
    for i, tid in enumerate(ids):
        rows = daily[daily["terminal_id"] == tid]
        means = rows.groupby(rows["date"].dt.day_of_week)["demand"].mean()
        profile = means.reindex(range(7)).fillna(means.mean()).to_numpy()[dates.day_of_week]
        noise = np.empty((path_count, days))
        noise[:, 0] = rng.normal(0, sd, path_count)
        for d in range(1, days):   # joint over days: the innovations carry over
            noise[:, d] = 0.5 * noise[:, d - 1] + rng.normal(0, sd * np.sqrt(0.75), path_count)
        paths[i] = profile[None, :] * np.exp(noise - sd ** 2 / 2)
    q = np.quantile(paths, [0.05, 0.10, 0.50, 0.90, 0.95], axis=1)   # [5, T, D]
    quantiles = pd.DataFrame({
        "terminal_id": np.repeat(ids, days),
        "date": np.tile(dates, len(ids)),
        "model": "ETS",
        **{name: q[j].ravel() for j, name in enumerate(("q05", "q10", "q50", "q90", "q95"))},
        "mean": paths.mean(axis=1).ravel(),
    })
    champion = pd.DataFrame({"model": ["ETS"] * len(ids), "score": rng.uniform(0.6, 0.9, len(ids)),
                             "reason": ["lowest MASE over 8 origins"] * len(ids)},
                            index=pd.Index(ids, name="terminal_id"))
    acc = []
    for tid in ids:
        for m, base in zip(MODELS, (1.0, 0.75, 0.8)):
            acc.append((tid, m, base * rng.uniform(0.9, 1.1), 20 * base * rng.uniform(0.9, 1.1),
                        *(rng.uniform(100, 400, 3)), rng.uniform(0.7, 0.85),
                        rng.uniform(0.88, 0.97)))
    accuracy = pd.DataFrame(acc, columns=["terminal_id", "model", "mase", "smape", "pinball_10",
                                          "pinball_50", "pinball_90", "coverage_80",
                                          "coverage_95"])
    return ForecastResult(ids, dates, paths, quantiles, champion, accuracy, [])


def greedy_visits(problem) -> tuple[np.ndarray, np.ndarray]:
    """Visit a terminal when its balance may not last until the next allowed visit day (on
    more than 1 % of paths); the most urgent first.

    Loads cover the 98th percentile of demand until two allowed days later, up to the limit.
    Crew limits per depot and day are kept; committed visits are kept as ordered.
    """
    t_count, _, d_count = problem.shape
    demand = problem.demand
    visits = np.zeros((t_count, d_count), bool)
    loads = np.zeros((t_count, d_count))
    balance = np.repeat(problem.start_balance[:, None], demand.shape[1], axis=1)
    committed = problem.committed
    for d in range(d_count):
        # the balance must last until the next day on which a visit is allowed
        nxt = np.array([d + 1 + (np.flatnonzero(problem.allowed[t, d + 1:])[:1].tolist()
                                 or [d_count])[0] for t in range(t_count)])
        need = np.stack([demand[t, :, d:nxt[t]].sum(axis=1) for t in range(t_count)])
        short = (balance < need).mean(axis=1)               # share of paths that run short
        want = problem.allowed[:, d] & (short > 0.01) & ~committed[:, d]
        left = problem.crew_limit[:, d] - np.bincount(problem.depot_of, committed[:, d],
                                                      minlength=len(problem.depots))
        for t in np.argsort(-short, kind="stable"):
            if want[t] and left[problem.depot_of[t]] > 0:
                left[problem.depot_of[t]] -= 1
                visits[t, d] = True
        for t in range(t_count):
            if committed[t, d]:
                visits[t, d], loads[t, d] = True, problem.fixed_load[t, d]
            elif visits[t, d]:
                ahead = np.flatnonzero(problem.allowed[t, d + 1:])
                until = d + 1 + (ahead[1] if ahead.size > 1 else d_count)
                cover = np.quantile(demand[t, :, d:until].sum(axis=1), 0.98)
                b = problem.bundle[t]
                loads[t, d] = min(problem.limit[t], b * np.ceil(cover / b))
        balance = np.where(visits[:, d][:, None], loads[:, d][:, None], balance)
        balance = np.maximum(balance - demand[:, :, d], 0.0)
    return visits, loads


def sample_run(folder: Path, *, terminals: int = 6, seed: int = 7, horizon_days: int = 14,
               path_count: int = 200, tail_days: int = 7):
    """Build a :class:`planner.pipeline.PlanRun` of an invented network (see the module doc)."""
    from planner.cleaning import clean_history
    from planner.optimize.frames import orders_frame, plan_frame
    from planner.optimize.problem import build_problem, result_from_plan
    from planner.pipeline import PlanOptions, PlanRun, _summary, plan_costs
    from planner.scenario import load_scenario

    root = write_sample_scenario(Path(folder), terminals=terminals, seed=seed,
                                 horizon_days=horizon_days)
    scenario = load_scenario(root)
    clean = clean_history(scenario)
    forecast = sample_forecast(scenario, clean, days=horizon_days + tail_days,
                               path_count=path_count, seed=seed)
    problem = build_problem(scenario, forecast.paths, forecast.dates, tail_days=tail_days)
    visits, loads = greedy_visits(problem)
    result = result_from_plan(problem, visits, loads, status="feasible",
                              bound=float("-inf"), solver="greedy preview", time_s=0.0)
    plan, orders = plan_frame(problem, result), orders_frame(problem, result)
    costs = plan_costs(problem, result)
    options = PlanOptions(tail_days=tail_days)
    summary = _summary(scenario, options, forecast, problem, result, plan, costs)
    summary["method"] = ("preview: invented history, lognormal demand paths and a greedy visit "
                         "rule (not an optimised plan)")
    return PlanRun(scenario, options, clean, forecast, problem, result, plan, orders, costs,
                   summary)


def main(argv: list[str] | None = None) -> int:
    """Write a preview run folder: ``python -m planner.demo.report_preview OUT [--terminals N]``."""
    import argparse

    from planner.report import write_plan_xlsx, write_report
    from planner.runfolder import RunFolderWriter

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("out", type=Path)
    parser.add_argument("--terminals", type=int, default=12)
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        run = sample_run(Path(tmp) / "scenario", terminals=args.terminals, seed=args.seed)
        with RunFolderWriter(args.out) as writer:
            write_report(run, writer)
            write_plan_xlsx(run, writer)
    print(f"preview written to {args.out}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
