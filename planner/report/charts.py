"""Charts of the report, drawn with matplotlib's object API (no pyplot, no global state).

Every function returns a :class:`matplotlib.figure.Figure`; :func:`png_data_uri` and
:func:`svg_data_uri` turn one into a ``data:`` URI that the page embeds, so the report needs no
file beside it. Network charts are SVG (sharp in print, text drawn as paths so no font is
needed); the many small per-terminal charts are PNG at a low resolution to keep the file small.
Colours come from :mod:`planner.report.palette`; every series also differs by marker, line
style or hatch.
"""
from __future__ import annotations

import base64
import io
from typing import Sequence

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.dates import DateFormatter
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, MaxNLocator, PercentFormatter

from planner.report.palette import FLAG_MARKERS, NEUTRALS, ROLE, series_style

TERMINAL_DPI = 80      # per-terminal charts: small files, still legible on screen and A4
NETWORK_DPI = 100      # only used when a network chart is written as PNG

_STYLE = {
    "font.size": 7.5,
    "axes.titlesize": 8,
    "axes.labelsize": 7.5,
    "xtick.labelsize": 6.5,
    "ytick.labelsize": 6.5,
    "legend.fontsize": 6.5,
    "axes.edgecolor": NEUTRALS["muted"],
    "axes.labelcolor": NEUTRALS["text"],
    "xtick.color": NEUTRALS["muted"],
    "ytick.color": NEUTRALS["muted"],
    "text.color": NEUTRALS["text"],
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": NEUTRALS["rule"],
    "grid.linewidth": 0.4,
    "grid.alpha": 0.6,
    "svg.fonttype": "path",
    "svg.hashsalt": "planner-report",   # stable ids: the same run gives the same file
    "savefig.facecolor": NEUTRALS["white"],
}


def new_figure(width_in: float, height_in: float, *, margins: tuple[float, float, float, float]
               = (0.55, 0.15, 0.35, 0.25), **subplots) -> tuple[Figure, np.ndarray]:
    """A figure with an Agg canvas and the report's style; returns (figure, axes array).

    ``margins`` (left, right, bottom, top) are in inches. A fixed layout is used on purpose:
    constrained layout would draw every figure twice, and the report draws dozens.
    """
    left, right, bottom, top = margins
    gridspec = dict(left=left / width_in, right=1 - right / width_in,
                    bottom=bottom / height_in, top=1 - top / height_in)
    gridspec.update(subplots.pop("gridspec_kw", {}))
    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=(width_in, height_in))
        FigureCanvasAgg(fig)
        axes = fig.subplots(squeeze=False, gridspec_kw=gridspec, **subplots)
    return fig, axes


def png_data_uri(fig: Figure, dpi: int = TERMINAL_DPI, colours: int | None = 64) -> str:
    """The figure as a base64 PNG ``data:`` URI.

    With ``colours``, the picture is reduced to that many colours (no dithering) before it is
    compressed: charts have few colours, and this makes the file about three times smaller.
    """
    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    data = buf.getvalue()
    if colours:
        from PIL import Image

        image = Image.open(io.BytesIO(data)).convert("RGB")
        small = image.quantize(colors=colours, method=Image.Quantize.MEDIANCUT,
                               dither=Image.Dither.NONE)
        out = io.BytesIO()
        small.save(out, format="PNG", optimize=True)
        data = out.getvalue()
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def svg_data_uri(fig: Figure) -> str:
    """The figure as a base64 SVG ``data:`` URI (as an image, so ids of several charts never
    collide and the page stays free of inline script)."""
    buf = io.BytesIO()
    with matplotlib.rc_context(_STYLE):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return "data:image/svg+xml;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _money_axis(ax, axis: str = "y") -> None:
    fmt = FuncFormatter(lambda v, _: _short_money(v))
    (ax.yaxis if axis == "y" else ax.xaxis).set_major_formatter(fmt)


def _short_money(v: float) -> str:
    a = abs(v)
    if a >= 1e6:
        return f"{v / 1e6:.1f}M"
    if a >= 1e3:
        return f"{v / 1e3:.0f}k"
    return f"{v:.0f}"


# ---------------------------------------------------------------------------------------------
# Network charts
# ---------------------------------------------------------------------------------------------

_PANEL_IN = 1.15      # height of one depot's panel (inches)


def _depot_panels(k: int) -> tuple[Figure, np.ndarray]:
    return new_figure(7.4, 0.75 + _PANEL_IN * k, margins=(0.6, 0.1, 0.45, 0.3),
                      nrows=k, ncols=1, sharex=True, gridspec_kw={"hspace": 0.45})


def crew_chart(depots: Sequence[str], dates: pd.DatetimeIndex, used: np.ndarray,
               limit: np.ndarray) -> Figure:
    """Visits planned per depot and day (bars) against the crew limit (dashed step line).

    ``used`` and ``limit`` are ``[depot, day]`` counts of visits. A day on which every crew is
    used is hatched as well as coloured, so it reads without colour.
    """
    fig, axes = _depot_panels(len(depots))
    x = np.arange(len(dates))
    for i, (ax, depot) in enumerate(zip(axes[:, 0], depots)):
        full = used[i] >= limit[i]
        ax.bar(x[~full], used[i][~full], color=ROLE["plan"], width=0.7, label="visits planned")
        ax.bar(x[full], used[i][full], color=ROLE["plan"], width=0.7, hatch="///",
               edgecolor=NEUTRALS["white"], linewidth=0, label="all crews used")
        if len(x):
            ax.step(np.r_[x - 0.5, x[-1] + 0.5], np.r_[limit[i], limit[i][-1:]], where="post",
                    color=ROLE["target"], linestyle="--", linewidth=1.2, label="crew limit")
        ax.set_title(str(depot), loc="left")
        ax.set_ylabel("visits")
        ax.yaxis.set_major_locator(MaxNLocator(integer=True))
        top = max(1.0, float(np.max(limit[i], initial=0)), float(np.max(used[i], initial=0)))
        ax.set_ylim(0, top * 1.12)
    _top_legend(fig, axes[0, 0])
    _weekday_ticks(axes[-1, 0], dates)
    return fig


def _top_legend(fig: Figure, ax) -> None:
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="upper right", ncols=len(labels), frameon=False,
               bbox_to_anchor=(1 - 0.1 / fig.get_figwidth(), 1.0))


def _weekday_ticks(ax, dates: pd.DatetimeIndex) -> None:
    ax.set_xticks(np.arange(len(dates)))
    ax.set_xticklabels([f"{d:%a}\n{d:%d %b}" for d in dates])
    ax.grid(axis="x", visible=False)
    if len(dates):
        ax.set_xlim(-0.6, len(dates) - 0.4)


def orders_chart(depots: Sequence[str], dates: pd.DatetimeIndex, load: np.ndarray,
                 returned: np.ndarray) -> Figure:
    """Cash to load (solid bars) and expected cash returned (hatched bars) per depot and day.

    ``load`` and ``returned`` are ``[depot, day]`` in currency units.
    """
    fig, axes = _depot_panels(len(depots))
    x = np.arange(len(dates))
    for i, (ax, depot) in enumerate(zip(axes[:, 0], depots)):
        ax.bar(x - 0.19, load[i], width=0.38, color=ROLE["plan"], label="cash to load")
        ax.bar(x + 0.19, returned[i], width=0.38, color=ROLE["baseline"], hatch="///",
               edgecolor=NEUTRALS["white"], linewidth=0, label="expected back")
        ax.set_title(str(depot), loc="left")
        _money_axis(ax)
    _top_legend(fig, axes[0, 0])
    _weekday_ticks(axes[-1, 0], dates)
    return fig


def routine_cost_chart(names: Sequence[str], totals: Sequence[float], *,
                       highlight: str | None = None, title: str = "") -> Figure:
    """Expected cost per routine or variant (horizontal bars; the highlighted one — the plan
    or the base variant — is solid blue, the others hatched orange)."""
    n = len(names)
    left = min(3.0, 0.25 + 0.055 * max([len(str(s)) for s in names] + [4]))
    fig, axes = new_figure(6.4, 0.6 + 0.28 * max(n, 1), margins=(left, 0.2, 0.3, 0.25))
    ax = axes[0, 0]
    y = np.arange(n)[::-1]
    for yi, name, total in zip(y, names, totals):
        is_main = name == highlight
        ax.barh(yi, total, height=0.6, color=ROLE["plan"] if is_main else ROLE["baseline"],
                hatch="" if is_main else "//", edgecolor=NEUTRALS["white"], linewidth=0)
        ax.text(total, yi, f" {total:,.0f}", va="center", fontsize=6.5)
    ax.set_yticks(y)
    ax.set_yticklabels([str(s) for s in names])
    _money_axis(ax, "x")
    ax.grid(axis="y", visible=False)
    ax.set_xlim(0, max([float(t) for t in totals] + [1.0]) * 1.18)
    if title:
        ax.set_title(title, loc="left")
    return fig


def series_chart(x: Sequence, series: dict[str, Sequence[float]], *, ylabel: str = "",
                 title: str = "", money: bool = True) -> Figure:
    """A few lines over a shared x (weeks, origins), each with its own colour, marker and
    line style."""
    fig, axes = new_figure(7.0, 2.5, margins=(0.6, 0.15, 0.45, 0.5))
    ax = axes[0, 0]
    for i, (name, values) in enumerate(series.items()):
        st = series_style(i)
        ax.plot(list(x), list(values), color=st["color"], marker=st["marker"],
                linestyle=st["linestyle"], linewidth=1.2, markersize=3.5, label=str(name))
    if money:
        _money_axis(ax)
    ax.set_ylabel(ylabel)
    if title:
        ax.set_title(title, loc="left")
    _top_legend(fig, ax)
    return fig


def correlogram_chart(lags: np.ndarray, acf: np.ndarray, pacf: np.ndarray | None,
                      n_obs: int, title: str) -> Figure:
    """ACF (and PACF) stems with the ±1.96/√n band (the usual large-sample band)."""
    cols = 2 if pacf is not None else 1
    fig, axes = new_figure(3.6 * cols, 1.6, margins=(0.4, 0.1, 0.35, 0.22), ncols=cols,
                           gridspec_kw={"wspace": 0.25})
    band = 1.96 / np.sqrt(max(n_obs, 1))
    panels = [(axes[0, 0], acf, "ACF", ROLE["forecast"], "o")]
    if pacf is not None:
        panels.append((axes[0, 1], pacf, "PACF", ROLE["cleaned"], "s"))
    for ax, values, name, colour, marker in panels:
        ax.axhspan(-band, band, color=ROLE["band_outer"], linewidth=0)
        ax.vlines(lags, 0, values, color=colour, linewidth=1)
        ax.plot(lags, values, linestyle="none", marker=marker, markersize=2.5, color=colour)
        ax.axhline(0, color=NEUTRALS["muted"], linewidth=0.6)
        ax.set_title(f"{title} — {name}" if title else name, loc="left")
        ax.set_xlabel("lag (days)", labelpad=1)
    return fig


# ---------------------------------------------------------------------------------------------
# One compact figure per terminal
# ---------------------------------------------------------------------------------------------

TERMINAL_SIZE_IN = (9.0, 2.0)
_TERMINAL_GRID = dict(margins=(0.45, 0.08, 0.38, 0.2), ncols=3,
                      gridspec_kw={"width_ratios": [2.3, 1.5, 1.0], "wspace": 0.2})

# The look of each series of the terminal chart; the key is drawn once for all terminals.
_T = {
    "dispensed": dict(color=ROLE["history"], linewidth=0.9),
    "cleaned": dict(linestyle="none", marker="o", markersize=3, markerfacecolor="none",
                    color=ROLE["cleaned"]),
    "band90": dict(color=ROLE["band_outer"], linewidth=0),
    "band80": dict(color=ROLE["band_inner"], alpha=0.55, linewidth=0),
    "median": dict(color=ROLE["forecast"], linestyle="--", linewidth=1.1),
    "bal90": dict(color=ROLE["balance"], alpha=0.2, linewidth=0),
    "bal50": dict(color=ROLE["balance"], alpha=0.45, linewidth=0),
    "balmed": dict(color=ROLE["balance"], linewidth=1.1),
    "visit": dict(linestyle="none", marker="v", markersize=5, color=ROLE["visit"]),
    "limit": dict(color=ROLE["limit"], linestyle="-.", linewidth=0.9),
    "dryday": dict(facecolor=ROLE["dry"], hatch="////", edgecolor=NEUTRALS["white"],
                   linewidth=0),
    "drycum": dict(color=ROLE["history"], linewidth=1.1, marker=".", markersize=3),
    "target": dict(color=ROLE["target"], linestyle="--", linewidth=0.8),
}


def terminal_key_chart() -> Figure:
    """The key to every terminal chart, drawn once: what each line, band and marker means."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    def line(label, **kw):
        return Line2D([], [], label=label, **kw)

    groups = [
        ("demand per day", [
            line("dispensed", **_T["dispensed"]),
            line("cleaned value", **_T["cleaned"]),
            *[line(f"{name}" + (" (lower bound)" if name == "dry" else ""), linestyle="none",
                   marker=m, markersize=4, color=c) for name, (m, c) in FLAG_MARKERS.items()],
            Patch(label="forecast 90 % band", **_T["band90"]),
            Patch(label="forecast 80 % band", **_T["band80"]),
            line("median forecast", **_T["median"]),
        ]),
        ("end-of-day balance", [
            Patch(label="5–95 % of paths", **_T["bal90"]),
            Patch(label="25–75 % of paths", **_T["bal50"]),
            line("median", **_T["balmed"]),
            line("visit, at its load", **_T["visit"]),
            line("balance limit", **_T["limit"]),
        ]),
        ("dry risk", [
            Patch(label="share of paths dry that day", **_T["dryday"]),
            line("share dry at least once so far", **_T["drycum"]),
            line("service target", **_T["target"]),
        ]),
    ]
    fig, axes = new_figure(9.0, 0.95, margins=(0.05, 0.05, 0.02, 0.02), ncols=3,
                           gridspec_kw={"width_ratios": [2.3, 1.5, 1.0], "wspace": 0.05})
    for ax, (title, handles) in zip(axes[0], groups):
        ax.axis("off")
        ax.legend(handles=handles, title=title, loc="upper left", frameon=False,
                  ncols=2 if len(handles) > 5 else 1, fontsize=6.5, title_fontsize=7,
                  alignment="left", handlelength=2.2, borderaxespad=0)
    return fig


class TerminalChart:
    """One figure redrawn for each terminal: building a figure and its axes costs more than
    drawing into it, and the report draws one per terminal. Not for use from several threads.

    :meth:`draw` shows three panels for one terminal (the key is :func:`terminal_key_chart`):

    1. demand: the last weeks of history (observed, black line; cleaned value where it differs,
       open orange circle; flagged days by shape) and the forecast fan over the horizon (90 %
       and 80 % bands, median dashed); the scale ignores gross outliers, which sit on the top
       edge;
    2. balance: end-of-day balance over the demand paths (5–95 % and 25–75 % bands, median),
       visits marked by triangles at the load, the balance limit dash-dotted;
    3. dry risk: share of paths dry on each day (hatched bars) and the share dry at least once
       so far (step line) against the service target (dashed).
    """

    def __init__(self) -> None:
        self.fig, axes = new_figure(*TERMINAL_SIZE_IN, **_TERMINAL_GRID)
        self.ax_d, self.ax_b, self.ax_r = axes[0]
        with matplotlib.rc_context(_STYLE):
            for ax, title in ((self.ax_d, "demand per day"), (self.ax_b, "end-of-day balance"),
                              (self.ax_r, "dry risk")):
                ax.set_title(title, loc="left")
            _money_axis(self.ax_d)
            _money_axis(self.ax_b)
            self.ax_d.xaxis.set_major_formatter(DateFormatter("%d %b"))
            self.ax_d.xaxis.set_major_locator(MaxNLocator(6))
            # decimals from the axis range: a 0-2 % axis reads 0.5 %, 1.0 %, … not 1 %, 1 %
            self.ax_r.yaxis.set_major_formatter(PercentFormatter(1.0, decimals=None))
            self.ax_r.yaxis.set_major_locator(MaxNLocator(4))
            for ax in (self.ax_b, self.ax_r):
                ax.grid(axis="x", visible=False)

    def _clear(self) -> None:
        for ax in (self.ax_d, self.ax_b, self.ax_r):
            for artist in [*ax.lines, *ax.collections, *ax.patches]:
                artist.remove()
            ax.containers.clear()

    def draw(self, *, history: pd.DataFrame | None, fan: pd.DataFrame | None,
             balance: dict[str, np.ndarray] | None, dates: pd.DatetimeIndex,
             visits: np.ndarray | None, loads: np.ndarray | None, limit: float | None,
             dry_day: np.ndarray | None, dry_cum: np.ndarray | None,
             target: float | None) -> Figure:
        """Draw one terminal and return the figure (valid until the next call).

        ``history``: rows indexed by date with ``observed``, ``demand``, ``flag``,
        ``changed``. ``fan``: rows indexed by date with ``q05, q10, q50, q90, q95``.
        ``balance``: arrays over ``dates`` keyed ``q05, q25, q50, q75, q95``.
        ``dry_day``/``dry_cum``: shares of paths per day.
        """
        self._clear()
        with matplotlib.rc_context(_STYLE):
            self._demand(history, fan, dates)
            self._balance(balance, dates, visits, loads, limit)
            self._risk(dry_day, dry_cum, target, dates)
        return self.fig

    def _demand(self, history, fan, dates) -> None:
        ax = self.ax_d
        top, x_lo, x_hi = 0.0, None, None
        if fan is not None and len(fan):
            top = float(np.nanmax(fan["q95"].to_numpy(float), initial=0.0))
            x_lo, x_hi = fan.index.min(), fan.index.max()
        if history is not None and len(history):
            h = history
            observed = h["observed"].to_numpy(float)
            finite = observed[np.isfinite(observed)]
            if finite.size:
                top = max(top, float(np.quantile(finite, 0.97)) * 1.5)
            top = top or 1.0
            ax.plot(h.index, np.minimum(observed, top), **_T["dispensed"])
            changed = h["changed"].to_numpy(bool) & h["demand"].notna().to_numpy()
            if changed.any():
                ax.plot(h.index[changed],
                        np.minimum(h["demand"].to_numpy(float)[changed], top), **_T["cleaned"])
            flags = h["flag"].astype(str)
            for name, (marker, colour) in FLAG_MARKERS.items():
                hit = flags.str.contains(name, regex=False).to_numpy()
                if hit.any():
                    y = np.nan_to_num(observed[hit], nan=0.0)
                    ax.plot(h.index[hit], np.minimum(y, top), linestyle="none", marker=marker,
                            markersize=4, color=colour, clip_on=False)
            x_lo = h.index.min() if x_lo is None else min(x_lo, h.index.min())
            x_hi = h.index.max() if x_hi is None else max(x_hi, h.index.max())
        if fan is not None and len(fan):
            ax.fill_between(fan.index, fan["q05"], fan["q95"], **_T["band90"])
            ax.fill_between(fan.index, fan["q10"], fan["q90"], **_T["band80"])
            ax.plot(fan.index, fan["q50"], **_T["median"])
        if len(dates):
            ax.axvline(dates[0], color=NEUTRALS["muted"], linewidth=0.8, linestyle=":")
        ax.set_ylim(0, (top or 1.0) * 1.04)
        if x_lo is not None:
            pad = pd.Timedelta(days=1)
            ax.set_xlim(x_lo - pad, x_hi + pad)

    def _balance(self, balance, dates, visits, loads, limit) -> None:
        ax = self.ax_b
        x = np.arange(len(dates))
        top = 0.0
        if balance is not None:
            ax.fill_between(x, balance["q05"], balance["q95"], step="mid", **_T["bal90"])
            ax.fill_between(x, balance["q25"], balance["q75"], step="mid", **_T["bal50"])
            ax.step(x, balance["q50"], where="mid", **_T["balmed"])
            top = float(np.max(balance["q95"], initial=0.0))
        if visits is not None and loads is not None and visits.any():
            ax.plot(x[visits], loads[visits], **_T["visit"])
            ax.vlines(x[visits], 0, loads[visits], color=ROLE["visit"], linewidth=0.6,
                      linestyle=":")
            top = max(top, float(loads[visits].max()))
        if limit is not None and np.isfinite(limit):
            ax.axhline(limit, **_T["limit"])
            top = max(top, float(limit))
        ax.set_ylim(0, (top or 1.0) * 1.08)
        self._day_ticks(ax, dates)

    def _risk(self, dry_day, dry_cum, target, dates) -> None:
        ax = self.ax_r
        x = np.arange(len(dates))
        if dry_day is not None:
            ax.bar(x, dry_day, width=0.8, **_T["dryday"])
        if dry_cum is not None:
            ax.step(x, dry_cum, where="mid", **_T["drycum"])
        if target is not None and np.isfinite(target):
            ax.axhline(target, **_T["target"])
        peak = max([0.02] + [float(np.max(a, initial=0)) for a in (dry_day, dry_cum)
                             if a is not None] + ([target] if target is not None else []))
        ax.set_ylim(0, min(1.0, peak * 1.3))
        self._day_ticks(ax, dates)

    @staticmethod
    def _day_ticks(ax, dates: pd.DatetimeIndex) -> None:
        x = np.arange(len(dates))
        step = max(1, int(np.ceil(len(dates) / 5)))
        ticks = x[::step]
        ax.set_xticks(ticks)
        ax.set_xticklabels([f"{dates[i]:%a}\n{dates[i]:%d}" for i in ticks])
        if len(x):
            ax.set_xlim(-0.6, len(x) - 0.4)


def terminal_chart(**kwargs) -> Figure:
    """One terminal's figure on a figure of its own (see :class:`TerminalChart`)."""
    return TerminalChart().draw(**kwargs)
