"""The optional results a report can show, read into one small shape each.

The evaluation, the diagnostics, the backtest and the what-if comparison are produced by other
stages; the report accepts their result objects and also plain frames, so that a notebook user
can pass a table of their own:

- **evaluation**: a frame with one row per routine — a name column (``routine``, ``name``,
  ``policy`` or ``variant``), a total column (``total``, ``expected_cost`` or ``cost``),
  optional cost parts (``carry``, ``visit``, ``handling``, ``dry_penalty``,
  ``shortfall_penalty``), optional ``kind`` (``plan``, ``baseline``, ``bound``) and
  ``dry_probability``; or an object holding such a frame (attribute ``table``, ``routines``,
  ``summary``, ``costs``, ``frame``, or a method ``table()``), or a mapping name → total.
  Without ``kind``, a name with "perfect" or "bound" is the bound, a name with "plan" (and
  not "baseline") the plan, every other row a baseline routine.
- **diagnostics**: the mapping terminal id → :class:`planner.diagnostics.Diagnostics` that
  :func:`planner.diagnostics.diagnose_scenario` returns, or its tidy frame (``terminal_id,
  on, test, statistic, p_value, verdict``).
- **backtest** and **comparison**: a frame, a mapping title → frame, or an object whose frame
  attributes are shown as tables (and ``note``/``description`` as text). A frame with a week or
  origin column, a routine column and a cost column also gets a line chart (backtest); a frame
  with a variant column and a total column gets a bar chart (comparison).
"""
from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

PARTS = ("carry", "visit", "handling", "dry_penalty", "shortfall_penalty")
_NAME_COLUMNS = ("routine", "name", "policy", "variant", "label")
_TOTAL_COLUMNS = ("total", "expected_cost", "cost", "objective")
_FRAME_ATTRS = ("table", "routines", "summary", "costs", "frame", "comparison", "results")
_SIGNIFICANCE = 0.05   # common practice


@dataclass(frozen=True)
class Evaluation:
    """``table``: one row per routine with ``name``, ``kind`` (plan | baseline | bound),
    ``total`` and, where known, the cost parts and ``dry_probability``."""

    table: pd.DataFrame
    note: str = ""

    def best_baseline(self) -> dict[str, Any] | None:
        """The cheapest baseline routine as a dict (``name``, ``total``, parts), or None."""
        return self._cheapest("baseline")

    def plan(self) -> dict[str, Any] | None:
        """The plan's row (priced on the same paths as the baselines), or None."""
        return self._cheapest("plan")

    def _cheapest(self, kind: str) -> dict[str, Any] | None:
        rows = self.table[self.table["kind"] == kind]
        if rows.empty:
            return None
        row = rows.loc[rows["total"].astype(float).idxmin()]
        return {k: (v if not isinstance(v, (np.floating,)) else float(v))
                for k, v in row.items() if not (isinstance(v, float) and np.isnan(v))}


@dataclass(frozen=True)
class DiagnosticsView:
    """``tests``: one row per terminal with the readings; ``figures``: (title, Figure);
    ``images``: (title, data URI) of ready-made pictures."""

    tests: pd.DataFrame | None
    figures: list = field(default_factory=list)
    images: list = field(default_factory=list)


@dataclass(frozen=True)
class TablesView:
    """Tables to show (title, frame), an optional chart input and a note."""

    tables: list
    note: str = ""
    series: tuple | None = None     # backtest: (x, {name: values}, title)
    totals: tuple | None = None     # comparison: (names, totals, base name)


def _frame_of(obj: Any) -> pd.DataFrame | None:
    if isinstance(obj, pd.DataFrame):
        return obj
    for attr in _FRAME_ATTRS:
        v = getattr(obj, attr, None)
        if callable(v) and not isinstance(v, pd.DataFrame):
            try:
                v = v()
            except TypeError:
                continue
        if isinstance(v, pd.DataFrame):
            return v
    return None


def _pick(frame: pd.DataFrame, names: tuple[str, ...]) -> str | None:
    lower = {str(c).lower(): c for c in frame.columns}
    for n in names:
        if n in lower:
            return lower[n]
    return None


def _note_of(obj: Any) -> str:
    for attr in ("note", "description", "method"):
        v = getattr(obj, attr, None)
        if isinstance(v, str) and v:
            return v
    return ""


def as_evaluation(obj: Any) -> Evaluation | None:
    """Read an evaluation result (see the module doc); None when there is none."""
    if obj is None:
        return None
    if isinstance(obj, Evaluation):
        return obj
    if isinstance(obj, Mapping) and not isinstance(obj, pd.DataFrame):
        rows = []
        for name, v in obj.items():
            row = dict(v) if isinstance(v, Mapping) else {"total": v}
            rows.append({"name": str(name), **row})
        frame = pd.DataFrame(rows)
    else:
        frame = _frame_of(obj)
        if frame is None:
            return None
    f = frame.reset_index() if _pick(frame, _NAME_COLUMNS) is None else frame
    name_col, total_col = _pick(f, _NAME_COLUMNS), _pick(f, _TOTAL_COLUMNS)
    if name_col is None or total_col is None:
        return None
    label_col = _pick(f, ("label",))
    shown = f[label_col].fillna(f[name_col]) if label_col and label_col != name_col \
        else f[name_col]
    out = pd.DataFrame({"name": shown.astype(str).to_numpy(),
                        "total": pd.to_numeric(f[total_col], errors="coerce").to_numpy()})
    kind_col = _pick(f, ("kind", "type", "role"))
    if kind_col is not None:
        out["kind"] = f[kind_col].astype(str).str.lower().to_numpy()
    else:
        out["kind"] = [_kind(n) for n in f[name_col].astype(str)]
    for p in PARTS + ("horizon_total", "look_ahead_total", "dry_probability"):
        c = _pick(f, (p,))
        if c is not None:
            out[p] = pd.to_numeric(f[c], errors="coerce").to_numpy()
    out = out[np.isfinite(out["total"].astype(float))].reset_index(drop=True)
    order = {"plan": 0, "other": 1, "baseline": 2, "bound": 3}
    out = out.sort_values(["kind", "total"], key=lambda s: s.map(order).fillna(1)
                          if s.name == "kind" else s, kind="stable", ignore_index=True)
    return Evaluation(out, _note_of(obj))


def _kind(name: str) -> str:
    n = name.lower().strip()
    if "perfect" in n or "bound" in n:
        return "bound"
    if n in ("plan", "planner", "the plan", "this plan") or n.startswith("planner ("):
        return "plan"
    if "plan" in n:          # another planner set-up (e.g. on a naive forecast): not a baseline
        return "other"
    return "baseline"


def as_diagnostics(obj: Any, chart_ids: set[str] | None = None) -> DiagnosticsView | None:
    """Read diagnostics (see the module doc) into one row per terminal plus ACF charts
    (only for ``chart_ids`` when given)."""
    if obj is None:
        return None
    if isinstance(obj, DiagnosticsView):
        return obj
    from planner.report import charts

    figures = []
    if isinstance(obj, pd.DataFrame):
        tidy = obj
    elif isinstance(obj, Mapping):
        parts = []
        for tid, d in obj.items():
            table = d.table() if hasattr(d, "table") else None
            if isinstance(table, pd.DataFrame):
                table = table.copy()
                table.insert(0, "terminal_id", str(tid))
                parts.append(table)
            corr = getattr(d, "correlogram", None)
            if chart_ids is not None and str(tid) not in chart_ids:
                corr = None
            if isinstance(corr, pd.DataFrame) and len(corr) and "acf" in corr:
                n = int(getattr(d, "describe", {}).get("n", 0) or 0)
                figures.append((f"{tid}: ACF and PACF of the cleaned demand",
                                charts.correlogram_chart(
                                    corr.index.to_numpy(), corr["acf"].to_numpy(),
                                    corr["pacf"].to_numpy() if "pacf" in corr else None,
                                    n, str(tid))))
        tidy = pd.concat(parts, ignore_index=True) if parts else None
    else:
        tidy = _frame_of(obj)
    return DiagnosticsView(_pivot_tests(tidy) if tidy is not None else None, figures)


def _pivot_tests(tidy: pd.DataFrame) -> pd.DataFrame:
    """One row per terminal: a test with a p-value shows it (with * below 5 %), a test
    without one shows its reading."""
    if not {"terminal_id", "test"} <= set(tidy.columns):
        return tidy
    rows: dict[str, dict[str, str]] = {}
    tests: list[str] = []
    for r in tidy.itertuples(index=False):
        test = str(r.test)
        if test not in tests:
            tests.append(test)
        p = getattr(r, "p_value", np.nan)
        verdict = str(getattr(r, "verdict", ""))
        if p is not None and np.isfinite(float(p)):
            cell = f"p {float(p):.3f}{' *' if float(p) < _SIGNIFICANCE else ''}"
        else:
            cell = verdict
        rows.setdefault(str(r.terminal_id), {})[test] = cell
    frame = pd.DataFrame.from_dict(rows, orient="index").reindex(columns=tests)
    frame.index.name = "terminal_id"
    return frame.fillna("").reset_index()


def _tables_of(obj: Any) -> tuple[list, str]:
    if isinstance(obj, pd.DataFrame):
        return [("", obj)], ""
    if isinstance(obj, Mapping):
        return [(str(k), v) for k, v in obj.items() if isinstance(v, pd.DataFrame)], ""
    tables = []
    names = ([f.name for f in dataclasses.fields(obj)] if dataclasses.is_dataclass(obj)
             else [n for n in vars(obj)] if hasattr(obj, "__dict__") else [])
    for n in names:
        v = getattr(obj, n, None)
        if isinstance(v, pd.DataFrame) and len(v.columns):
            tables.append((n.replace("_", " "), v))
    return tables, _note_of(obj)


BACKTEST_COLUMNS = ("label", "total", "carry", "visit", "handling", "dry_penalty",
                    "shortfall_penalty", "visits", "emergency_visits", "dry_days",
                    "crew_overrun_days", "ratio_to_bound", "saving_vs_best_baseline")
COMPARE_COLUMNS = ("variant", "changes", "expected_cost", "expected_cost_horizon",
                   "expected_cost_look_ahead", "cost_delta", "cost_delta_low",
                   "cost_delta_high", "cost_delta_share", "visits", "load_total", "dry_days",
                   "mean_dry_probability", "terminals_over_target", "status", "gap")


def _headline(obj: Any) -> str:
    summary = getattr(obj, "summary", None)
    lines = summary.get("headline") if isinstance(summary, Mapping) else None
    if isinstance(lines, (list, tuple)):
        return " ".join(str(x) for x in lines)
    return _note_of(obj)


def as_backtest(obj: Any) -> TablesView | None:
    """Read a backtest result (see the module doc); a
    :class:`planner.evaluate.replay.BacktestResult` shows its policy table, the cumulative
    cost per policy over the window and its headline."""
    if obj is None:
        return None
    if isinstance(obj, TablesView):
        return obj
    table, daily = getattr(obj, "table", None), getattr(obj, "daily", None)
    if isinstance(table, pd.DataFrame) and isinstance(daily, pd.DataFrame) \
            and "policy" in table and {"policy", "date", "cost"} <= set(daily.columns):
        labels = dict(zip(table["policy"], table.get("label", table["policy"])))
        wide = daily.pivot_table(index="date", columns="policy", values="cost",
                                 aggfunc="sum").sort_index().cumsum()
        series = (list(wide.index), {str(labels.get(c, c)): wide[c].to_numpy()
                                     for c in wide.columns},
                  "cumulative cost over the window, per policy")
        cols = [c for c in BACKTEST_COLUMNS if c in table]
        tables = [("Policies over the window", table[cols].rename(columns={"label": "policy"}))]
        per_terminal = getattr(obj, "terminals", None)
        if isinstance(per_terminal, pd.DataFrame) and {"policy", "terminal_id", "total"} \
                <= set(per_terminal.columns):
            pivot = per_terminal.pivot_table(index="terminal_id", columns="policy",
                                             values="total", aggfunc="sum")
            pivot.columns = [str(labels.get(c, c)) for c in pivot.columns]
            tables.append(("Cost per terminal and policy", pivot.reset_index()))
        return TablesView(tables, _headline(obj), series=series)
    tables, note = _tables_of(obj)
    series = None
    for title, f in tables:
        x_col = _pick(f, ("week", "origin", "period", "start", "week_start", "date"))
        name_col = _pick(f, _NAME_COLUMNS)
        cost_col = _pick(f, _TOTAL_COLUMNS)
        if x_col and name_col and cost_col:
            wide = f.pivot_table(index=x_col, columns=name_col, values=cost_col, aggfunc="sum")
            series = (list(wide.index), {str(c): wide[c].to_numpy() for c in wide.columns},
                      f"cost per {x_col.replace('_', ' ')} and routine")
            break
    return TablesView(tables, note, series=series)


def as_comparison(obj: Any) -> TablesView | None:
    """Read a what-if comparison (see the module doc); a
    :class:`planner.compare.CompareResult` shows its variant table (cost differences with
    their intervals), a bar chart of the expected cost per variant and its headline."""
    if obj is None:
        return None
    if isinstance(obj, TablesView):
        return obj
    table = getattr(obj, "table", None)
    if isinstance(table, pd.DataFrame) and {"variant", "expected_cost"} <= set(table.columns):
        base = getattr(obj, "base_name", None) or str(table["variant"].iloc[0])
        cols = [c for c in COMPARE_COLUMNS if c in table]
        totals = (table["variant"].astype(str).tolist(),
                  pd.to_numeric(table["expected_cost"], errors="coerce").tolist(), base)
        return TablesView([("Variants", table[cols])], _headline(obj), totals=totals)
    tables, note = _tables_of(obj)
    totals = None
    for title, f in tables:
        name_col = _pick(f, ("variant", "name", "label", "scenario"))
        total_col = _pick(f, _TOTAL_COLUMNS)
        if name_col and total_col:
            names = f[name_col].astype(str).tolist()
            base = next((n for n in names if n.lower() in ("base", "baseline", "as planned")),
                        names[0] if names else None)
            totals = (names, pd.to_numeric(f[total_col], errors="coerce").tolist(), base)
            break
    return TablesView(tables, note, totals=totals)
