"""``report.html``: one self-contained page that explains a planning run.

The page has no script, no web font and no external resource: charts are embedded as
``data:`` URIs (SVG for network charts, small PNG per terminal), styles are inline, and the
only links point inside the page. It prints on A4 with one page break per section.

Sections (their ``id`` in brackets): cautions (``cautions``), network summary (``summary``),
visits per depot and day against the crews (``crews``), cash to order per depot and day
(``cash-orders``), the day-by-day plan per depot (``depot-plans``), one compact figure per
terminal (``terminals``), data quality (``data-quality``), forecast accuracy
(``forecast-accuracy``), and when their results are given: statistical diagnostics
(``diagnostics``), backtest (``backtest``) and what-if variants (``what-if``); last, how the
plan was made (``method``).
"""
from __future__ import annotations

import html
from importlib import resources
import math
import re
from dataclasses import dataclass
from typing import Any, Iterable, Sequence

import numpy as np
import pandas as pd

from planner.costs import PART_COLUMNS, PERIODS, period_totals
from planner.forecast.models import model_label
from planner.report import charts
from planner.report.extras import (Evaluation, as_backtest, as_comparison, as_diagnostics,
                                   as_evaluation)
from planner.report.palette import NEUTRALS, OKABE_ITO, ROLE
from planner.report.wording import CAUTIONS, PART_LABELS

HISTORY_DAYS = 56      # history shown per terminal chart (8 weeks)


@dataclass(frozen=True)
class Section:
    """One section of the page: its anchor id, heading and HTML body."""

    id: str
    title: str
    body: str


# ---------------------------------------------------------------------------------------------
# Public entry points
# ---------------------------------------------------------------------------------------------


def write_report(run: Any, writer: Any, *, evaluation: Any = None, diagnostics: Any = None,
                 backtest: Any = None, comparison: Any = None,
                 name: str = "report.html") -> int:
    """Write ``report.html`` for a :class:`planner.pipeline.PlanRun` into a run folder.

    ``writer`` is a :class:`planner.runfolder.RunFolderWriter`. The optional results (also
    read from attributes of the same names on ``run`` when not given) add their sections:
    ``evaluation`` (expected cost of baseline routines and the perfect-foresight bound on the
    same demand paths), ``diagnostics`` (statistical tests per terminal), ``backtest`` (replay
    of past weeks), ``comparison`` (what-if variants). See :mod:`planner.report.extras` for the
    shapes accepted. Returns the size of the file in bytes.
    """
    text = render_report(run, evaluation=evaluation, diagnostics=diagnostics,
                         backtest=backtest, comparison=comparison)
    data = text.encode("utf-8")
    writer.write_bytes(name, data)
    return len(data)


def render_report(run: Any, *, evaluation: Any = None, diagnostics: Any = None,
                  backtest: Any = None, comparison: Any = None) -> str:
    """The report of a planning run as one HTML document (a string)."""
    ctx = _Context(run)
    evaluation = as_evaluation(evaluation if evaluation is not None
                               else getattr(run, "evaluation", None))
    diagnostics = as_diagnostics(diagnostics if diagnostics is not None
                                 else getattr(run, "diagnostics", None),
                                 chart_ids={ctx.terminal_ids[i] for i in ctx.charted})
    backtest = as_backtest(backtest if backtest is not None else getattr(run, "backtest", None))
    comparison = as_comparison(comparison if comparison is not None
                               else getattr(run, "comparison", None))
    sections = [
        _cautions_section(),
        _summary_section(ctx, evaluation),
        _crew_section(ctx),
        _orders_section(ctx),
        _depot_plan_section(ctx),
        _terminal_section(ctx),
        _quality_section(ctx),
        _accuracy_section(ctx),
    ]
    if diagnostics is not None:
        sections.append(_diagnostics_section(ctx, diagnostics))
    if backtest is not None:
        sections.append(_backtest_section(ctx, backtest))
    if comparison is not None:
        sections.append(_comparison_section(ctx, comparison))
    sections.append(_method_section(ctx))
    return _page(ctx, [s for s in sections if s is not None])


# ---------------------------------------------------------------------------------------------
# What every section reads from the run, computed once
# ---------------------------------------------------------------------------------------------


class _Context:
    """The run's figures in the shapes the sections need (horizon days only)."""

    def __init__(self, run: Any):
        self.run = run
        self.scenario = run.scenario
        self.summary: dict[str, Any] = dict(run.summary or {})
        self.currency = str(getattr(self.scenario, "currency", "") or "")
        self.target = float(getattr(self.scenario, "max_dry_probability", np.nan))
        problem, result = run.problem, run.result
        self.problem, self.result = problem, result
        self.terminal_ids = list(problem.terminal_ids)
        self.depots = list(problem.depots)
        self.horizon = int(problem.horizon_days)
        self.dates = pd.DatetimeIndex(problem.dates[: self.horizon])
        self.depot_of = np.asarray(problem.depot_of, dtype=int)
        terminals = self.scenario.terminals
        self.site = {t: str(terminals["site"].get(t, "")) if "site" in terminals else ""
                     for t in self.terminal_ids}
        self.visits = np.asarray(result.visits, dtype=bool)[:, : self.horizon]
        self.loads = np.asarray(result.loads, dtype=float)[:, : self.horizon]
        self.crew_limit = np.asarray(problem.crew_limit)[:, : self.horizon]
        used = np.zeros((len(self.depots), self.horizon), dtype=int)
        np.add.at(used, self.depot_of, self.visits.astype(int))
        self.crew_used = used
        self.committed = (np.asarray(problem.committed)[:, : self.horizon]
                          if hasattr(problem, "committed") else np.zeros_like(self.visits))
        self.dry_probability = np.asarray(result.dry_probability, dtype=float)
        self.notes = list(result.notes) if getattr(result, "notes", None) is not None \
            else [""] * len(self.terminal_ids)
        ledger = getattr(result, "ledger", None)
        self.ledger = ledger
        if ledger is not None:
            end = np.asarray(ledger.end_balance)[:, :, : self.horizon]
            q = np.quantile(end, [0.05, 0.25, 0.5, 0.75, 0.95], axis=1)   # [5, T, H]
            self.balance_q = q
            dry = np.asarray(ledger.dry, dtype=bool)[:, :, : self.horizon]
            self.dry_day = dry.mean(axis=1)                                   # [T, H]
            self.dry_cum = np.logical_or.accumulate(dry, axis=2).mean(axis=1)  # [T, H]
        else:
            self.balance_q = self.dry_day = self.dry_cum = None
        self.plan = run.plan.copy()
        self.plan["date"] = pd.to_datetime(self.plan["date"])
        self.orders = run.orders.copy()
        self.orders["date"] = pd.to_datetime(self.orders["date"])
        self.costs = run.costs
        self.slugs = _unique_slugs(self.terminal_ids, "terminal")
        self.depot_slugs = _unique_slugs(self.depots, "plan")
        self.charted = _charted_terminals(self)

    def money(self, value: Any, decimals: int = 0) -> str:
        return _money(value, decimals)


MAX_TERMINAL_CHARTS = 120   # beyond this the page grows past ~3 MB and takes minutes to draw


def _charted_terminals(ctx: "_Context") -> set[int]:
    """Terminals that get a chart: all of them up to :data:`MAX_TERMINAL_CHARTS`; in a larger
    network those with a note or over the dry-risk target first, then by dry risk and by cash
    loaded (every terminal stays in the day-by-day tables, plan.csv and plan.xlsx)."""
    count = len(ctx.terminal_ids)
    if count <= MAX_TERMINAL_CHARTS:
        return set(range(count))
    over = ctx.dry_probability > ctx.target + 1e-12
    noted = np.array([bool(n) for n in ctx.notes])
    loaded = ctx.loads.sum(axis=1)
    order = sorted(range(count), key=lambda i: (not (over[i] or noted[i]),
                                                -ctx.dry_probability[i], -loaded[i]))
    return set(order[:MAX_TERMINAL_CHARTS])


# ---------------------------------------------------------------------------------------------
# Sections
# ---------------------------------------------------------------------------------------------


def _cautions_section() -> Section:
    items = "".join(f"<li>{esc(c)}</li>" for c in CAUTIONS)
    return Section("cautions", "Before you use this plan",
                   f'<div class="cautions"><ul>{items}</ul></div>')


def _summary_section(ctx: _Context, evaluation: Evaluation | None) -> Section:
    s = ctx.summary
    network = s.get("network", {})
    service = s.get("service", {})
    solver = s.get("solver", {})
    result = ctx.result
    load_total = float(ctx.plan["load"].sum()) if len(ctx.plan) else 0.0
    back_total = float(ctx.plan["expected_residual"].sum()) \
        if "expected_residual" in ctx.plan and len(ctx.plan) else 0.0
    over = int((ctx.dry_probability > ctx.target + 1e-12).sum())
    figures = [
        ("Terminals", _int(len(ctx.terminal_ids))),
        ("Depots", _int(len(ctx.depots))),
        ("First planning day", _date_long(ctx.dates[0]) if len(ctx.dates) else "—"),
        ("Horizon", f"{ctx.horizon} days (and a look-ahead of {s.get('tail_days', '—')} days, "
                    "planned so that the horizon ends well, not committed)"),
        ("Replenishment", esc(str(getattr(ctx.scenario, "replenishment", "")))),
        ("Visits planned in the horizon", _int(network.get("visits", len(ctx.plan)))),
        ("Cash to load in the horizon", _money_cur(load_total, ctx.currency)),
        ("Expected cash returned at those visits", _money_cur(back_total, ctx.currency)),
    ]
    key = _kv_table(figures, "key-figures")

    by_period = period_totals(ctx.costs)
    parts = [c for c in PART_COLUMNS if c in by_period["horizon"]]
    sums = by_period["horizon"]
    total = sums["total"]
    window = sum(by_period[p]["total"] for p in PERIODS)
    best = evaluation.best_baseline() if evaluation is not None else None
    fresh = evaluation.plan() if evaluation is not None else None
    head = [f"cost part ({esc(ctx.currency)})", "horizon", "share", "look-ahead"]
    if best is not None and fresh is not None:
        # the baseline is priced on fresh paths, so compare it with the plan on those paths
        head += ["plan, fresh paths", "best baseline", "difference"]
    rows = []
    labels = [*(esc(PART_LABELS.get(p, p.replace("_", " "))) for p in parts),
              "of which the horizon", "of which the look-ahead"]
    keys = [*parts, "horizon_total", "look_ahead_total"]
    for label, p in zip(labels, keys):
        if p in parts:
            cells = [label, _money(sums[p]), _pct(sums[p] / total) if total else "—",
                     _money(by_period["look_ahead"][p])]
        elif best is None or fresh is None:
            continue
        else:
            cells = [label, "", "", ""]
        if best is not None and fresh is not None:
            b, f = best.get(p), fresh.get(p)
            cells += [_money(f) if f is not None else "—",
                      _money(b) if b is not None else "—",
                      _money(f - b, signed=True) if b is not None and f is not None else "—"]
        rows.append(cells)
    caption = (f"Expected cost, mean over the demand paths the plan was made from: the horizon "
               f"(the {ctx.horizon} days the plan lists; its visit fees are those of plan.csv) "
               f"and the look-ahead after it ({s.get('tail_days', '—')} days planned so that "
               f"the horizon ends well; not committed), {_money_cur(window, ctx.currency)} "
               "together")
    if fresh is not None:
        caption += ("; the last columns price the plan and the best baseline routine ("
                    f"{esc(best['name']) if best is not None else '—'}) over the whole window "
                    "on fresh demand paths drawn with an independent seed")
    cost_table = _table(head, rows, numeric=range(1, len(head)), row_classes=[
        "total" if p == "total" else "" for p in keys if p in parts or fresh is not None],
        caption=caption + ".")

    compare = ""
    if evaluation is not None:
        compare = _evaluation_block(ctx, evaluation,
                                    float(fresh["total"]) if fresh is not None else window)

    worst = float(ctx.dry_probability.max()) if ctx.dry_probability.size else 0.0
    oos = s.get("out_of_sample") or {}
    calibration = s.get("calibration") or {}
    rows = [
        ("Service target (per visit: the chance of running dry before the next visit)",
         _pct(ctx.target)),
    ]
    if oos:
        rows += [
            (f"Terminals over the target on {oos.get('paths', 0):,} fresh paths (more than two "
             "standard errors above it)", _flag_count(oos.get("terminals_over_target", 0))),
            ("Mean cycle dry risk on fresh paths", _pct(float(oos.get("mean_dry_probability",
                                                                       math.nan)))),
        ]
    rows += [
        ("Terminals over the target on the plan's own paths",
         _flag_count(service.get("terminals_over_target", over))),
        ("Highest cycle dry risk of a terminal (own paths)", _risk(worst, ctx.target)),
    ]
    if calibration:
        rows.append(("Calibration (validate, tighten, re-solve)",
                     esc(f"{calibration.get('terminals_tightened', 0)} terminal(s) tightened in "
                         f"{calibration.get('rounds', 0)} round(s), cost "
                         f"{100 * float(calibration.get('cost_increase', 0.0)):+.2f} %")))
    risk = _kv_table(rows + [
        ("Mean dry risk over terminals (worst cycle each)",
         _pct(float(ctx.dry_probability.mean()) if ctx.dry_probability.size else 0.0)),
        ("Expected dry days in the horizon (all terminals)",
         f"{float(ctx.dry_day.sum()):,.2f}" if ctx.dry_day is not None else "—"),
    ], "dry-risk")
    gap = solver.get("gap", getattr(result, "gap", math.nan))
    bound = solver.get("bound", getattr(result, "bound", math.nan))
    solve = _kv_table([
        ("Solver status", _status(str(solver.get("status", getattr(result, "status", ""))))),
        ("Solver", esc(str(solver.get("name", getattr(result, "solver", ""))))),
        ("Expected cost of the plan (objective: horizon and look-ahead)",
         _money_cur(solver.get("objective", getattr(result, "objective", math.nan)),
                    ctx.currency)),
        ("Best lower bound", _money_cur(bound, ctx.currency) if _finite(bound)
         else "none proven"),
        ("Optimality gap", _pct(gap, 3) if _finite(gap) else "unknown (no bound)"),
        ("Solve time", f"{float(solver.get('time_s', getattr(result, 'time_s', 0.0))):,.1f} s"),
    ], "solver")

    notes = [(t, n) for t, n in zip(ctx.terminal_ids, ctx.notes) if n]
    notes_html = ""
    if notes:
        notes_html = ("<h3>Terminals whose target cannot be met</h3>" + _table(
            ["terminal", "why"], [[_term_link(ctx, t), esc(n)] for t, n in notes]))
    warnings = list(s.get("warnings", [])) + [f"forecast: {f}" for f in
                                              s.get("forecast", {}).get("fallbacks", [])]
    warn_html = ""
    if warnings:
        warn_html = ("<h3>Notices about the input</h3><ul class='notices'>"
                     + "".join(f"<li>{esc(w)}</li>" for w in warnings) + "</ul>")
    body = (
        '<div class="grid2"><div><h3>Key figures</h3>' + key + "</div>"
        '<div><h3>Dry risk</h3>' + risk + _advice(ctx) + "<h3>Solver</h3>" + solve
        + "</div></div>"
        "<h3>Expected cost and its parts</h3>" + cost_table + compare + notes_html + warn_html)
    return Section("summary", "Network summary", body)


def _evaluation_block(ctx: _Context, ev: Evaluation, plan_total: float) -> str:
    table = ev.table
    rows, names, totals = [], [], []
    for _, r in table.iterrows():
        total = float(r["total"])
        diff = total - plan_total
        rows.append([esc(r["name"]), esc(r["kind"]), _money(total),
                     *(_money(r.get(f"{p}_total")) if _finite(r.get(f"{p}_total")) else "—"
                       for p in PERIODS),
                     _money(diff, signed=True) if r["kind"] != "plan" else "—",
                     _pct(diff / total) if r["kind"] != "plan" and total else "—",
                     _pct(r["dry_probability"]) if "dry_probability" in table
                     and _finite(r.get("dry_probability")) else "—"])
        names.append(str(r["name"]))
        totals.append(total)
    plan_name = next((n for n, k in zip(names, table["kind"]) if k == "plan"), None)
    fig = charts.routine_cost_chart(names, totals, highlight=plan_name,
                                    title=f"expected cost ({ctx.currency})")
    best = ev.best_baseline()
    lead = ""
    if best is not None:
        saving = float(best["total"]) - plan_total
        share = saving / float(best["total"]) if float(best["total"]) else math.nan
        lead = (f"<p class='lead'>Against the best baseline routine, <b>{esc(best['name'])}</b>,"
                f" the plan {'saves' if saving >= 0 else 'costs'} "
                f"<b>{_money_cur(abs(saving), ctx.currency)}</b>"
                f" ({_pct(abs(share))}{' less' if saving >= 0 else ' more'}) on the same demand"
                " paths, over the whole planned window (horizon and look-ahead).</p>")
    note = f"<p class='note'>{esc(ev.note)}</p>" if ev.note else ""
    return ("<h3 id='against-baselines'>Against baseline routines</h3>" + lead + _figure(
        charts.svg_data_uri(fig), "Expected cost of the plan, the baseline routines and the "
        "perfect-foresight bound") + _table(
        ["routine", "kind", f"whole window ({esc(ctx.currency)})", "horizon", "look-ahead",
         "more than the plan", "plan saves", "dry risk"], rows, numeric=range(2, 8),
        caption="Expected cost on fresh demand paths: the whole planned window, and its "
                "horizon and look-ahead apart (the bound only whole: its cycles cross the "
                "horizon's end).") + note)


def _crew_section(ctx: _Context) -> Section:
    fig = charts.crew_chart(ctx.depots, ctx.dates, ctx.crew_used, ctx.crew_limit)
    head = ["day"] + [esc(d) for d in ctx.depots]
    rows, classes = [], []
    for j, day in enumerate(ctx.dates):
        cells = [_date_short(day)]
        for k in range(len(ctx.depots)):
            used, limit = int(ctx.crew_used[k, j]), int(ctx.crew_limit[k, j])
            mark = " <span class='tag'>full</span>" if limit and used >= limit else ""
            cells.append(f"{used} of {limit}{mark}")
        rows.append(cells)
        classes.append("weekend" if day.weekday() >= 5 else "")
    totals = ["<b>horizon</b>"] + [f"<b>{int(ctx.crew_used[k].sum())} of "
                                   f"{int(ctx.crew_limit[k].sum())}</b>"
                                   for k in range(len(ctx.depots))]
    rows.append(totals)
    classes.append("total")
    body = (_p("Visits planned per depot and day against the crews available (crew limit). "
               "A hatched bar and the word <i>full</i> mark days on which every crew is used.")
            + _figure(charts.svg_data_uri(fig), "Visits per depot and day against the crew "
                      "limit")
            + _table(head, rows, numeric=range(1, len(head)), row_classes=classes,
                     caption="Visits planned of crews available, per depot and day."))
    return Section("crews", "Visits per depot and day against the crews", body)


def _orders_section(ctx: _Context) -> Section:
    k, h = len(ctx.depots), ctx.horizon
    load = np.zeros((k, h))
    back = np.zeros((k, h))
    pos = {d: i for i, d in enumerate(ctx.depots)}
    day_pos = {pd.Timestamp(d): j for j, d in enumerate(ctx.dates)}
    for _, r in ctx.orders.iterrows():
        i, j = pos.get(r["depot"]), day_pos.get(pd.Timestamp(r["date"]))
        if i is None or j is None:
            continue
        load[i, j] += float(r.get("load_total", 0.0))
        back[i, j] += float(r.get("expected_returns", 0.0))
    fig = charts.orders_chart(ctx.depots, ctx.dates, load, back)
    sub = "".join("<th class='num'>to load</th><th class='num'>back (expected)</th>"
                  for _ in ctx.depots)
    thead = ("<thead><tr><th rowspan='2'>day</th>"
             + "".join(f"<th class='num' colspan='2'>{esc(d)}</th>" for d in ctx.depots)
             + "<th class='num' rowspan='2'>all depots: to load</th></tr>"
             f"<tr>{sub}</tr></thead>")
    trs = []
    for j, day in enumerate(ctx.dates):
        cells = "".join(f"<td class='num'>{_money(load[i, j])}</td>"
                        f"<td class='num'>{_money(back[i, j])}</td>" for i in range(k))
        cls = " class='weekend'" if day.weekday() >= 5 else ""
        trs.append(f"<tr{cls}><td class='day'>{_date_short(day)}</td>{cells}"
                   f"<td class='num'>{_money(load[:, j].sum())}</td></tr>")
    cells = "".join(f"<td class='num'>{_money(load[i].sum())}</td>"
                    f"<td class='num'>{_money(back[i].sum())}</td>" for i in range(k))
    trs.append(f"<tr class='total'><td>horizon</td>{cells}"
               f"<td class='num'>{_money(load.sum())}</td></tr>")
    table = f"<table class='orders'>{thead}<tbody>{''.join(trs)}</tbody></table>"
    body = (_p(f"Cash each depot must have ready per day for the visits of the plan, and the "
               f"cash expected back from the machines (mean over the demand paths), in "
               f"{esc(ctx.currency)}. Cash orders are usually placed at least a day before "
               f"loading.")
            + _figure(charts.svg_data_uri(fig), "Cash to load and expected returns per depot "
                      "and day")
            + table)
    return Section("cash-orders", "Cash to order per depot and day", body)


def _depot_plan_section(ctx: _Context) -> Section:
    plan = ctx.plan
    intro = _p(
        "The plan day by day for each depot: which terminals a crew visits, the cash it loads, "
        "the cash expected back from the machine (the residual, mean over the demand paths), "
        "the dry risk (share of demand paths on which the terminal runs dry before its next "
        "visit; for a terminal's last visit in the horizon, until the end of the days "
        "planned, which reach past the horizon) and why the visit is planned. "
        "<span class='over-key'>▲ over target</span> marks a dry risk above the service "
        f"target of {_pct(ctx.target)}.")
    blocks = []
    by_depot = {d: g for d, g in plan.groupby("depot", sort=False)} if len(plan) else {}
    for k, depot in enumerate(ctx.depots):
        rows = by_depot.get(depot, plan.iloc[0:0])
        by_day = {pd.Timestamp(d): g for d, g in rows.groupby("date", sort=True)}
        bodies = []
        for j, day in enumerate(ctx.dates):
            g = by_day.get(pd.Timestamp(day))
            used, limit = int(ctx.crew_used[k, j]), int(ctx.crew_limit[k, j])
            if g is None or g.empty:
                bodies.append(
                    f"<tbody class='day empty'><tr class='dayhead'><th colspan='6'>"
                    f"{_date_long(day)} <span class='muted'>· no visits · "
                    f"{_count(limit, 'crew')} available</span></th></tr></tbody>")
                continue
            total_load = float(g["load"].sum())
            head = (f"<tr class='dayhead'><th colspan='6'>{_date_long(day)} "
                    f"<span class='muted'>· {_count(used, 'visit')} · "
                    f"{_count(limit, 'crew')} available · cash to load "
                    f"{_money_cur(total_load, ctx.currency)}</span>"
                    f"</th></tr>")
            trs = []
            for _, r in g.sort_values("terminal_id").iterrows():
                tid = str(r["terminal_id"])
                trs.append(
                    "<tr>"
                    f"<td>{_term_link(ctx, tid)}<div class='muted small'>"
                    f"{esc(ctx.site.get(tid, ''))}</div></td>"
                    f"<td class='num'>{_money(r['load'])}</td>"
                    f"<td class='num'>{_money(r.get('expected_residual', math.nan))}</td>"
                    f"<td class='num'>{_risk(r.get('dry_probability', math.nan), ctx.target)}"
                    "</td>"
                    f"<td colspan='2'>{esc(str(r.get('reason', '')))}</td></tr>")
            bodies.append(f"<tbody class='day'>{head}{''.join(trs)}</tbody>")
        thead = ("<thead><tr><th>terminal</th><th class='num'>load</th>"
                 "<th class='num'>expected residual</th><th class='num'>dry risk</th>"
                 "<th colspan='2'>reason</th></tr></thead>")
        blocks.append(
            f"<div class='depot' id='{ctx.depot_slugs[k]}'><h3>Depot {esc(depot)}</h3>"
            f"<table class='plan'>{thead}{''.join(bodies)}</table></div>")
    toc = " · ".join(f"<a href='#{ctx.depot_slugs[k]}'>{esc(d)}</a>"
                     for k, d in enumerate(ctx.depots))
    return Section("depot-plans", "The plan day by day, per depot",
                   intro + f"<p class='screen-only'>Depots: {toc}</p>" + "".join(blocks))


def _terminal_section(ctx: _Context) -> Section:
    run = ctx.run
    history = _history_by_terminal(run.clean, ctx.dates[0] if len(ctx.dates) else None)
    fans = _fan_by_terminal(run.forecast, ctx.dates)
    champion = getattr(run.forecast, "champion", None)
    limits = ctx.problem.limit
    costs = ctx.costs.set_index("terminal_id") if "terminal_id" in ctx.costs else None
    order = sorted(ctx.charted, key=lambda i: (ctx.depot_of[i], ctx.terminal_ids[i]))
    painter = charts.TerminalChart()
    cards = []
    for i in order:
        tid = ctx.terminal_ids[i]
        model = ""
        if champion is not None and tid in champion.index and "model" in champion:
            model = str(champion.loc[tid, "model"])
        balance = None
        if ctx.balance_q is not None:
            balance = {n: ctx.balance_q[j, i] for j, n in
                       enumerate(("q05", "q25", "q50", "q75", "q95"))}
        fig = painter.draw(
            history=history.get(tid), fan=fans.get(tid), balance=balance, dates=ctx.dates,
            visits=ctx.visits[i], loads=ctx.loads[i], limit=float(limits[i]),
            dry_day=None if ctx.dry_day is None else ctx.dry_day[i],
            dry_cum=None if ctx.dry_cum is None else ctx.dry_cum[i],
            target=ctx.target)
        uri = charts.png_data_uri(fig, charts.TERMINAL_DPI)
        n_visits = int(ctx.visits[i].sum())
        facts = [
            f"{n_visits} visit{'s' if n_visits != 1 else ''}, "
            f"{_money_cur(ctx.loads[i].sum(), ctx.currency)} loaded",
            f"worst cycle dry risk {_risk(ctx.dry_probability[i], ctx.target)}",
        ]
        if costs is not None and tid in costs.index and "total" in costs:
            own = costs.loc[[tid]].set_index("period")["total"]
            facts.append(f"expected cost {_money_cur(own['horizon'], ctx.currency)} in the "
                         f"horizon ({_money_cur(own['look_ahead'], ctx.currency)} in the "
                         "look-ahead)")
        if model:
            facts.append(f"forecast model {esc(model_label(model))}")
        note = (f"<p class='note'>{esc(ctx.notes[i])}</p>" if ctx.notes[i] else "")
        cards.append(
            f"<article class='terminal' id='{ctx.slugs[i]}'>"
            f"<h3>{esc(tid)} <span class='muted'>· {esc(ctx.depots[ctx.depot_of[i]])}"
            f"{(' · ' + esc(ctx.site[tid])) if ctx.site.get(tid) else ''}</span></h3>"
            f"<p class='facts'>{' · '.join(facts)}</p>{note}"
            f"<img class='tchart' src='{uri}' alt='Demand, balance and dry risk of "
            f"{esc(tid)}' width='720' height='180'></article>")
    width, height = (round(v * charts.TERMINAL_DPI) for v in charts.TERMINAL_SIZE_IN)
    cards = [c.replace("width='720' height='180'", f"width='{width}' height='{height}'")
             for c in cards]
    key = _figure(charts.png_data_uri(charts.terminal_key_chart(), 100),
                  "Key to the terminal charts")
    legend = _p(
        "Each terminal in one figure. <b>Left</b>: demand per day — the last "
        f"{HISTORY_DAYS // 7} weeks of history (black line: dispensed; open orange circle: "
        "cleaned value where it differs; triangle: dry day, the amount is a lower bound; "
        "cross: out of service; bar: no record; diamond: outlier) and the forecast over the "
        "horizon (dashed median, 80 % and 90 % bands). <b>Middle</b>: cash in the machine at "
        "the end of each day over the demand paths (median line, 25–75 % and 5–95 % bands); "
        "a triangle marks a visit at the level of its load, the dash-dotted line the limit "
        "(capacity or insurance, whichever is lower). <b>Right</b>: dry risk — hatched bars "
        "show the share of demand paths dry on that day, the step line the share dry at least "
        "once so far, the dashed line the service target.")
    if len(ctx.charted) < len(ctx.terminal_ids):
        legend += _p(f"Charts for {len(ctx.charted)} of {len(ctx.terminal_ids)} terminals: those "
                     "over the dry-risk target or with a note first, then by dry risk and by "
                     "cash loaded. Every terminal's visits are in the day-by-day tables above, "
                     "in plan.csv and in plan.xlsx.")
    return Section("terminals", "Terminals", legend + key + "".join(cards))


def _advice(ctx: _Context) -> str:
    """The terminals over the target on fresh paths, each with what the user can do (the
    lines the terminal prints too, :meth:`planner.pipeline.PlanRun.advice`)."""
    advice = getattr(ctx.run, "advice", None)
    lines = advice() if callable(advice) else []
    if not lines:
        return ""
    return (_p("<b>Over the target on fresh paths</b> (an estimate more than two standard "
               "errors above it; with 500 paths about half the terminals of a plan sitting "
               "exactly at the target would look over it, so the check uses thousands):")
            + "<ul>" + "".join(f"<li>{esc(line)}</li>" for line in lines) + "</ul>")


def _quality_section(ctx: _Context) -> Section:
    summary = getattr(ctx.run.clean, "summary", None)
    if summary is None or len(summary) == 0:
        return Section("data-quality", "Data quality", _p("No history was cleaned."))
    frame = summary.reset_index()
    if "terminal_id" not in frame:
        frame = frame.rename(columns={frame.columns[0]: "terminal_id"})
    cols = [("days", "days"), ("gaps", "no record"), ("down", "out of service"),
            ("dry", "dry (censored)"), ("outliers", "outliers"), ("changed", "changed")]
    cols = [(c, label) for c, label in cols if c in frame]
    head = ["terminal"] + [label for _, label in cols] + ["first day", "last day",
                                                          f"mean demand ({esc(ctx.currency)})"]
    rows = []
    for _, r in frame.iterrows():
        tid = str(r["terminal_id"])
        cells = [_term_link(ctx, tid)]
        for c, _ in cols:
            v = r[c]
            share = (float(v) / float(r["days"])) if "days" in frame and float(r["days"] or 0) \
                else 0.0
            text = _int(v)
            cells.append(f"<span class='tag'>{text}</span>" if c != "days" and share > 0.05
                         else text)
        cells += [_date_iso(r.get("first")), _date_iso(r.get("last")),
                  _money(r.get("mean_daily", math.nan))]
        rows.append(cells)
    body = _p("How complete and clean each terminal's history is. <i>No record</i>: days without "
              "a row; <i>out of service</i>: days marked down; <i>dry</i>: days the machine ran "
              "out, whose amount is only a lower bound of demand; <i>outliers</i>: a modified "
              "z-score beyond 3.5 (Iglewicz &amp; Hoaglin), raised for long series, on the "
              "calendar-adjusted series; <i>changed</i>: days whose cleaned demand differs "
              "from the record. A boxed count exceeds 5 % of the days."
              ) + _table(head, rows, numeric=range(1, len(head)))
    notices = ctx.summary.get("calendar_notices") or []
    if notices:
        body += _p("<b>Calendar effects the history shows and scenario.toml does not "
                   "declare</b> (the forecast does not use them):") + "<ul>" + "".join(
            f"<li>{esc(line)}</li>" for line in notices) + "</ul>"
    return Section("data-quality", "Data quality", body)


def _accuracy_section(ctx: _Context) -> Section | None:
    fc = ctx.run.forecast
    acc = getattr(fc, "accuracy", None)
    champion = getattr(fc, "champion", None)
    if acc is None or len(acc) == 0:
        return None
    measures = [c for c in ("mase", "smape", "pinball_50", "coverage_80", "coverage_95")
                if c in acc]
    labels = {"mase": "MASE", "smape": "sMAPE (%)", "pinball_50": "pinball loss (median)",
              "coverage_80": "80 % interval coverage", "coverage_95": "95 % interval coverage"}
    by_model = acc.groupby("model")[measures].median().sort_values(measures[0]) \
        if measures else pd.DataFrame()
    wins = champion["model"].value_counts() if champion is not None and "model" in champion \
        else pd.Series(dtype=int)
    rows = []
    for model, r in by_model.iterrows():
        rows.append([esc(model_label(model))] + [_measure(c, r[c]) for c in measures]
                    + [_int(wins.get(model, 0))])
    table1 = _table(["model"] + [labels[c] for c in measures] + ["champion of"], rows,
                    numeric=range(1, len(measures) + 2),
                    caption="Median over terminals of the rolling-origin backtest.")
    rows2 = []
    if champion is not None:
        for tid in ctx.terminal_ids:
            if tid not in champion.index:
                continue
            c = champion.loc[tid]
            model = str(c.get("model", ""))
            hit = acc[(acc["terminal_id"] == tid) & (acc["model"] == model)]
            vals = [_measure(m, hit.iloc[0][m]) if len(hit) else "—" for m in measures]
            rows2.append([_term_link(ctx, tid), esc(model_label(model))] + vals
                         + [esc(str(c.get("reason", "")))])
    table2 = _table(["terminal", "champion"] + [labels[c] for c in measures] + ["why chosen"],
                    rows2, numeric=range(2, len(measures) + 2)) if rows2 else ""
    body = (_p("Forecast accuracy by model in the rolling-origin backtest: MASE against the "
               "weekly seasonal naive forecast (below 1 is better than repeating last week), "
               "sMAPE, pinball loss of the median in currency units, and how often the 80 % and "
               "95 % intervals held the actual demand (close to 0.80 and 0.95 is good).")
            + table1 + "<h3>Champion per terminal</h3>" + table2)
    return Section("forecast-accuracy", "Forecast accuracy", body)


def _diagnostics_section(ctx: _Context, diag) -> Section:
    parts = [_p("Statistical checks of each terminal's history and of its forecast model's "
                "residuals (ADF and KPSS for stationarity, Ljung-Box and Breusch-Godfrey for "
                "autocorrelation, Durbin-Watson near 2 means no first-order autocorrelation). "
                "p-values below 0.05 are the usual sign to act on.")]
    if diag.tests is not None and len(diag.tests):
        parts.append(_frame_table(diag.tests, ctx, max_rows=600))
    for title, fig in diag.figures:
        parts.append(_figure(charts.png_data_uri(fig, charts.TERMINAL_DPI), title,
                             small=True))
    for title, uri in diag.images:
        parts.append(_figure(uri, title, small=True))
    return Section("diagnostics", "Statistical diagnostics", "".join(parts))


def _backtest_section(ctx: _Context, bt) -> Section:
    parts = []
    if bt.note:
        parts.append(_p(esc(bt.note)))
    if bt.series is not None:
        x, series, label = bt.series
        parts.append(_figure(charts.svg_data_uri(charts.series_chart(
            x, series, ylabel=f"cost ({ctx.currency})", title=label)), label or "Backtest"))
    for title, frame in bt.tables:
        if title:
            parts.append(f"<h3>{esc(title)}</h3>")
        parts.append(_frame_table(frame, ctx))
    return Section("backtest", "Backtest: replaying past weeks", "".join(parts))


def _comparison_section(ctx: _Context, cmp) -> Section:
    parts = [_p("What-if variants re-planned on the same demand paths, so that differences "
                "come from the settings and not from chance.")]
    if cmp.note:
        parts.append(_p(esc(cmp.note)))
    if cmp.totals is not None:
        names, totals, base = cmp.totals
        parts.append(_figure(charts.svg_data_uri(charts.routine_cost_chart(
            names, totals, highlight=base, title=f"expected cost ({ctx.currency})")),
            "Expected cost per what-if variant"))
    for title, frame in cmp.tables:
        if title:
            parts.append(f"<h3>{esc(title)}</h3>")
        parts.append(_frame_table(frame, ctx))
    return Section("what-if", "What-if variants", "".join(parts))


def _method_section(ctx: _Context) -> Section:
    s = ctx.summary
    paths = s.get("paths", {})
    versions = s.get("versions", {})
    rows = [
        ("Scenario", esc(str(s.get("scenario", getattr(ctx.scenario, "name", ""))))),
        ("Input fingerprint", f"<code>{esc(str(s.get('input_fingerprint', '')))}</code>"),
        ("Demand paths", f"{_int(paths.get('count', ctx.problem.shape[1]))} "
                         f"(seed {esc(str(paths.get('seed', '')))})"),
        ("Method", esc(str(s.get("method", "")))),
        ("Versions", esc(", ".join(f"{k} {v}" for k, v in versions.items()))),
    ]
    body = (_p("Demand is forecast per terminal from its cleaned history; the forecast model "
               "simulates demand paths jointly over the days. The plan chooses visit days and "
               "loads that minimise the expected cost over those paths (sample average "
               "approximation), keeping each terminal's dry risk under the service target and "
               "each depot within its crews. The horizon is planned together with the "
               f"{esc(str(s.get('tail_days', '—')))} days after it, so that the plan does not "
               "look cheap by leaving machines empty at its end or by cutting a machine's "
               "last cycle short; only the horizon is shown. Amounts are in "
               f"{esc(ctx.currency)}. The same seed and input give the same plan.")
            + _kv_table(rows, "method"))
    return Section("method", "How this plan was made", body)


# ---------------------------------------------------------------------------------------------
# Data for the terminal charts
# ---------------------------------------------------------------------------------------------


def _history_by_terminal(clean: Any, first_day: pd.Timestamp | None) -> dict[str, pd.DataFrame]:
    daily = getattr(clean, "daily", None)
    if daily is None or len(daily) == 0:
        return {}
    d = daily
    if first_day is not None:
        d = d[d["date"] >= first_day - pd.Timedelta(days=HISTORY_DAYS)]
    cols = [c for c in ("date", "observed", "demand", "flag", "changed") if c in d]
    return {str(t): g[cols].set_index("date") for t, g in d.groupby("terminal_id", sort=False)}


def _fan_by_terminal(forecast: Any, dates: pd.DatetimeIndex) -> dict[str, pd.DataFrame]:
    q = getattr(forecast, "quantiles", None)
    if q is None or len(q) == 0:
        return {}
    champion = getattr(forecast, "champion", None)
    if "model" in q and champion is not None and "model" in champion:
        chosen = q["terminal_id"].map(champion["model"])
        pick = q["model"] == chosen
        # a terminal without a champion row keeps its first model
        missing = chosen.isna()
        if missing.any():
            first = q[missing].groupby("terminal_id")["model"].transform("first")
            pick = pick | (missing & (q["model"] == first))
        q = q[pick.fillna(False).astype(bool)]
    q = q[q["date"].isin(dates)] if len(dates) else q
    cols = [c for c in ("q05", "q10", "q50", "q90", "q95") if c in q]
    if len(cols) < 5:
        return {}
    return {str(t): g.set_index("date")[cols].sort_index()
            for t, g in q.groupby("terminal_id", sort=False)}


# ---------------------------------------------------------------------------------------------
# HTML pieces
# ---------------------------------------------------------------------------------------------


def esc(value: Any) -> str:
    """Text escaped for HTML (quotes too: values also go into attributes)."""
    return html.escape(str(value), quote=True)


def _p(inner_html: str) -> str:
    return f"<p>{inner_html}</p>"


def _figure(uri: str, caption: str, *, small: bool = False) -> str:
    cls = "chart small" if small else "chart"
    return (f"<figure class='{cls}'><img src='{uri}' alt='{esc(caption)}'>"
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def _table(head: Sequence[str], rows: Iterable[Sequence[str]], *, numeric: Iterable[int] = (),
           row_classes: Sequence[str] | None = None, caption: str | None = None,
           cls: str = "") -> str:
    """A table from pre-escaped HTML cells; ``numeric`` columns are right-aligned."""
    num = set(numeric)
    th = "".join(f"<th class='num'>{h}</th>" if i in num else f"<th>{h}</th>"
                 for i, h in enumerate(head))
    body = []
    for n, row in enumerate(rows):
        rc = row_classes[n] if row_classes is not None and n < len(row_classes) else ""
        tds = "".join(f"<td class='num'>{c}</td>" if i in num else f"<td>{c}</td>"
                      for i, c in enumerate(row))
        body.append(f"<tr class='{rc}'>{tds}</tr>" if rc else f"<tr>{tds}</tr>")
    cap = f"<caption>{esc(caption)}</caption>" if caption else ""
    klass = f" class='{cls}'" if cls else ""
    return f"<table{klass}>{cap}<thead><tr>{th}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _kv_table(rows: Sequence[tuple[str, str]], cls: str) -> str:
    trs = "".join(f"<tr><th scope='row'>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f"<table class='kv {cls}'><tbody>{trs}</tbody></table>"


def _frame_table(frame: pd.DataFrame, ctx: _Context, max_rows: int = 400) -> str:
    """Any result frame as a table: numbers formatted by column name, text escaped."""
    f = frame.reset_index() if not isinstance(frame.index, pd.RangeIndex) else frame
    cols = list(f.columns)
    numeric = [i for i, c in enumerate(cols) if f[c].dtype.kind in "iuf"]
    rows = []
    for _, r in f.head(max_rows).iterrows():
        cells = []
        for c in cols:
            v = r[c]
            if c == "terminal_id":
                cells.append(_term_link(ctx, str(v)))
            elif isinstance(v, (float, np.floating, int, np.integer)) and not isinstance(v, bool):
                cells.append(_auto_number(str(c), v))
            elif isinstance(v, pd.Timestamp):
                cells.append(_date_iso(v))
            else:
                cells.append(esc("" if v is None else v))
        rows.append(cells)
    more = (f"<p class='muted small'>First {max_rows} of {len(f)} rows shown.</p>"
            if len(f) > max_rows else "")
    return _table([esc(str(c).replace("_", " ")) for c in cols], rows, numeric=numeric) + more


def _auto_number(col: str, v: Any) -> str:
    """A number of a result table, formatted by what its column name says it is."""
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "—"
    c = col.lower()
    x = float(v)
    if any(w in c for w in ("probability", "share", "coverage", "saving", "gap")):
        return _pct(x)
    if any(w in c for w in ("ratio", "p_value", "pvalue", "statistic", "mase", "smape",
                            "score")):
        return f"{x:,.3f}"
    if isinstance(v, (int, np.integer)) or (x.is_integer() and any(
            w in c for w in ("visits", "days", "count", "terminals", "weeks"))):
        return f"{int(round(x)):,}"
    if "dry_days" in c:
        return f"{x:,.2f}"
    return _money(x) if abs(x) >= 10 else f"{x:,.3f}"


def _measure(col: str, v: Any) -> str:
    if not _finite(v):
        return "—"
    if col.startswith("coverage"):
        return f"{float(v):.2f}"
    if col == "mase":
        return f"{float(v):.3f}"
    if col == "smape":
        return f"{float(v):.1f}"
    return _money(v)


def _term_link(ctx: _Context, tid: str) -> str:
    try:
        i = ctx.terminal_ids.index(tid)
    except ValueError:
        return esc(tid)
    if i not in ctx.charted:
        return esc(tid)
    return f"<a href='#{ctx.slugs[i]}'>{esc(tid)}</a>"


def _unique_slugs(names: Sequence[str], prefix: str) -> list[str]:
    seen: set[str] = set()
    out = []
    for n in names:
        base = f"{prefix}-" + (re.sub(r"[^A-Za-z0-9_-]+", "-", str(n)).strip("-").lower()
                               or "x")
        slug, k = base, 2
        while slug in seen:
            slug, k = f"{base}-{k}", k + 1
        seen.add(slug)
        out.append(slug)
    return out


def _finite(v: Any) -> bool:
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def _money(v: Any, decimals: int = 0, signed: bool = False) -> str:
    if not _finite(v):
        return "—"
    x = float(v)
    if abs(x) < 0.5 * 10 ** -decimals:
        x = 0.0
    return f"{x:+,.{decimals}f}" if signed else f"{x:,.{decimals}f}"


def _money_cur(v: Any, currency: str) -> str:
    text = _money(v)
    return f"{text} {esc(currency)}" if text != "—" else text


def _pct(v: Any, decimals: int = 1) -> str:
    if not _finite(v):
        return "—"
    return f"{100 * float(v):.{decimals}f} %"


def _int(v: Any) -> str:
    if not _finite(v):
        return "—"
    return f"{int(round(float(v))):,}"


def _count(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _risk(v: Any, target: float) -> str:
    """A dry risk, marked by symbol and shading (never by colour alone) above the target."""
    if not _finite(v):
        return "—"
    text = _pct(v)
    if _finite(target) and float(v) > target + 1e-12:
        return (f"<span class='over' title='above the service target of {_pct(target)}'>"
                f"▲ {text}</span>")
    return text


def _flag_count(v: Any) -> str:
    text = _int(v)
    return f"<span class='over'>▲ {text}</span>" if _finite(v) and float(v) > 0 else text


def _status(status: str) -> str:
    words = {"optimal": "optimal (proven within the gap tolerance)",
             "time_limit": "stopped at the time limit (best plan found; see the gap)",
             "feasible": "feasible (a valid plan; optimality not proven)"}
    text = esc(words.get(status, status))
    return text if status == "optimal" else f"<span class='over'>▲ {text}</span>"


def _date_long(d: Any) -> str:
    return f"{pd.Timestamp(d):%a %d %b %Y}"


def _date_short(d: Any) -> str:
    return f"{pd.Timestamp(d):%a %d %b}"


def _date_iso(d: Any) -> str:
    try:
        if d is None or pd.isna(d):
            return "—"
    except (TypeError, ValueError):
        pass
    return f"{pd.Timestamp(d):%Y-%m-%d}"


# ---------------------------------------------------------------------------------------------
# The page
# ---------------------------------------------------------------------------------------------


def _css() -> str:
    """The page's style: the colours of the palette as custom properties, then page.css."""
    c = {**NEUTRALS, **{k: v for k, v in ROLE.items()}, "blue": OKABE_ITO["blue"]}
    colours = " ".join(f"--{name.replace('_', '-')}: {value};" for name, value in c.items())
    sheet = resources.files("planner.report").joinpath("page.css").read_text(encoding="utf-8")
    return f":root {{ {colours} }}\n{sheet}"


def _page(ctx: _Context, sections: list[Section]) -> str:
    s = ctx.summary
    name = str(s.get("scenario", getattr(ctx.scenario, "name", "")))
    first = _date_long(ctx.dates[0]) if len(ctx.dates) else ""
    last = _date_long(ctx.dates[-1]) if len(ctx.dates) else ""
    toc = " ".join(f"<a href='#{x.id}'>{esc(x.title)}</a>" for x in sections)
    body = "".join(f"<section id='{x.id}'><h2>{esc(x.title)}</h2>{x.body}</section>"
                   for x in sections)
    return (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        "<meta name='viewport' content='width=device-width, initial-scale=1'>"
        "<meta name='referrer' content='no-referrer'>"
        # no resource may be fetched: a favicon request would be the only one otherwise
        "<link rel='icon' href='data:,'>"
        "<meta http-equiv='Content-Security-Policy' content=\"default-src 'none'; "
        "img-src data:; style-src 'unsafe-inline'\">"
        f"<title>Replenishment plan — {esc(name)}</title><style>{_css()}</style></head><body>"
        f"<header><span class='confidential'>Confidential</span>"
        f"<h1>Replenishment plan</h1><p class='sub'>{esc(name)} · {first} to {last} · "
        f"{len(ctx.terminal_ids)} terminals in {len(ctx.depots)} depots · amounts in "
        f"{esc(ctx.currency)}</p></header>"
        f"<nav class='toc' aria-label='Sections'>{toc}</nav>{body}"
        f"<footer>Confidential: this report says when and where cash moves. A person reviews "
        f"the plan before any dispatch. Input fingerprint "
        f"<code>{esc(str(s.get('input_fingerprint', '')))[:16]}</code>.</footer>"
        "</body></html>\n")
