"""report.html: sections, self-containment, size, colours, escaping, optional sections.

The run is the invented preview network of :mod:`planner.demo.report_preview` (real scenario
loader, cleaning, planning problem and accounting; invented forecasts and a greedy plan).
"""
from __future__ import annotations

import base64
import re
import stat
from dataclasses import replace
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex

from planner.report import charts, palette
from planner.report.html import render_report, write_report
from planner.demo.report_preview import sample_run
from planner.report.wording import CAUTIONS
from planner.runfolder import RunFolderWriter

MAIN_SECTIONS = ("cautions", "summary", "crews", "cash-orders", "depot-plans", "terminals",
                 "data-quality", "forecast-accuracy", "method")
NETWORK_TERMINALS = 60   # the size of the Northvale demo network


class _Page(HTMLParser):
    """Collects ids, section headings, every attribute that loads or links, tags seen."""

    def __init__(self) -> None:
        super().__init__()
        self.ids: list[str] = []
        self.sections: list[str] = []
        self.links: list[tuple[str, str, str]] = []   # (tag, attribute, value)
        self.tags: set[str] = set()
        self.styles: list[str] = []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.add(tag)
        a = dict(attrs)
        if "id" in a:
            self.ids.append(a["id"])
            if tag == "section":
                self.sections.append(a["id"])
        for name in ("src", "href", "srcset", "poster", "data", "action", "formaction"):
            if name in a:
                self.links.append((tag, name, a[name] or ""))
        if "style" in a:
            self.styles.append(a["style"] or "")
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        if tag == "style":
            self._in_style = False

    def handle_data(self, data):
        if self._in_style:
            self.styles.append(data)


def _parse(text: str) -> _Page:
    page = _Page()
    page.feed(text)
    return page


@pytest.fixture(scope="module")
def network(tmp_path_factory):
    """A 60-terminal run and its report (rendered once for the module)."""
    run = sample_run(tmp_path_factory.mktemp("net") / "scenario", terminals=NETWORK_TERMINALS)
    return run, render_report(run)


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    return sample_run(tmp_path_factory.mktemp("small") / "scenario", terminals=4, seed=3)


def test_key_sections_are_present_in_order(network):
    run, text = network
    page = _parse(text)
    assert [s for s in page.sections if s in MAIN_SECTIONS] == list(MAIN_SECTIONS)
    # every terminal has its own figure and anchor; every depot its own day-by-day table
    for tid in run.problem.terminal_ids:
        assert f">{tid}</a>" in text
    assert sum(i.startswith("terminal-") for i in page.ids) == len(run.problem.terminal_ids)
    assert sum(i.startswith("plan-") for i in page.ids) == len(run.problem.depots)
    assert len(set(page.ids)) == len(page.ids), "ids must be unique"
    # optional sections only appear when their results are given
    for absent in ("diagnostics", "backtest", "what-if"):
        assert absent not in page.sections


def test_no_external_resources(network):
    _, text = network
    page = _parse(text)
    assert "script" not in page.tags and "iframe" not in page.tags
    assert page.links, "the page has internal links and embedded images"
    for tag, attr, value in page.links:
        v = value.strip().lower()
        assert v.startswith("#") or v.startswith("data:"), (tag, attr, value[:80])
    css = " ".join(page.styles).lower()
    assert "@import" not in css and "@font-face" not in css
    assert not re.search(r"url\(\s*['\"]?(?!data:|#)", css)
    # nothing inside an embedded SVG points outside either
    for _, _, value in page.links:
        if value.startswith("data:image/svg+xml;base64,"):
            svg = base64.b64decode(value.split(",", 1)[1]).decode("utf-8")
            for ref in re.findall(r'(?:href|src)\s*=\s*"([^"]*)"', svg):
                assert ref.startswith("#") or ref.startswith("data:"), ref
    assert "http-equiv='Content-Security-Policy'" in text   # the browser refuses any fetch


def test_file_stays_small_for_a_network_of_sixty_terminals(network, capsys):
    _, text = network
    size = len(text.encode("utf-8"))
    with capsys.disabled():
        print(f"\nreport.html for {NETWORK_TERMINALS} terminals: {size / 1e6:.2f} MB")
    assert size < 4_000_000
    per_terminal = re.findall(r"<img class='tchart' src='data:image/png;base64,([^']+)'", text)
    assert len(per_terminal) == NETWORK_TERMINALS
    assert max(len(b) for b in per_terminal) * 3 / 4 < 40_000   # bytes of one PNG


def test_cautions_and_print_layout(network):
    _, text = network
    for caution in CAUTIONS:
        assert caution.replace("'", "&#x27;") in text
    assert "@media print" in text and "@page" in text and "size: A4" in text
    assert "break-before: page" in text and "display: table-header-group" in text


def test_day_by_day_plan_per_depot_reads_alone(network):
    """For each depot and day: every visit with its terminal, load, residual, risk, reason."""
    run, text = network
    start = text.index("<section id='depot-plans'>")
    block = text[start:text.index("</section>", start)]
    for depot, slug_rows in run.plan.groupby("depot"):
        d0 = block.index(f"<h3>Depot {depot}</h3>")
        d1 = block.find("<div class='depot'", d0 + 1)
        depot_html = block[d0:d1 if d1 > 0 else len(block)]
        for day, rows in slug_rows.groupby("date"):
            head = f"{pd.Timestamp(day):%a %d %b %Y}"
            t0 = depot_html.index(head)
            day_html = depot_html[t0:depot_html.index("</tbody>", t0)]
            for _, r in rows.iterrows():
                assert f">{r['terminal_id']}</a>" in day_html
                assert f"{r['load']:,.0f}" in day_html
                assert f"{r['expected_residual']:,.0f}" in day_html
                assert f"{100 * r['dry_probability']:.1f} %" in day_html
                assert r["reason"] in day_html
    # days without visits are listed too, so a reader sees that nothing is planned
    assert "no visits" in block


def test_summary_figures_agree_with_the_run(network):
    run, text = network
    start = text.index("<section id='summary'>")
    summary = text[start:text.index("</section>", start)]
    assert f"{run.costs['total'].sum():,.0f}" in summary
    assert f"{run.plan['load'].sum():,.0f} EUR" in summary
    assert "none proven" in summary and "unknown (no bound)" in summary   # greedy: no bound
    over = int((run.result.dry_probability > run.scenario.max_dry_probability + 1e-12).sum())
    assert f"▲ {over}" in summary if over else True


def test_palette_is_okabe_ito():
    # Okabe, M. & Ito, K. (2008) "Color Universal Design (CUD)", the eight colours (recalled)
    assert palette.OKABE_ITO == {
        "black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9",
        "bluish_green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
        "vermillion": "#D55E00", "reddish_purple": "#CC79A7"}
    # every role is a palette colour, a grey, or a tint (mix with white) of a palette colour
    tints = {palette.tint(c, s) for c in palette.OKABE_ITO.values()
             for s in (0.15, 0.18, 0.35)}
    allowed = {c.upper() for c in (*palette.OKABE_ITO.values(), *palette.NEUTRALS.values())}
    for role, colour in palette.ROLE.items():
        assert colour.upper() in allowed | tints, role


def test_page_uses_only_palette_colours(network):
    _, text = network
    css = " ".join(_parse(text).styles)
    used = {c.upper() for c in re.findall(r"#[0-9A-Fa-f]{6}\b", css)}
    assert used and used <= palette.allowed_colours()
    assert not re.search(r"\b(red|green|lime)\b", css, re.I)


def _figure_colours(fig) -> set[str]:
    out = set()

    def add(c):
        arr = np.atleast_2d(np.asarray(c, dtype=float)) if not isinstance(c, str) else None
        if arr is None:
            if c.lower() != "none":
                out.add(to_hex(c).upper())
            return
        for rgba in arr:
            if rgba.size and (rgba.size < 4 or rgba[3] > 0):
                out.add(to_hex(rgba[:3]).upper())

    for ax in fig.axes:
        for line in ax.get_lines():
            add(line.get_color())
            add(line.get_markerfacecolor())
            add(line.get_markeredgecolor())
        for coll in ax.collections:
            add(coll.get_facecolor())
            add(coll.get_edgecolor())
        for patch in ax.patches:
            add(patch.get_facecolor())
        for legend in [ax.get_legend(), *fig.legends]:
            if legend is None:
                continue
            for h in legend.legend_handles:
                if hasattr(h, "get_color"):
                    add(h.get_color())
                if hasattr(h, "get_facecolor"):
                    add(h.get_facecolor())
    return out


def test_charts_use_only_palette_colours_and_a_second_cue(small):
    run = small
    from planner.report.html import _Context, _fan_by_terminal, _history_by_terminal

    ctx = _Context(run)
    allowed = palette.allowed_colours()
    hist = _history_by_terminal(run.clean, ctx.dates[0])
    fans = _fan_by_terminal(run.forecast, ctx.dates)
    tid = ctx.terminal_ids[0]
    fig = charts.terminal_chart(
        history=hist[tid], fan=fans[tid],
        balance={n: ctx.balance_q[j, 0] for j, n in enumerate(("q05", "q25", "q50", "q75",
                                                               "q95"))},
        dates=ctx.dates, visits=ctx.visits[0], loads=ctx.loads[0],
        limit=float(run.problem.limit[0]), dry_day=ctx.dry_day[0], dry_cum=ctx.dry_cum[0],
        target=ctx.target)
    figures = [fig, charts.terminal_key_chart(),
               charts.crew_chart(ctx.depots, ctx.dates, ctx.crew_used, ctx.crew_limit),
               charts.orders_chart(ctx.depots, ctx.dates, np.ones((len(ctx.depots),
                                                                   ctx.horizon)),
                                   np.ones((len(ctx.depots), ctx.horizon))),
               charts.routine_cost_chart(["plan", "weekly routine"], [10.0, 12.0],
                                         highlight="plan"),
               charts.series_chart([1, 2, 3], {"a": [1, 2, 3], "b": [2, 3, 4]}),
               charts.correlogram_chart(np.arange(1, 8), np.zeros(7), np.zeros(7), 100, "x")]
    for f in figures:
        assert _figure_colours(f) <= allowed, _figure_colours(f) - allowed
    # within each panel the key tells lines apart by shape or line style, not colour alone
    for ax in figures[1].axes:
        styles = [(h.get_marker(), h.get_linestyle()) for h in ax.get_legend().legend_handles
                  if hasattr(h, "get_marker")]
        assert len(set(styles)) == len(styles)
    # unnamed series (depots, routines) differ by marker and line style too
    looks = [palette.series_style(i) for i in range(len(palette.SERIES_COLOURS))]
    assert len({(s["marker"], s["linestyle"]) for s in looks}) == len(looks)


def test_text_from_the_input_is_escaped(small):
    terminals = small.scenario.terminals.copy()
    terminals["site"] = "<b>kiosk & co</b>"
    run = replace(small, scenario=replace(small.scenario, terminals=terminals))
    text = render_report(run)
    assert "<b>kiosk" not in text
    assert "&lt;b&gt;kiosk &amp; co&lt;/b&gt;" in text


def test_optional_sections_from_evaluation_backtest_comparison_and_diagnostics(small):
    from planner.diagnostics import diagnose_scenario

    plan_total = float(small.costs["total"].sum())
    evaluation = pd.DataFrame({
        "routine": ["plan", "fixed weekdays, fixed load", "visit when below 2 days",
                    "perfect-foresight bound"],
        "total": [plan_total, plan_total * 1.3, plan_total * 1.1, plan_total * 0.8],
        "dry_probability": [0.02, 0.08, 0.04, 0.0]})
    backtest = pd.DataFrame({"week": [1, 1, 2, 2], "routine": ["plan", "routine"] * 2,
                             "cost": [100.0, 130.0, 110.0, 125.0]})
    comparison = pd.DataFrame({"variant": ["base", "carry_rate_annual=0.08"],
                               "total": [plan_total, plan_total * 1.05]})
    diagnostics = diagnose_scenario(small.scenario, small.clean,
                                    terminal_ids=list(small.problem.terminal_ids[:2]))
    text = render_report(small, evaluation=evaluation, backtest=backtest,
                         comparison=comparison, diagnostics=diagnostics)
    page = _parse(text)
    for sid in ("diagnostics", "backtest", "what-if"):
        assert sid in page.sections
    assert "against-baselines" in page.ids
    start = text.index("<section id='summary'>")
    summary = text[start:text.index("</section>", start)]
    # the best baseline is the cheapest routine that is neither the plan nor the bound
    assert "best baseline routine (visit when below 2 days)" in summary
    saving = plan_total * 1.1 - plan_total
    assert f"{saving:,.0f} EUR" in summary
    d0 = text.index("<section id='diagnostics'>")
    diag = text[d0:text.index("</section>", d0)]
    assert "Ljung-Box lag 7" in diag and diag.count("data:image/png;base64,") == 2


def test_write_report_into_a_run_folder(small, tmp_path):
    out = tmp_path / "run"
    with RunFolderWriter(out) as writer:
        size = write_report(small, writer)
    path = out / "report.html"
    assert path.stat().st_size == size > 0
    assert stat.S_IMODE(path.stat().st_mode) == 0o600   # plans are confidential (README, "Outputs")
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


def test_same_run_gives_the_same_report(small):
    assert render_report(small) == render_report(small)


def test_backtest_and_what_if_results_of_their_stages(small):
    """The results of the backtest and of the what-if comparison are shown as they come
    (frames built here with the columns documented in planner.evaluate.replay and
    planner.compare; the backtest result is read by its fields, so a stand-in with those
    fields serves)."""
    from dataclasses import dataclass, field

    from planner.compare import CompareResult

    @dataclass(frozen=True)
    class BacktestResult:
        table: pd.DataFrame
        daily: pd.DataFrame
        terminals: pd.DataFrame
        summary: dict = field(default_factory=dict)

    dates = pd.date_range("2026-10-05", periods=14, freq="D")
    policies = {"planner": "planner (champion forecast)", "fixed_weekdays":
                "fixed weekdays Mon+Thu, filled to the limit",
                "days_of_cover": "days of cover (3-day trigger, 7 days + 25 %)"}
    table = pd.DataFrame({"policy": [*policies, "perfect_foresight"],
                          "label": [*policies.values(), "perfect-foresight bound"],
                          "total": [900.0, 1200.0, 1000.0, 700.0],
                          "dry_days": [1, 4, 2, np.nan],
                          "ratio_to_bound": [900 / 700, 1200 / 700, 1000 / 700, 1.0],
                          "saving_vs_best_baseline": [0.1, -0.2, 0.0, 0.3]})
    daily = pd.DataFrame([(p, d, 10.0 + i) for i, p in enumerate(policies) for d in dates],
                         columns=["policy", "date", "cost"])
    terminals = pd.DataFrame([(p, t, 100.0) for p in policies
                              for t in small.problem.terminal_ids],
                             columns=["policy", "terminal_id", "total"])
    backtest = BacktestResult(table=table, daily=daily, terminals=terminals,
                              summary={"headline": ["Backtest over 2 weeks: planner 900 EUR."]})
    variants = pd.DataFrame({"variant": ["base", "crews Sat = 0"],
                             "changes": ["", "depots.Brenholm.Sat = 0"],
                             "expected_cost": [8000.0, 8300.0], "cost_delta": [0.0, 300.0],
                             "cost_delta_low": [0.0, 250.0], "cost_delta_high": [0.0, 350.0],
                             "cost_delta_share": [0.0, 0.0375],
                             "mean_dry_probability": [0.02, 0.03]})
    compare = CompareResult(table=variants, terminals=pd.DataFrame(), summary={
        "headline": ["crews Sat = 0: expected cost +300 EUR (+250 … +350)"]}, plans={},
        base_name="base", currency="EUR")
    text = render_report(small, backtest=backtest, comparison=compare)
    b0 = text.index("<section id='backtest'>")
    bt = text[b0:text.index("</section>", b0)]
    assert "Backtest over 2 weeks: planner 900 EUR." in bt
    assert "fixed weekdays Mon+Thu, filled to the limit" in bt and "days of cover" in bt
    assert "128.6 %" not in bt and "1.286" in bt      # a ratio, not a share
    assert "10.0 %" in bt                               # saving against the best baseline
    assert bt.count("data:image/svg+xml;base64,") == 1  # cumulative cost per policy
    w0 = text.index("<section id='what-if'>")
    wi = text[w0:text.index("</section>", w0)]
    assert "crews Sat = 0: expected cost +300 EUR" in wi and "3.8 %" in wi
    assert wi.count("data:image/svg+xml;base64,") == 1


def test_large_networks_chart_the_terminals_at_risk_first(small, monkeypatch):
    from planner.report import html as report_html

    run = small[0] if isinstance(small, tuple) else small
    monkeypatch.setattr(report_html, "MAX_TERMINAL_CHARTS", 2)
    page = report_html.render_report(run)
    assert page.count("<article class='terminal'") == 2
    assert f"Charts for 2 of {len(run.problem.terminal_ids)} terminals" in page
    # the charted ones have a dry risk no lower than any terminal left without a chart
    risk = dict(zip(run.problem.terminal_ids, np.asarray(run.result.dry_probability)))
    charted = {t for t in risk if f"alt='Demand, balance and dry risk of {t}'" in page}
    assert len(charted) == 2
    assert min(risk[t] for t in charted) >= max(risk[t] for t in risk if t not in charted)


def test_dry_risk_axis_labels_are_distinct_on_a_small_range():
    # a 0–2.6 % axis once read "0 %, 1 %, 1 %, 2 %, 2 %": the decimals follow the range now
    import numpy as np
    import pandas as pd

    from planner.report.charts import TerminalChart

    dates = pd.date_range("2026-12-07", periods=14)
    chart = TerminalChart()
    fig = chart.draw(history=None, fan=None, balance=None, dates=dates, visits=None,
                     loads=None, limit=None, dry_day=np.full(14, 0.005),
                     dry_cum=np.linspace(0.0, 0.02, 14), target=0.02)
    fig.canvas.draw()
    labels = [t.get_text() for t in chart.ax_r.get_yticklabels() if t.get_text()]
    assert len(labels) >= 3 and len(set(labels)) == len(labels), labels
