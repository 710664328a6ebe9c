"""Charts of the backtest and of the what-if comparison (PNG, matplotlib without a display).

Colours come from the report's palette (:mod:`planner.report.palette`, Okabe–Ito), readable by
colour-blind readers; every series told apart by colour also differs by marker, line style or
hatch.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from planner.report.palette import NEUTRALS, OKABE_ITO, ROLE, series_style

PART_COLOURS = {
    "carry": OKABE_ITO["blue"], "visit": OKABE_ITO["sky_blue"],
    "emergency_fees": OKABE_ITO["orange"], "handling": OKABE_ITO["bluish_green"],
    "dry_penalty": OKABE_ITO["vermillion"], "shortfall_penalty": OKABE_ITO["reddish_purple"],
}
PART_HATCHES = {"carry": "", "visit": "", "emergency_fees": "//", "handling": "..",
                "dry_penalty": "xx", "shortfall_penalty": "++"}
PART_LABELS = {"carry": "carry", "visit": "visit fees", "emergency_fees": "emergency fees",
               "handling": "handling", "dry_penalty": "dry days", "shortfall_penalty": "shortfall"}
TEXT, MUTED, RULE = NEUTRALS["text"], NEUTRALS["muted"], NEUTRALS["rule"]


def _figure(width: float, height: float, cols: int):
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, cols, figsize=(width, height), dpi=110,
                             gridspec_kw={"wspace": 0.45})
    for ax in np.atleast_1d(axes):
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        for side in ("left", "bottom"):
            ax.spines[side].set_color(MUTED)
        ax.tick_params(colors=MUTED, labelsize=8)
        ax.set_axisbelow(True)
    return fig, np.atleast_1d(axes)


def _money(ax, axis: str) -> None:
    """Thousands as ``120k`` on a money axis, a few ticks only."""
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    target = ax.xaxis if axis == "x" else ax.yaxis
    target.set_major_locator(MaxNLocator(nbins=5))
    target.set_major_formatter(FuncFormatter(
        lambda v, _: f"{v / 1000:,.0f}k" if abs(v) >= 10000 else f"{v:,.0f}"))


def _title(ax, text: str) -> None:
    ax.set_title(text, loc="left", fontsize=10, color=TEXT, fontweight="bold")


def backtest_chart(result, path: str | Path) -> None:
    """Two panels: cost parts per policy (stacked bars, the perfect-foresight bound as a line)
    and the cumulative cost over the window per policy."""
    import matplotlib.pyplot as plt

    table = result.table
    rows = table[table["policy"] != "perfect_foresight"].iloc[::-1]
    bound = float(table.loc[table["policy"] == "perfect_foresight", "total"].iloc[0])
    fig, (left, right) = _figure(12.0, 0.5 * len(rows) + 3.0, 2)
    y = np.arange(len(rows))
    edge = np.zeros(len(rows))
    parts = dict(rows[["visit", "emergency_fees"]].astype(float).items())
    parts["visit"] = parts["visit"] - parts["emergency_fees"]
    for part in ("carry", "visit", "emergency_fees", "handling", "dry_penalty",
                 "shortfall_penalty"):
        width = (parts[part] if part in parts else rows[part].astype(float)).to_numpy()
        if not np.any(width > 0):
            continue
        left.barh(y, width, left=edge, height=0.6, color=PART_COLOURS[part],
                  hatch=PART_HATCHES[part], label=PART_LABELS[part], edgecolor="white",
                  linewidth=0.6)
        edge = edge + width
    left.axvline(bound, color=ROLE["bound"], linestyle="--", linewidth=1.2,
                 label="perfect-foresight bound")
    left.set_yticks(y, rows["label"].tolist(), fontsize=8, color=TEXT)
    left.xaxis.grid(True, color=RULE, linewidth=0.6)
    _money(left, "x")
    left.set_xlabel(f"cost over the window ({result.summary.get('currency', '')})",
                    fontsize=8, color=MUTED)
    left.legend(fontsize=7, frameon=False, loc="lower right")
    _title(left, "Cost by policy")

    daily = result.daily
    for k, policy in enumerate(table.loc[table["policy"] != "perfect_foresight", "policy"]):
        style = series_style(k)
        g = daily[daily["policy"] == policy]
        label = table.loc[table["policy"] == policy, "label"].iloc[0]
        right.plot(g["date"], g["cost"].cumsum(), color=style["color"], marker=style["marker"],
                   linestyle=style["linestyle"], markersize=3, markevery=7, linewidth=1.2,
                   label=label)
    right.yaxis.grid(True, color=RULE, linewidth=0.6)
    _money(right, "y")
    right.set_ylabel("cumulative cost", fontsize=8, color=MUTED)
    right.legend(fontsize=7, frameon=False)
    import matplotlib.dates as mdates

    right.xaxis.set_major_locator(mdates.WeekdayLocator(byweekday=mdates.MO))
    right.xaxis.set_major_formatter(mdates.DateFormatter("%d %b"))
    right.tick_params(axis="x", rotation=30)
    _title(right, "Cost over the backtest window")
    fig.savefig(path, bbox_inches="tight", format="png")
    plt.close(fig)


def compare_chart(result, path: str | Path) -> None:
    """Two panels: expected cost change against the base per variant, and change in expected
    dry days, both with 95 % confidence intervals from the paired demand paths."""
    import matplotlib.pyplot as plt

    table = result.table[result.table["variant"] != result.base_name].iloc[::-1]
    fig, axes = _figure(11.0, 0.55 * max(len(table), 1) + 2.6, 2)
    y = np.arange(len(table))
    specs = [("cost_delta", "cost_delta_low", "cost_delta_high",
              f"change of expected cost ({result.currency})", "Cost against the base",
              ROLE["plan"]),
             ("dry_days_delta", "dry_days_delta_low", "dry_days_delta_high",
              "change of expected dry days (network)", "Dry days against the base",
              ROLE["dry"])]
    for ax, (mid, low, high, xlabel, title, colour) in zip(axes, specs):
        value = table[mid].to_numpy(dtype=float)
        err = np.vstack([value - table[low].to_numpy(dtype=float),
                         table[high].to_numpy(dtype=float) - value])
        ax.barh(y, value, height=0.55, color=colour, alpha=0.85)
        ax.errorbar(value, y, xerr=np.maximum(err, 0.0), fmt="none", ecolor=TEXT,
                    elinewidth=1.0, capsize=3)
        ax.axvline(0.0, color=MUTED, linewidth=0.8)
        ax.set_yticks(y, table["variant"].tolist(), fontsize=8, color=TEXT)
        ax.xaxis.grid(True, color=RULE, linewidth=0.6)
        if mid == "cost_delta":
            _money(ax, "x")
        ax.set_xlabel(xlabel, fontsize=8, color=MUTED)
        _title(ax, title)
    fig.savefig(path, bbox_inches="tight", format="png")
    plt.close(fig)
