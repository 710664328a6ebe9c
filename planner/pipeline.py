"""Scenario → run folder: the one pipeline function that the CLI and the Python API call.

The stages read top to bottom (README, "How a plan is made"): load → clean → forecast → paths → optimize →
evaluate → report. Each stage takes data and returns data; nothing is kept between calls.
"""
from __future__ import annotations

import platform
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable

import numpy as np
import pandas as pd

from planner import __version__
from planner.costs import PART_COLUMNS, PERIODS, period_slices, period_totals
from planner.executor import Executor
from planner.options import PlanOptions, check_memory, run_executor
from planner.runfolder import rounded
from planner.scenario import Scenario, load_scenario

if TYPE_CHECKING:  # types only: these modules load when a run needs them
    from planner.cleaning import CleanHistory
    from planner.compare import CompareResult
    from planner.evaluate.replay import BacktestResult
    from planner.evaluate.simulate import OutOfSampleCheck
    from planner.forecast.stage import ForecastResult
    from planner.optimize.problem import PlanningProblem, PlanResult

@dataclass(frozen=True)
class CheckResult:
    """Outcome of ``planner check``: the validated scenario and its data-quality table.

    ``quality``: one row per terminal (terminal_id, depot, days, gaps, down, dry, outliers,
    first, last, mean_daily in currency units); ``network``: totals over all terminals;
    ``calendar``: monthly effects found in the history that the scenario does not declare
    (:func:`planner.discovery.undeclared_effects`).
    """

    scenario: Scenario
    quality: pd.DataFrame
    network: dict[str, Any]
    calendar: pd.DataFrame

    def network_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.network])

    def understood(self) -> pd.DataFrame:
        """What the tool read from the scenario, as ``setting, value`` text rows: currency,
        first planning day, horizon, mode, fees by weekday, crews per depot and weekday,
        holidays, paydays, events, committed visits."""
        from planner.scenario import WEEKDAYS

        sc = self.scenario
        c = sc.costs
        fees = " ".join(f"{d} {c.visit_fee_on(k):,.0f}" for k, d in enumerate(WEEKDAYS))
        cal = sc.calendar
        rows = [
            ("currency", sc.currency),
            ("first planning day", f"{sc.start_date:%a %Y-%m-%d}"),
            ("horizon", f"{sc.horizon_days} days (plus a look-ahead, not reported)"),
            ("replenishment", sc.replenishment),
            ("lock days", f"{sc.lock_days} (only committed visits in them)"),
            ("visit fee by weekday", f"{fees} {sc.currency}"),
        ]
        own = sc.terminals["visit_fee"].dropna()
        if len(own):
            shown = ", ".join(f"{tid} {fee:,.0f}" for tid, fee in own.head(8).items())
            more = f" and {len(own) - 8} more" if len(own) > 8 else ""
            rows.append(("own visit fees (every day)", f"{shown}{more} {sc.currency}"))
        rows += [
            ("holidays", (f"{cal.country}" + (f"-{cal.subdivision}" if cal.subdivision else ""))
             if cal.country else "none declared"),
            ("paydays", ", ".join(str(p) for p in cal.paydays) or "none declared"),
            ("events", ", ".join(f"{e.date:%Y-%m-%d} ×{e.lift:g}" for e in cal.events)
             or "none"),
            ("service target", f"{sc.max_dry_probability:.1%} per visit cycle"),
            ("demand paths", f"{sc.path_count:,} (seed {sc.seed})"),
            ("committed visits", str(len(sc.committed))),
        ]
        for depot, row in sc.depots.iterrows():
            rows.append((f"crews of {depot} (visits per day)",
                         " ".join(f"{d} {int(row[d])}" for d in WEEKDAYS)))
        return pd.DataFrame(rows, columns=["setting", "value"])

    def crewless_commitments(self) -> list[str]:
        """A notice per committed visit on a day its depot has no crew (it is kept: a
        committed visit happens, and the day is then over its crews)."""
        from planner.scenario import WEEKDAYS

        sc = self.scenario
        out = []
        for tid, date in zip(sc.committed["terminal_id"], sc.committed["date"]):
            depot = sc.terminals.loc[tid, "depot"]
            day = WEEKDAYS[pd.Timestamp(date).weekday()]
            if int(sc.depots.loc[depot, day]) == 0:
                out.append(f"committed.csv: {tid} is committed on {date:%a %Y-%m-%d}, a day "
                           f"depot {depot} has no crew; the visit is kept — check the date or "
                           f"the depot's {day} column")
        return out


def check_scenario(path: str | Path | Scenario) -> CheckResult:
    """Load and validate a scenario and describe the quality of its history."""
    from planner.cleaning import clean_history
    from planner.discovery import undeclared_effects

    scenario = path if isinstance(path, Scenario) else load_scenario(path)
    clean = clean_history(scenario)
    quality = clean.summary.reset_index()
    if "terminal_id" not in quality.columns:
        quality = quality.rename(columns={quality.columns[0]: "terminal_id"})
    quality.insert(1, "depot", quality["terminal_id"].map(scenario.terminals["depot"]))
    keep = ["terminal_id", "depot", "days", "gaps", "down", "dry", "outliers", "first", "last",
            "mean_daily"]
    quality = quality[[c for c in keep if c in quality.columns]]
    for col in ("first", "last"):
        if col in quality.columns:
            quality[col] = pd.to_datetime(quality[col]).dt.strftime("%Y-%m-%d")
    if "mean_daily" in quality.columns:
        quality["mean_daily"] = quality["mean_daily"].round(0)
    counts = [c for c in ("days", "gaps", "down", "dry", "outliers") if c in quality.columns]
    network = {"terminals": int(len(scenario.terminals)),
               "depots": int(len(scenario.depots)),
               **{c: int(quality[c].sum()) for c in counts},
               "first": f"{scenario.dispense['date'].min():%Y-%m-%d}",
               "last": f"{scenario.dispense['date'].max():%Y-%m-%d}",
               "first_planning_day": f"{scenario.start_date:%Y-%m-%d}"}
    return CheckResult(scenario, quality, network, undeclared_effects(scenario, clean))


@dataclass(frozen=True)
class PlanRun:
    """Everything one planning run produced (frames documented in the README, 'Outputs').

    - ``plan``: one row per visit in the horizon (terminal_id, depot, date, load,
      expected_residual, dry_probability, next_visit, next_visit_in, load_stop, reason;
      planner.optimize.frames).
    - ``orders``: cash per depot and day (depot, date, visits, load_total, expected_returns).
    - ``costs``: expected cost parts per terminal and period (``period`` = ``horizon``, the
      days plan.csv lists, or ``look_ahead``, the days planned after it; currency units, mean
      over the plan's own demand paths).
    - ``paths``: demand paths [terminal, path, day] over ``dates``.
    - ``summary``: the content of ``summary.json``.
    """

    scenario: Scenario
    options: PlanOptions
    clean: CleanHistory
    forecast: ForecastResult
    problem: PlanningProblem
    result: PlanResult
    plan: pd.DataFrame
    orders: pd.DataFrame
    costs: pd.DataFrame
    summary: dict[str, Any]
    evaluation: pd.DataFrame | None = None
    out_of_sample: OutOfSampleCheck | None = None
    diagnostics: dict[str, Any] | None = None
    backtest: BacktestResult | None = None
    comparison: CompareResult | None = None
    run_folder: Path | None = None

    @property
    def paths(self) -> np.ndarray:
        return self.forecast.paths

    def summary_frame(self) -> pd.DataFrame:
        """The headline figures as a two-column table (figure, value as text)."""
        s = self.summary
        cur = s["currency"]
        rows = [
            ("terminals / visits planned in the horizon",
             f"{s['network']['terminals']} / {s['network']['visits']}"),
            ("cash to load in the horizon", f"{s['network']['load_total']:,.0f} {cur}"),
            (f"expected cost in the horizon, {s['horizon_days']} days (own paths)",
             f"{s['costs']['horizon']['total']:,.0f} {cur}"),
            (f"expected cost of the look-ahead, {s['tail_days']} more days (own paths; "
             "not committed)", f"{s['costs']['look_ahead']['total']:,.0f} {cur}"),
            ("solver status, gap", f"{s['solver']['status']}, {s['solver']['gap']:.3%}"),
        ]
        oos = s.get("out_of_sample")
        if oos:
            rows.append(("expected cost on fresh paths: horizon / look-ahead",
                         f"{oos['expected_cost_horizon']:,.0f} / "
                         f"{oos['expected_cost_look_ahead']:,.0f} {cur}"))
            rows.append((f"terminals over the target on {oos['paths']:,} fresh paths (more "
                         "than 2 standard errors)", str(oos["terminals_over_target"])))
            rows.append(("mean cycle dry risk on fresh paths",
                         f"{oos['mean_dry_probability']:.2%} (target "
                         f"{oos['max_dry_probability']:.1%})"))
        rows.append(("terminals over the target on the plan's own paths",
                     str(s["service"]["terminals_over_target"])))
        routines = {r["kind"]: r for r in reversed(s.get("routines", []))}
        base = [r for r in s.get("routines", []) if r["kind"] == "baseline"]
        if base and "plan" in routines:
            best = min(base, key=lambda r: r["total"])
            saving = 1 - routines["plan"]["total"] / best["total"]
            rows.append((f"best baseline routine (fresh paths, whole window): {best['routine']}",
                         f"{best['total']:,.0f} {cur} (plan saves {saving:.1%})"))
        if "bound" in routines and "plan" in routines:
            rows.append(("perfect-foresight bound (fresh paths, whole window)",
                         f"{routines['bound']['total']:,.0f} {cur} (plan / bound "
                         f"{routines['plan']['total'] / routines['bound']['total']:.2f})"))
        return pd.DataFrame(rows, columns=["figure", "value"])

    def advice(self) -> list[str]:
        """One line per terminal over the target on fresh paths: its figure and what the user
        can do about it (the same lines in the terminal and the report)."""
        if self.out_of_sample is None:
            return []
        frame = self.out_of_sample.frame
        target = float(self.out_of_sample.summary["max_dry_probability"])
        return [f"{r.terminal_id}: cycle dry risk {r.dry_probability:.1%} ± "
                f"{r.dry_probability_se:.1%} on fresh paths against the {target:.1%} target — "
                "plan with more paths (--paths), set a lower target, or review this machine's "
                "limit and visit days"
                for r in frame[frame["over_target"]].itertuples()]

    def notes(self) -> list[str]:
        """Per-terminal notes of the optimizer (targets that cannot be met, and why)."""
        return [f"{t['terminal_id']}: {t['note']}" for t in self.summary["terminals"]
                if t.get("note")]


Progress = Callable[[str, int, int], None]
"""``progress(stage, done, total)``: called as a stage advances (stage names: clean, forecast,
optimize, evaluate)."""


def _quiet(stage: str, done: int, total: int) -> None:
    return None


def plan_scenario(source: str | Path | Scenario, *, options: PlanOptions | None = None,
                  progress: Progress | None = None, executor: Executor | None = None,
                  **overrides: Any) -> PlanRun:
    """Plan visits and loads for a scenario; returns every stage's result, writes nothing.

    ``overrides`` are fields of :class:`PlanOptions` (``horizon_days=21, seed=3, jobs=2`` …).
    ``executor``: where the per-terminal and per-depot work runs (default: one made from the
    options, :func:`planner.options.run_executor`, for this run only).
    Raises :class:`~planner.errors.InputError` on malformed input.
    """
    options = replace(options or PlanOptions(), **overrides)
    with run_executor(options, executor) as engine:
        return _plan_scenario(source, options, progress or _quiet, engine)


def _plan_scenario(source: str | Path | Scenario, options: PlanOptions, progress: Progress,
                   executor: Executor) -> PlanRun:
    from planner.cleaning import clean_history
    from planner.forecast import forecast_scenario
    from planner.optimize import build_problem, orders_frame, plan_frame

    variants = None
    if options.what_if or options.variant_files:
        from planner.compare import parse_variants

        variants = parse_variants(options.what_if, options.variant_files)  # fail early
    scenario = source if isinstance(source, Scenario) else load_scenario(source)
    scenario = options.apply(scenario)
    check_memory(scenario, options)

    progress("clean", 0, 1)
    clean = clean_history(scenario)
    progress("clean", 1, 1)
    tail = options.tail_for(scenario.horizon_days)
    forecast = forecast_scenario(scenario, clean, horizon_days=scenario.horizon_days + tail,
                                 path_count=scenario.path_count, seed=scenario.seed,
                                 executor=executor, origins=options.origins,
                                 progress=lambda done, total: progress("forecast", done, total))
    problem = build_problem(scenario, forecast.paths, forecast.dates, tail_days=tail)
    progress("optimize", 0, len(problem.terminal_ids))
    problem, result, calibration = plan_problem(scenario, clean, problem, options, progress,
                                                executor=executor)
    plan = plan_frame(problem, result)
    orders = orders_frame(problem, result)
    costs = plan_costs(problem, result)
    summary = _summary(scenario, options, forecast, problem, result, plan, costs)
    summary["calendar_notices"] = calendar_notices(scenario, clean)
    if calibration is not None:
        summary["calibration"] = calibration.summary()
    evaluation, check = None, None
    if options.evaluate:
        progress("evaluate", 0, 1)
        evaluation, check = evaluate_plan(scenario, clean, problem, result, options,
                                          executor=executor)
        progress("evaluate", 1, 1)
        summary["out_of_sample"] = check.summary
        summary["routines"] = json_records(evaluation)
    diagnostics = None
    if options.diagnose:
        from planner.diagnostics import diagnose_scenario

        progress("diagnose", 0, 1)
        diagnostics = diagnose_scenario(scenario, clean,
                                        residuals_by_terminal=getattr(forecast, "residuals",
                                                                      None),
                                        executor=executor)
        progress("diagnose", 1, 1)
    backtest = comparison = None
    if options.backtest_weeks > 0:
        from planner.evaluate.replay import backtest_scenario

        progress("backtest", 0, options.backtest_weeks)
        week = iter(range(1, options.backtest_weeks + 1))
        backtest = backtest_scenario(
            source if isinstance(source, Scenario) else load_scenario(source),
            options.backtest_weeks, options=replace(options, backtest_weeks=0, what_if=(),
                                                    variant_files=()),
            progress=lambda text: progress("backtest", next(week, options.backtest_weeks),
                                           options.backtest_weeks), executor=executor)
        summary["backtest"] = backtest.summary
    if variants:
        from planner.compare import compare_scenario

        progress("compare", 0, 1)
        comparison = compare_scenario(scenario, variants, options=options, clean=clean,
                                      forecast=forecast,
                                      fresh=check.demand if check is not None else None,
                                      executor=executor)
        summary["what_if"] = comparison.summary
        progress("compare", 1, 1)
    return PlanRun(scenario, options, clean, forecast, problem, result, plan, orders, costs,
                   summary, evaluation, check, diagnostics, backtest, comparison)


def evaluate_plan(scenario: Scenario, clean: CleanHistory, problem: PlanningProblem,
                  result: PlanResult, options: PlanOptions, *, executor: Executor | None = None
                  ) -> tuple[pd.DataFrame, OutOfSampleCheck]:
    """Price the plan, the baseline routines and the perfect-foresight bound on the same
    fresh demand paths (drawn with a seed independent of the optimizer's).

    Returns the routine table (one row per routine: ``routine``, ``kind`` plan | baseline |
    bound, ``total`` and its parts in currency over the whole planned window,
    ``horizon_total`` and ``look_ahead_total`` its two periods (the bound: the window only, as
    it is not split by period), ``dry_probability``
    = mean over terminals of the worst visit cycle's share of fresh paths that run dry,
    ``terminals_over_target``, ``visits`` in the horizon) and the out-of-sample check.
    """
    from planner.evaluate import days_of_cover, fixed_weekdays, out_of_sample_check, plan_ledger
    from planner.evaluate.baselines import ROUTINE_LABELS
    from planner.evaluate.bound import perfect_foresight_arrays
    from planner.costs import cycle_dry_shares
    from planner.evaluate.simulate import over_target

    check = out_of_sample_check(scenario, clean, problem, result, executor=executor,
                                origins=options.origins)
    fresh = check.demand
    horizon = problem.horizon_days
    target = problem.max_dry_probability
    rows = []
    routines = [("planner", "plan", (result.visits, result.loads)),
                (ROUTINE_LABELS["fixed_weekdays"], "baseline", fixed_weekdays(problem)),
                (ROUTINE_LABELS["days_of_cover"], "baseline", days_of_cover(problem))]
    for name, kind, (visits, loads) in routines:
        ledger = plan_ledger(problem, visits, loads, fresh)
        parts = ledger.parts()
        dry, _ = cycle_dry_shares(ledger, np.asarray(visits, dtype=bool))
        rows.append({"routine": name, "kind": kind,
                     **{c: float(parts[c].sum()) for c in parts.columns},
                     **{f"{p}_total": float(ledger.expected_cost(days).sum())
                        for p, days in period_slices(horizon).items()},
                     "dry_probability": float(dry.mean()),
                     "terminals_over_target": int(over_target(dry, fresh.shape[1],
                                                              target).sum()),
                     "visits": int(np.asarray(visits)[:, :horizon].sum())})
    bound = perfect_foresight_arrays(
        demand=fresh, start_balance=problem.start_balance, limit=problem.limit,
        bundle=problem.bundle, allowed=problem.allowed, fixed_load=problem.fixed_load,
        visit_fee=problem.visit_fee, rates=problem.rates, mode=problem.mode)
    rows.append({"routine": "perfect-foresight bound", "kind": "bound",
                 "total": float(bound.expected_cost().sum())})
    frame = pd.DataFrame(rows)
    for col in ("terminals_over_target", "visits"):
        frame[col] = frame[col].astype("Int64")
    return frame, check


def json_records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """A frame as JSON-ready records (floats rounded to cents, NaN dropped)."""
    out = []
    for rec in frame.to_dict(orient="records"):
        row: dict[str, Any] = {}
        for k, v in rec.items():
            if pd.isna(v):
                continue
            if isinstance(v, (int, np.integer)) and not isinstance(v, bool):
                row[k] = int(v)
            elif isinstance(v, (float, np.floating)):
                row[k] = round(float(v), 4 if "probability" in k else 2)
            else:
                row[k] = v
        out.append(row)
    return out


def open_run_folder(out_dir: str | Path, source: str | Path | Scenario):
    """The run folder's writer, checked and locked before any work
    (:class:`planner.runfolder.RunFolderWriter`; the scenario folder is protected)."""
    from planner.runfolder import RunFolderWriter

    folder = source.root if isinstance(source, Scenario) else Path(source)
    return RunFolderWriter(Path(out_dir), protect=[folder])


def run_plan(source: str | Path | Scenario, out_dir: str | Path, *,
             options: PlanOptions | None = None, progress: Progress | None = None) -> PlanRun:
    """Plan a scenario and write its run folder atomically (owner-only permissions)."""
    with open_run_folder(out_dir, source) as writer:
        run = plan_scenario(source, options=options, progress=progress)
        writer.write_csv("plan.csv", rounded(run.plan))
        writer.write_csv("orders.csv", rounded(run.orders))
        writer.write_csv("costs.csv", rounded(run.costs))
        if run.diagnostics:
            tables = [d.table().assign(terminal_id=tid)[["terminal_id", "on", "test", "statistic",
                                                         "p_value", "verdict"]]
                      for tid, d in run.diagnostics.items()]
            writer.write_csv("diagnostics.csv", rounded(pd.concat(tables, ignore_index=True)))
        if run.out_of_sample is not None:
            writer.write_csv("out_of_sample.csv", rounded(run.out_of_sample.frame))
            writer.write_csv("routines.csv", rounded(run.evaluation))
        if run.backtest is not None:
            from planner.evaluate.replay import write_backtest

            write_backtest(writer, run.backtest)
        if run.comparison is not None:
            from planner.compare import write_compare

            write_compare(writer, run.comparison)
        writer.write_json("summary.json", run.summary)
        if run.options.report:
            from planner.report import write_plan_xlsx, write_report

            (progress or _quiet)("report", 0, 1)
            write_report(run, writer)
            write_plan_xlsx(run, writer)
            (progress or _quiet)("report", 1, 1)
    return replace(run, run_folder=Path(out_dir))


def _versions() -> dict[str, str]:
    import importlib.metadata as md

    out = {"planner": __version__, "python": platform.python_version()}
    for pkg in ("numpy", "pandas", "scipy", "statsmodels", "pulp", "highspy"):
        try:
            out[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            out[pkg] = "not installed"
    return out


SERVICE_DEFINITION = (
    "cycle service level: for every visit in the planned window (horizon and look-ahead), "
    "the probability that the machine runs dry before its next visit is at most the target; "
    "the same for the start balance until the first visit; figures on the plan's own paths")


def calendar_notices(scenario, clean) -> list[str]:
    """Plain lines for the monthly effects the history shows and the scenario does not
    declare (the forecast does not use them; the user decides)."""
    from planner.discovery import undeclared_effects

    found = undeclared_effects(scenario, clean)
    return [f"undeclared calendar effect: {r.effect}, in {r.months_shown} of {r.months} "
            f"months; not used by the forecast — {r.add} if it is real"
            for r in found.itertuples()]


def plan_problem(scenario: Scenario, clean: CleanHistory, problem: PlanningProblem,
                 options: PlanOptions, progress: Progress | None = None, *,
                 executor: Executor | None = None):
    """Solve the schedule on ``executor``, calibrated unless ``options.calibrate`` is off
    (:func:`planner.evaluate.simulate.calibrated_plan`). Returns ``(problem with its in-sample
    allowance, result, calibration or None)``."""
    from planner.evaluate.simulate import calibrated_plan
    from planner.optimize import solve_plan

    def solve(p):
        return solve_plan(p, time_limit_s=options.time_limit_s, executor=executor,
                          progress=None if progress is None else
                          (lambda done, total: progress("optimize", done, total)))

    if not options.calibrate:
        return problem, solve(problem), None
    calibration = calibrated_plan(scenario, clean, problem, solve, executor=executor,
                                  origins=options.origins)
    result = calibration.result
    result = replace(result, log=tuple(result.log) + calibration.log)
    return calibration.problem, result, calibration


def plan_costs(problem: PlanningProblem, result: PlanResult) -> pd.DataFrame:
    """The plan's expected cost parts per terminal and period on its own paths
    (:meth:`planner.costs.Ledger.period_parts` with ``terminal_id`` first): ``costs.csv``."""
    costs = result.ledger.period_parts(problem.horizon_days)
    costs.insert(0, "terminal_id", np.repeat(list(problem.terminal_ids), len(PERIODS)))
    return costs


def _summary(scenario: Scenario, options: PlanOptions, forecast: ForecastResult,
             problem: PlanningProblem, result: PlanResult, plan: pd.DataFrame,
             costs: pd.DataFrame) -> dict[str, Any]:
    target = scenario.max_dry_probability
    dry = np.asarray(result.dry_probability, dtype=float)
    per_terminal = []
    parts = [c for c in PART_COLUMNS if c in costs]
    by_period = {p: costs[costs["period"] == p].set_index("terminal_id") for p in PERIODS}
    for i, tid in enumerate(problem.terminal_ids):
        row = {"terminal_id": tid,
               **{p: round(float(by_period["horizon"].loc[tid, p]), 2) for p in parts},
               "look_ahead_total": round(float(by_period["look_ahead"].loc[tid, "total"]), 2)}
        row["dry_probability"] = round(float(dry[i]), 4)
        row["note"] = result.notes[i] if result.notes is not None else ""
        per_terminal.append(row)
    totals = period_totals(costs)
    return {
        "scenario": scenario.name,
        "currency": scenario.currency,
        "first_planning_day": f"{scenario.start_date:%Y-%m-%d}",
        "horizon_days": scenario.horizon_days,
        "tail_days": int(problem.shape[2] - problem.horizon_days),
        "replenishment": scenario.replenishment,
        "paths": {"count": scenario.path_count, "seed": scenario.seed},
        "input_fingerprint": scenario.fingerprint,
        "versions": _versions(),
        "method": "sample average approximation over demand paths; visit patterns priced "
                  "exactly per terminal, network assignment under crew limits",
        "network": {"terminals": len(problem.terminal_ids), "visits": int(len(plan)),
                    "load_total": round(float(plan["load"].sum()), 2)},
        "costs": {**{p: {c: round(v, 2) for c, v in totals[p].items()} for p in PERIODS},
                  "window_total": round(sum(totals[p]["total"] for p in PERIODS), 2)},
        "service": {
            "definition": SERVICE_DEFINITION,
            "max_dry_probability": target,
            "terminals_over_target": int((dry > target + 1e-12).sum()),
            "worst_dry_probability": round(float(dry.max()) if dry.size else 0.0, 4),
            "mean_dry_before_horizon_end": round(float(
                result.ledger.dry_probability(problem.horizon_days).mean()), 4),
        },
        "solver": {"status": result.status, "name": result.solver,
                   "objective": round(float(result.objective), 2),
                   "bound": round(float(result.bound), 2),
                   "gap": round(float(result.gap), 6), "time_s": round(float(result.time_s), 2)},
        "forecast": {
            "champions": forecast.champion["model"].value_counts().sort_index().to_dict(),
            "fallbacks": list(forecast.fallbacks),
        },
        "terminals": per_terminal,
        "warnings": list(scenario.warnings),
    }


# ---------------------------------------------------------------------------------------------
# Forecast only, and diagnostics
# ---------------------------------------------------------------------------------------------

ACCURACY_COLUMNS = ["mase", "smape", "pinball_10", "pinball_50", "pinball_90", "coverage_80",
                    "coverage_95"]


@dataclass(frozen=True)
class ForecastRun:
    """Outcome of ``planner forecast``.

    ``by_model``: median over terminals of each accuracy measure per model (MASE against weekly
    seasonal naive, sMAPE in %, pinball losses in currency units, interval coverage as shares),
    plus how many terminals chose the model as champion.
    """

    scenario: Scenario
    clean: CleanHistory
    forecast: ForecastResult
    by_model: pd.DataFrame
    champions: pd.DataFrame
    run_folder: Path | None = None


def forecast_only(source: str | Path | Scenario, *, options: PlanOptions | None = None,
                  **overrides: Any) -> ForecastRun:
    """Clean the history and forecast every terminal (no plan)."""
    options = replace(options or PlanOptions(tail_days=0), **overrides)
    with run_executor(options) as executor:
        return _forecast_only(source, options, executor)


def _forecast_only(source: str | Path | Scenario, options: PlanOptions,
                   executor: Executor) -> ForecastRun:
    from planner.cleaning import clean_history
    from planner.forecast import forecast_scenario

    scenario = source if isinstance(source, Scenario) else load_scenario(source)
    scenario = options.apply(scenario)
    clean = clean_history(scenario)
    forecast = forecast_scenario(scenario, clean,
                                 horizon_days=scenario.horizon_days
                                 + options.tail_for(scenario.horizon_days),
                                 path_count=scenario.path_count, seed=scenario.seed,
                                 executor=executor, origins=options.origins)
    acc = forecast.accuracy
    cols = [c for c in ACCURACY_COLUMNS if c in acc.columns]
    by_model = acc.groupby("model")[cols].median()
    wins = forecast.champion["model"].value_counts()
    by_model["champion_of"] = wins.reindex(by_model.index).fillna(0).astype(int)
    by_model = by_model.reset_index().sort_values("mase", ignore_index=True)
    champions = forecast.champion.reset_index()
    return ForecastRun(scenario, clean, forecast, by_model, champions)


def run_forecast(source: str | Path | Scenario, out_dir: str | Path, *,
                 options: PlanOptions | None = None) -> ForecastRun:
    """Forecast and write accuracy, champions and forecast quantiles to a run folder."""
    with open_run_folder(out_dir, source) as writer:
        run = forecast_only(source, options=options)
        writer.write_csv("accuracy_by_model.csv", rounded(run.by_model))
        writer.write_csv("accuracy.csv", rounded(run.forecast.accuracy))
        writer.write_csv("champions.csv", rounded(run.champions))
        writer.write_csv("forecasts.csv", rounded(run.forecast.quantiles))
        writer.write_json("summary.json", {
            "scenario": run.scenario.name, "input_fingerprint": run.scenario.fingerprint,
            "paths": {"count": run.scenario.path_count, "seed": run.scenario.seed},
            "versions": _versions(), "fallbacks": list(run.forecast.fallbacks),
            "warnings": list(run.scenario.warnings)})
    return replace(run, run_folder=Path(out_dir))


@dataclass(frozen=True)
class DiagnoseRun:
    """Outcome of ``planner diagnose``: ``tests`` is the tidy table terminal_id, test,
    statistic, p_value, verdict."""

    scenario: Scenario
    tests: pd.DataFrame
    run_folder: Path | None = None


def run_diagnose(source: str | Path | Scenario, out_dir: str | Path, *,
                 terminal_ids: list[str] | None = None,
                 options: PlanOptions | None = None) -> DiagnoseRun:
    """Diagnose the history (and the champion's residuals) of terminals; write the run folder
    with ``diagnostics.csv`` and one chart page per terminal."""
    with open_run_folder(out_dir, source) as writer:
        scenario, tests = _diagnose_into(writer, source, terminal_ids, options)
    return DiagnoseRun(scenario, tests, Path(out_dir))


def _diagnose_into(writer, source, terminal_ids, options):
    """The diagnostics written into the staging folder of ``writer``:
    ``(scenario, tests)``."""
    from planner.cleaning import clean_history
    from planner.diagnostics import diagnose_scenario
    from planner.errors import InputError, Problem
    from planner.forecast import forecast_scenario

    options = options or PlanOptions(tail_days=0)
    scenario = source if isinstance(source, Scenario) else load_scenario(source)
    scenario = options.apply(scenario)
    if terminal_ids:
        unknown = [t for t in terminal_ids if t not in scenario.terminals.index]
        if unknown:
            raise InputError([Problem("--terminal", f"terminal {t!r} is not in terminals.csv",
                                      "give an id from terminals.csv") for t in unknown])
        scenario = _subset(scenario, terminal_ids)
    clean = clean_history(scenario)
    with run_executor(options) as executor:
        forecast = forecast_scenario(scenario, clean, horizon_days=scenario.horizon_days,
                                     path_count=min(scenario.path_count, 100),
                                     seed=scenario.seed, executor=executor,
                                     origins=options.origins)
        diagnose_scenario(scenario, clean, residuals_by_terminal=getattr(forecast, "residuals",
                                                                         None),
                          out_dir=writer.staging, executor=executor)
    return scenario, pd.read_csv(writer.staging / "diagnostics.csv")


def _subset(scenario: Scenario, terminal_ids: list[str]) -> Scenario:
    keep = list(dict.fromkeys(terminal_ids))
    return replace(scenario,
                   terminals=scenario.terminals.loc[keep],
                   dispense=scenario.dispense[scenario.dispense["terminal_id"].isin(keep)]
                   .reset_index(drop=True),
                   committed=scenario.committed[scenario.committed["terminal_id"].isin(keep)]
                   .reset_index(drop=True))


# ---------------------------------------------------------------------------------------------
# Backtest and what-if comparison (finance)
# ---------------------------------------------------------------------------------------------


def run_backtest(source: str | Path | Scenario, out_dir: str | Path, *, weeks: int,
                 options: PlanOptions | None = None, past_visits: str | Path | None = None,
                 progress: Callable[[str], None] | None = None) -> BacktestResult:
    """Replay the last ``weeks`` weeks (planner, baseline routines, perfect-foresight bound)
    and write the backtest tables and chart to a run folder."""
    from planner.evaluate.replay import backtest_scenario, write_backtest
    from planner.scenario import read_past_visits

    with open_run_folder(out_dir, source) as writer:
        scenario = source if isinstance(source, Scenario) else load_scenario(source)
        past = read_past_visits(past_visits, scenario.terminals) if past_visits else None
        result = backtest_scenario(scenario, weeks, options=options or PlanOptions(),
                                   past_visits=past, progress=progress)
        write_backtest(writer, result)
    return result


def run_compare(source: str | Path | Scenario, out_dir: str | Path, *,
                sets: list[str] | tuple[str, ...] = (),
                files: list[str | Path] | tuple[str | Path, ...] = (),
                options: PlanOptions | None = None) -> CompareResult:
    """Re-plan what-if variants on the base's demand paths, price all on common out-of-sample
    paths, and write the comparison tables and chart to a run folder."""
    from planner.compare import compare_scenario, parse_variants, write_compare

    variants = parse_variants(sets, files)  # bad overrides fail before any forecasting
    with open_run_folder(out_dir, source) as writer:
        scenario = source if isinstance(source, Scenario) else load_scenario(source)
        result = compare_scenario(scenario, variants, options=options or PlanOptions())
        write_compare(writer, result)
    return result
