"""Rolling backtest: replay the last weeks of the history with the planner and the baselines.

From ``weeks`` weeks before the end of the history, every week and for every policy:

1. plan with only the data up to that day — the scenario with its dispense history cut there,
   ``start_date`` set to that day and the policy's own actual balances as ``balance_now``
   (``dataclasses.replace``); the planner forecasts from that history (one forecast per week,
   shared by the policies) and solves; a baseline routine plans on the same problem with the
   trailing four-week weekday means as its demand estimate;
2. execute the plan's first 7 days against the **realised demand** (below) with the one
   accounting, :func:`planner.costs.simulate`, and one emergency rule for every policy: after a
   dry day with no visit planned the next morning, an emergency visit that morning fills the
   machine to its limit at ``emergency_visit_fee`` (on any day, crews aside);
3. carry the actual end balances into the next week. With ``lock_days`` the next week's first
   lock days keep the visits the policy had planned for them (they are already ordered).

Realised demand. The history records what was dispensed; on ``dry`` days that is only a lower
bound of demand, and ``down`` days and gaps record nothing. The backtest takes the cleaned
demand of :func:`planner.cleaning.clean_history` run on the **full** history as the demand that
happened: the recorded amount on ordinary days, the model's conditional mean given "at least
the recorded amount" on dry days, the weekday-profile estimate on down days and gaps, and the
profile's expected value on outlier days. The counts of such days in the window are reported.

Start balances: every policy starts from the scenario's ``balance_now`` (the only recorded
balance), so that all policies start equal. The scenario's ``committed.csv`` belongs to its own
first planning day and is not used.

The perfect-foresight bound is computed once on the realised demand of the whole window with
the same start balances, allowing emergency visits on any day at the emergency fee
(:mod:`planner.evaluate.bound`); no policy can cost less on that demand (except past visits
made outside the visit days, see :func:`planner.evaluate.baselines.past_visits`).
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import partial
from typing import Any, Callable

import numpy as np
import pandas as pd

from planner.costs import simulate
from planner.evaluate.baselines import (ROUTINE_LABELS, ROUTINES, crew_overruns,
                                        past_visits as past_visits_routine,
                                        trailing_weekday_mean)
from planner.evaluate.bound import perfect_foresight
from planner.evaluate.simulate import calibrated_plan, fresh_seed
from planner.executor import Executor
from planner.runfolder import rounded

PLANNER = "planner"
PLANNER_NAIVE = "planner_naive_forecast"
NAIVE_MODEL = "seasonal_naive"
BASELINE_WEEKS = 4            # trailing weeks of the baselines' weekday means
COST_PARTS = ("carry", "visit", "handling", "dry_penalty", "shortfall_penalty")
LABELS = {
    PLANNER: "planner (champion forecast)",
    PLANNER_NAIVE: "planner (seasonal naive forecast)",
    **ROUTINE_LABELS,
    "past_visits": "past visits (recorded)",
}

Routine = Callable[..., tuple[np.ndarray, np.ndarray]]


def default_baselines() -> dict[str, Routine]:
    """The baseline routines of the backtest with their default settings (Mon and Thu; 3 days
    trigger, 7 days cover, 25 % safety). Each takes ``(problem, daily_demand=...)``."""
    return dict(ROUTINES)


@dataclass(frozen=True)
class WeekExecution:
    """One week of one policy executed on realised demand (arrays ``[T, 7]`` unless noted)."""

    ledger: Any                 # planner.costs.Ledger with one path
    visits: np.ndarray          # bool: all visits done (planned and emergency)
    loads: np.ndarray
    emergency: np.ndarray       # bool: emergency visits
    planned: tuple[np.ndarray, np.ndarray]   # the full plan [T, D] (visits, loads)
    crew_over: int              # depot days of the executed week over the crew limit


@dataclass(frozen=True)
class BacktestResult:
    """What the rolling backtest measured (currency units; days of the window).

    - ``table``: one row per policy: ``policy``, ``label``, ``total``, the parts ``carry,
      visit, handling, dry_penalty, shortfall_penalty`` (``visit`` includes emergency fees),
      ``emergency_fees``, ``visits`` (all visits done), ``emergency_visits``, ``dry_days``
      (terminal days), ``shortfall`` (currency not dispensed), ``crew_overrun_days`` (depot
      days of executed visits over the crew limit), ``ratio_to_bound`` (total / perfect-
      foresight bound), ``saving_vs_best_baseline`` (1 − total / best baseline total).
      A row ``perfect_foresight`` holds the bound; with swap also the parts, visits and dry days
      of the plan reaching it (visits off the visit days there are emergency visits).
    - ``daily``: ``policy, date, cost, visits, emergency_visits, dry_days, end_balance`` summed
      over terminals.
    - ``terminals``: ``policy, terminal_id, depot, total, visits, emergency_visits, dry_days,
      bound``.
    - ``demand``: realised demand ``[T, days]``; ``dates``: the window's days;
      ``terminal_ids``; ``start_balance`` ``[T]``.
    - ``schedules``: policy → ``(visits, loads, emergency)`` ``[T, days]`` as executed
      (emergency visits paid ``emergency_visit_fee``).
    - ``summary``: the figures of ``backtest.json`` (window, treatment of demand, best
      baseline, saving, ratio to the bound, value of a better forecast).
    """

    table: pd.DataFrame
    daily: pd.DataFrame
    terminals: pd.DataFrame
    demand: np.ndarray
    dates: pd.DatetimeIndex
    terminal_ids: tuple[str, ...]
    start_balance: np.ndarray
    schedules: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]]
    summary: dict[str, Any] = field(default_factory=dict)

    def compact(self) -> pd.DataFrame:
        """The policy table with the columns a terminal has room for: ``label, total,
        visits, emergency_visits, dry_days, crew_overrun_days, ratio_to_bound,
        saving_vs_best_baseline``."""
        out = self.table[["label", "total", "visits", "emergency_visits", "dry_days",
                          "crew_overrun_days", "ratio_to_bound",
                          "saving_vs_best_baseline"]].copy()
        # counts are whole numbers, shares percentages (as the headline writes them)
        for col in ("visits", "emergency_visits", "crew_overrun_days"):
            out[col] = out[col].round().astype("Int64")
        out["saving_vs_best_baseline"] = [
            "—" if pd.isna(v) else f"{100 * float(v):.1f} %"
            for v in out["saving_vs_best_baseline"]]
        return out


# --------------------------------------------------------------------------------------------
# Realised demand
# --------------------------------------------------------------------------------------------


def realised_demand(clean, terminal_ids, dates: pd.DatetimeIndex) -> tuple[np.ndarray,
                                                                            dict[str, int]]:
    """``[T, D]`` the cleaned demand of ``clean.daily`` on ``dates`` (see the module text),
    and the number of window days per treatment: ``recorded``, ``dry_estimated``,
    ``down_or_gap_estimated``, ``outlier_replaced``, ``missing`` (no estimate: taken as 0)."""
    daily = clean.daily
    window = daily[daily["date"].isin(dates)]
    table = window.pivot(index="terminal_id", columns="date", values="demand")
    table = table.reindex(index=list(terminal_ids), columns=dates)
    flags = window.pivot(index="terminal_id", columns="date", values="flag")
    flags = flags.reindex(index=list(terminal_ids), columns=dates).fillna("gap")
    text = flags.to_numpy(dtype=object).astype(str)
    values = table.to_numpy(dtype=float)
    missing = np.isnan(values)
    dry = np.char.find(text, "dry") >= 0
    down = (np.char.find(text, "down") >= 0) | (np.char.find(text, "gap") >= 0)
    outlier = np.char.find(text, "outlier") >= 0
    counts = {
        "recorded": int((~(dry | down | outlier | missing)).sum()),
        "dry_estimated": int((dry & ~missing).sum()),
        "down_or_gap_estimated": int((down & ~dry & ~missing).sum()),
        "outlier_replaced": int((outlier & ~dry & ~down & ~missing).sum()),
        "missing": int(missing.sum()),
    }
    return np.where(missing, 0.0, np.maximum(values, 0.0)), counts


# --------------------------------------------------------------------------------------------
# Executing a week
# --------------------------------------------------------------------------------------------


def execute_days(visits: np.ndarray, loads: np.ndarray, start_balance: np.ndarray,
                 demand: np.ndarray, limit: np.ndarray, visit_fee: np.ndarray, rates, mode: str,
                 emergency_fee: float, dry_before: np.ndarray | None = None):
    """Execute planned visits ``[T, n]`` on realised demand ``[T, n]`` with the emergency rule.

    After a dry day with no visit planned the next morning, an emergency visit that morning
    loads the limit (the machine is empty after a dry day, so swap and top-up both fill it) at
    ``emergency_fee``. ``dry_before`` ``[T]``: the terminal was dry on the day before day 0.
    Returns ``(ledger, visits, loads, emergency)`` — the ledger of :func:`planner.costs.simulate`
    with one path, and the visits done, their loads and the emergency visits ``[T, n]``.
    """
    visits = np.asarray(visits, bool).copy()
    loads = np.where(visits, np.asarray(loads, float), 0.0)
    fee = np.asarray(visit_fee, dtype=float).copy()
    emergency = np.zeros_like(visits)
    t_count, n = visits.shape

    def call(mask: np.ndarray, day: np.ndarray) -> None:
        rows = np.flatnonzero(mask)
        visits[rows, day[rows]] = True
        loads[rows, day[rows]] = limit[rows]
        fee[rows, day[rows]] = emergency_fee
        emergency[rows, day[rows]] = True

    if dry_before is not None and n:
        call(np.asarray(dry_before, bool) & ~visits[:, 0], np.zeros(t_count, int))
    while True:
        ledger = simulate(visits, loads, start_balance, demand[:, None, :], limit, fee, rates,
                          mode)
        dry = ledger.dry[:, 0, :]
        late = dry[:, :-1] & ~visits[:, 1:]          # dry today, nobody comes tomorrow
        need = late.any(axis=1)
        if not need.any():
            return ledger, visits, loads, emergency
        call(need, np.argmax(late, axis=1) + 1)


# --------------------------------------------------------------------------------------------
# The backtest
# --------------------------------------------------------------------------------------------


@dataclass
class _PolicyState:
    balance: np.ndarray
    dry_before: np.ndarray
    committed: pd.DataFrame
    weeks: list = field(default_factory=list)
    solves: list = field(default_factory=list)     # (status, gap, seconds) per planned week


def _committed_from(plan_visits: np.ndarray, plan_loads: np.ndarray, dates: pd.DatetimeIndex,
                    terminal_ids, lock_days: int, offset: int = 7) -> pd.DataFrame:
    """Visits of a plan on the next week's lock days, as ``committed`` rows."""
    rows = []
    for j in range(offset, min(offset + lock_days, plan_visits.shape[1])):
        for i in np.flatnonzero(plan_visits[:, j]):
            rows.append((terminal_ids[i], dates[j], float(plan_loads[i, j])))
    return pd.DataFrame(rows, columns=["terminal_id", "date", "load"]).astype(
        {"terminal_id": str, "date": "datetime64[ns]", "load": float})


def backtest_scenario(scenario, weeks: int, *, options=None,
                      baselines: dict[str, Routine] | None = None,
                      past_visits: pd.DataFrame | None = None,
                      naive_forecast: bool = True, progress: Callable[[str], None] | None = None,
                      executor: Executor | None = None) -> BacktestResult:
    """Replay the last ``weeks`` weeks of the history (see the module text).

    ``options``: a :class:`planner.options.PlanOptions` (horizon, paths, seed, time limit,
    tail days, forecast origins, and the executor settings unless ``executor`` is given). ``baselines``: name → routine (default
    :func:`default_baselines`). ``past_visits``: the user's recorded visits (frame of
    :func:`planner.scenario.read_past_visits`), replayed as one more baseline.
    ``naive_forecast``: also run the planner on paths of the weekly seasonal naive model (the
    value of a better forecast, measured on the realised demand). ``progress(text)`` is called
    once per week.

    The CLI (``planner backtest SCENARIO --weeks N``) prints ``result.compact()`` (policy,
    total, visits, emergency visits, dry days, crew overruns, ratio to bound, saving; the full
    ``result.table`` adds the cost parts) and the lines of ``result.summary["headline"]``, and
    writes the run folder with :func:`write_backtest`.
    Raises :class:`~planner.errors.InputError` when the history is shorter than the window
    plus eight weeks of training.
    """
    from planner.options import PlanOptions, run_executor

    options = options or PlanOptions()
    with run_executor(options, executor) as engine:
        return _backtest_scenario(scenario, weeks, options, baselines, past_visits,
                                  naive_forecast, progress, engine)


def _backtest_scenario(scenario, weeks, options, baselines, past_visits, naive_forecast,
                       progress, executor) -> BacktestResult:
    from planner.cleaning import clean_history
    from planner.errors import InputError, Problem
    from planner.forecast import forecast_scenario
    from planner.optimize import build_problem, solve_plan

    scenario = options.apply(scenario)
    baselines = default_baselines() if baselines is None else dict(baselines)
    if past_visits is not None:
        baselines["past_visits"] = partial(_past_routine, visits=past_visits)
    weeks = int(weeks)
    history = scenario.dispense
    end = history["date"].max() + pd.Timedelta(days=1)
    first = end - pd.Timedelta(days=7 * weeks)
    if weeks < 1 or (first - history["date"].min()).days < 56:
        raise InputError(Problem(
            "dispense.csv", f"a backtest of {weeks} week(s) needs at least 8 weeks of history "
                            f"before {first:%Y-%m-%d}",
            "choose fewer weeks (--weeks) or supply a longer history"))
    dates = pd.date_range(first, periods=7 * weeks, freq="D")
    ids = tuple(scenario.terminal_ids)
    terminals = scenario.terminals
    limit = terminals["limit"].to_numpy(dtype=float)
    full_clean = clean_history(scenario)
    actual, treatment = realised_demand(full_clean, ids, dates)
    emergency_fee = float(scenario.costs.emergency_visit_fee)
    tail = options.tail_for(scenario.horizon_days)
    empty = scenario.committed.iloc[0:0]
    base = replace(scenario, committed=empty)
    start_balance = terminals["balance_now"].to_numpy(dtype=float)

    policies = [PLANNER] + ([PLANNER_NAIVE] if naive_forecast else []) + list(baselines)
    state = {p: _PolicyState(start_balance.copy(), np.zeros(len(ids), bool), empty)
             for p in policies}
    for w in range(weeks):
        day0 = first + pd.Timedelta(days=7 * w)
        known = replace(base, dispense=history[history["date"] < day0].reset_index(drop=True),
                        start_date=day0)
        clean = clean_history(known)
        seed = fresh_seed(scenario.seed, 1000 + w)
        days = known.horizon_days + tail
        forecasts = {PLANNER: forecast_scenario(known, clean, horizon_days=days,
                                                path_count=known.path_count, seed=seed,
                                                executor=executor, origins=options.origins)}
        if naive_forecast:
            forecasts[PLANNER_NAIVE] = forecast_scenario(
                known, clean, horizon_days=days, path_count=known.path_count, seed=seed,
                executor=executor, origins=options.origins, models=[NAIVE_MODEL])
        trailing = None
        for policy in policies:
            st = state[policy]
            sc = replace(known, terminals=terminals.assign(balance_now=st.balance),
                         committed=st.committed)
            fc = forecasts.get(policy, forecasts[PLANNER])
            problem = build_problem(sc, fc.paths, fc.dates, tail_days=tail)
            if policy == PLANNER and options.calibrate:
                result = calibrated_plan(
                    known, clean, problem,
                    lambda p: solve_plan(p, time_limit_s=options.time_limit_s,
                                         executor=executor),
                    seed=seed, executor=executor, origins=options.origins).result
                plan = (result.visits, result.loads)
                st.solves.append((result.status, float(result.gap), float(result.time_s)))
            elif policy in (PLANNER, PLANNER_NAIVE):
                result = solve_plan(problem, time_limit_s=options.time_limit_s,
                                    executor=executor)
                plan = (result.visits, result.loads)
                st.solves.append((result.status, float(result.gap), float(result.time_s)))
            else:
                if trailing is None:
                    trailing = trailing_weekday_mean(clean.daily, ids, problem.dates,
                                                     weeks=BASELINE_WEEKS)
                plan = baselines[policy](problem, daily_demand=trailing)
            n = 7
            ledger, v, l, em = execute_days(
                plan[0][:, :n], plan[1][:, :n], st.balance, actual[:, 7 * w:7 * w + n], limit,
                problem.visit_fee[:, :n], problem.rates, problem.mode, emergency_fee,
                st.dry_before)
            # crews: the planned visits of the executed week (emergency visits aside)
            week_problem = replace(problem, dates=problem.dates[:n],
                                   crew_limit=problem.crew_limit[:, :n])
            over = int(len(crew_overruns(week_problem, v & ~em)))
            st.weeks.append(WeekExecution(ledger, v, l, em, plan, over))
            st.balance = ledger.end_balance[:, 0, -1].copy()
            st.dry_before = ledger.dry[:, 0, -1].copy()
            st.committed = _committed_from(plan[0], plan[1], problem.dates, ids,
                                           int(known.lock_days))
        if progress is not None:
            progress(f"week {w + 1}/{weeks} from {day0:%Y-%m-%d} done")

    # the window's first lock days have no visits ordered for any policy: the bound keeps
    # them too (emergency visits aside, which it allows on any day)
    window = replace(base, start_date=first, horizon_days=7 * weeks,
                     terminals=terminals.assign(balance_now=start_balance))
    bound_problem = build_problem(window, actual[:, None, :], dates, tail_days=0)
    pf = perfect_foresight(bound_problem, anyday_fee=emergency_fee,
                           plans=bound_problem.mode == "swap")
    bound_parts = _bound_parts(bound_problem, pf, emergency_fee)
    return _collect(state, policies, baselines, pf.cost[:, 0], actual, dates, ids, terminals,
                    treatment, scenario, weeks, naive_forecast, start_balance, bound_parts)


def _bound_parts(problem, pf, emergency_fee: float) -> dict[str, float]:
    """Cost parts, visits and dry days of the plans reaching the bound (swap: exact; top-up:
    the bound is a relaxation without a plan, only its total is known)."""
    if pf.visits is None:
        return {}
    visits, loads = pf.visits[:, 0, :], pf.loads[:, 0, :]
    fee = np.where(problem.allowed, np.minimum(problem.visit_fee, emergency_fee),
                   emergency_fee)
    ledger = simulate(visits, loads, problem.start_balance, problem.demand, problem.limit, fee,
                      problem.rates, problem.mode)
    out = {c: float(getattr(ledger, c).sum()) for c in COST_PARTS}
    out.update(visits=int(visits.sum()), dry_days=int(ledger.dry.sum()),
               shortfall=float(ledger.shortfall.sum()),
               emergency_visits=int((visits & ~problem.allowed).sum()))
    return out


def _past_routine(problem, *, visits: pd.DataFrame, daily_demand=None):
    return past_visits_routine(problem, visits)


def _collect(state, policies, baselines, bound, actual, dates, ids, terminals, treatment,
             scenario, weeks, naive_forecast, start_balance, bound_parts) -> BacktestResult:
    rows, daily, per_terminal, schedules = [], [], [], {}
    bound_total = float(bound.sum())
    depot = terminals["depot"].to_numpy()
    for policy in policies:
        weeks_run = state[policy].weeks
        parts = {c: np.concatenate([getattr(wk.ledger, c)[:, 0, :] for wk in weeks_run], axis=1)
                 for c in ("carry", "handling", "dry_penalty", "shortfall_penalty",
                           "shortfall", "end_balance")}
        parts["visit"] = np.concatenate([wk.ledger.visit for wk in weeks_run], axis=1)
        dry = np.concatenate([wk.ledger.dry[:, 0, :] for wk in weeks_run], axis=1)
        visits = np.concatenate([wk.visits for wk in weeks_run], axis=1)
        emergency = np.concatenate([wk.emergency for wk in weeks_run], axis=1)
        schedules[policy] = (visits, np.concatenate([wk.loads for wk in weeks_run], axis=1),
                             emergency)
        emergency_fees = float(np.where(emergency, parts["visit"], 0.0).sum())
        cost = sum(parts[c] for c in COST_PARTS)
        total = float(cost.sum())
        rows.append({
            "policy": policy, "label": LABELS.get(policy, policy), "total": total,
            **{c: float(parts[c].sum()) for c in COST_PARTS},
            "emergency_fees": emergency_fees,
            "visits": int(visits.sum()), "emergency_visits": int(emergency.sum()),
            "dry_days": int(dry.sum()), "shortfall": float(parts["shortfall"].sum()),
            "crew_overrun_days": int(sum(wk.crew_over for wk in weeks_run)),
            "ratio_to_bound": total / bound_total if bound_total > 0 else np.nan,
        })
        daily.append(pd.DataFrame({
            "policy": policy, "date": dates, "cost": cost.sum(axis=0),
            "visits": visits.sum(axis=0), "emergency_visits": emergency.sum(axis=0),
            "dry_days": dry.sum(axis=0), "end_balance": parts["end_balance"].sum(axis=0)}))
        per_terminal.append(pd.DataFrame({
            "policy": policy, "terminal_id": list(ids), "depot": depot,
            "total": cost.sum(axis=1), "visits": visits.sum(axis=1),
            "emergency_visits": emergency.sum(axis=1), "dry_days": dry.sum(axis=1),
            "bound": bound}))
    table = pd.DataFrame(rows)
    names = [p for p in baselines if p in set(table["policy"])]
    best = table[table["policy"].isin(names)].sort_values("total").iloc[0] if names else None
    table["saving_vs_best_baseline"] = (1.0 - table["total"] / best["total"]
                                        if best is not None else np.nan)
    bound_row = {"policy": "perfect_foresight", "label": "perfect-foresight bound",
                 "total": bound_total, **bound_parts, "ratio_to_bound": 1.0,
                 "saving_vs_best_baseline": (1.0 - bound_total / best["total"]
                                             if best is not None else np.nan)}
    table = pd.concat([table, pd.DataFrame([bound_row])], ignore_index=True)
    planner = table.set_index("policy").loc[PLANNER]
    summary: dict[str, Any] = {
        "scenario": scenario.name, "currency": scenario.currency, "weeks": int(weeks),
        "first_day": f"{dates[0]:%Y-%m-%d}", "last_day": f"{dates[-1]:%Y-%m-%d}",
        "terminals": len(ids), "replenishment": scenario.replenishment,
        "realised_demand": {
            "source": "cleaned demand of the full history (recorded amount on ordinary days; "
                      "estimate on dry, down, gap and outlier days)",
            "days": treatment},
        "start_balances": "balance_now of terminals.csv for every policy",
        "emergency_rule": "after a dry day with no visit planned the next morning, an "
                          "emergency visit fills to the limit at emergency_visit_fee",
        "bound": round(bound_total, 2),
        "planner": {"total": round(float(planner["total"]), 2),
                    "dry_days": int(planner["dry_days"]),
                    "emergency_visits": int(planner["emergency_visits"]),
                    "ratio_to_bound": round(float(planner["ratio_to_bound"]), 4)},
    }
    summary["solver"] = {
        p: {"statuses": {str(k): int(v) for k, v in pd.Series(
                [x[0] for x in state[p].solves]).value_counts().items()},
            "max_gap": round(max(x[1] for x in state[p].solves), 6),
            "time_s": round(sum(x[2] for x in state[p].solves), 1)}
        for p in policies if state[p].solves}
    if best is not None:
        summary["best_baseline"] = {"policy": best["policy"], "total": round(float(best["total"]),
                                                                            2),
                                    "dry_days": int(best["dry_days"])}
        summary["planner"]["ratio_to_best_baseline"] = round(float(planner["total"]
                                                                   / best["total"]), 4)
        summary["planner"]["saving_vs_best_baseline"] = round(
            float(planner["saving_vs_best_baseline"]), 4)
    if naive_forecast:
        naive = table.set_index("policy").loc[PLANNER_NAIVE]
        summary["value_of_forecast"] = {
            "measured_on": "realised demand of the backtest window",
            "naive_total": round(float(naive["total"]), 2),
            "champion_total": round(float(planner["total"]), 2),
            "saving": round(float(naive["total"] - planner["total"]), 2),
            "saving_share": round(float(1.0 - planner["total"] / naive["total"]), 4)
            if naive["total"] else 0.0,
            "naive_dry_days": int(naive["dry_days"]),
        }
    summary["headline"] = _headline(summary)
    return BacktestResult(table=table, daily=pd.concat(daily, ignore_index=True),
                          terminals=pd.concat(per_terminal, ignore_index=True), demand=actual,
                          dates=dates, terminal_ids=ids, start_balance=start_balance,
                          schedules=schedules, summary=summary)


def _count(n: float, word: str) -> str:
    """``n word`` with the plural where it belongs ("1 dry day", "2.5 dry days")."""
    text = f"{n:g}" if isinstance(n, (int, float)) else str(n)
    return f"{text} {word if text == '1' else word + 's'}"


def _headline(s: dict[str, Any]) -> list[str]:
    cur = s["currency"]
    p = s["planner"]
    out = [f"Backtest {s['first_day']} … {s['last_day']} ({_count(s['weeks'], 'week')}, "
           f"{_count(s['terminals'], 'terminal')}): planner {p['total']:,.0f} {cur}, "
           f"{_count(p['dry_days'], 'dry day')}, "
           f"{_count(p['emergency_visits'], 'emergency visit')}."]
    if "best_baseline" in s:
        b = s["best_baseline"]
        out.append(f"Best baseline {b['policy']}: {b['total']:,.0f} {cur}, "
                   f"{_count(b['dry_days'], 'dry day')}; planner / baseline = "
                   f"{p['ratio_to_best_baseline']:.3f} "
                   f"(saving {p['saving_vs_best_baseline']:.1%}).")
    out.append(f"Perfect-foresight bound {s['bound']:,.0f} {cur}; planner / bound = "
               f"{p['ratio_to_bound']:.3f}.")
    if "value_of_forecast" in s:
        v = s["value_of_forecast"]
        out.append(f"Value of the forecast: planning from seasonal naive paths costs "
                   f"{v['naive_total']:,.0f} {cur} and "
                   f"{_count(v['naive_dry_days'], 'dry day')}; the "
                   f"champion models' plans cost {v['saving_share']:.1%} less "
                   f"({v['saving']:,.0f} {cur}), on the realised demand.")
    return out


def write_backtest(writer, result: BacktestResult, *, prefix: str = "backtest") -> None:
    """Write the backtest into a run folder (:class:`planner.runfolder.RunFolderWriter`):
    ``<prefix>.csv`` (policy table), ``<prefix>_daily.csv``, ``<prefix>_terminals.csv``,
    ``<prefix>.json`` (summary) and ``<prefix>.png`` (chart)."""
    from planner.report.cost_charts import backtest_chart

    writer.write_csv(f"{prefix}.csv", rounded(result.table))
    writer.write_csv(f"{prefix}_daily.csv", rounded(result.daily))
    writer.write_csv(f"{prefix}_terminals.csv", rounded(result.terminals))
    writer.write_json(f"{prefix}.json", result.summary)
    writer.write_with(f"{prefix}.png", lambda path: backtest_chart(result, path))


