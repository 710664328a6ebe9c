"""The diagnostics page of one terminal (PNG, matplotlib without a display): the history
with its flagged days, ACF, PACF and periodogram of :mod:`planner.diagnostics`."""
from __future__ import annotations

import io
from pathlib import Path

import pandas as pd

from planner.runfolder import write_private_file


def diagnostics_page(terminal_id: str, daily_frame: pd.DataFrame, diagnostics: Diagnostics,
                     path: str | Path) -> Path:
    """Write one PNG page: history with flagged days marked, ACF, PACF, periodogram.

    ``daily_frame`` is one terminal's rows of :class:`planner.cleaning.CleanHistory` ``daily``
    indexed by date (``observed``, ``demand``, ``flag``). Colours are the report's
    Okabe–Ito roles; flags differ by marker shape as well as colour.
    """
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    from planner.report.palette import FLAG_MARKERS, NEUTRALS, OKABE_ITO, ROLE

    # a fixed layout: constrained layout would draw every page twice
    fig = Figure(figsize=(11, 8), dpi=100)
    grid = fig.add_gridspec(2, 3, height_ratios=[1.2, 1], left=0.07, right=0.98, bottom=0.08,
                            top=0.94, hspace=0.3, wspace=0.28)
    ax = fig.add_subplot(grid[0, :])
    dates = pd.DatetimeIndex(daily_frame.index)
    ax.plot(dates, daily_frame["observed"], color=ROLE["history"], lw=0.9,
            label="dispensed (observed)")
    ax.plot(dates, daily_frame["demand"], color=ROLE["cleaned"], lw=1.1, ls="--",
            label="cleaned demand")
    parts = daily_frame["flag"].astype(str).str.split("+")
    for flag, (marker, colour) in FLAG_MARKERS.items():
        on = parts.map(lambda p, f=flag: f in p).to_numpy(dtype=bool)
        if on.any():
            ax.scatter(dates[on], daily_frame["demand"].to_numpy()[on], marker=marker,
                       s=36, color=colour, zorder=3, label=f"{flag} ({int(on.sum())})")
    ax.set_title(f"{terminal_id}: daily demand — ADF and KPSS read: {diagnostics.verdict}",
                 loc="left", fontsize=11, color=NEUTRALS["text"])
    ax.set_ylabel("amount per day")
    ax.legend(loc="upper left", fontsize=8, ncols=3, frameon=False)
    ax.grid(color=NEUTRALS["rule"], lw=0.4)

    corr = diagnostics.correlogram
    for i, (column, title) in enumerate((("acf", "ACF"), ("pacf", "PACF"))):
        a = fig.add_subplot(grid[1, i])
        if len(corr):
            a.vlines(corr.index, 0, corr[column], color=OKABE_ITO["blue"], lw=1.6)
            a.plot(corr.index, corr[column], "o", ms=3, color=OKABE_ITO["blue"])
            a.axhline(0, color=NEUTRALS["muted"], lw=0.6)
            for sign in (1, -1):
                a.plot(corr.index, sign * corr["band"], ls=":", color=NEUTRALS["muted"],
                       lw=1, label="95 % band" if sign == 1 else None)
            a.set_xticks([lag for lag in (1, 7, 14, 21, 28) if lag <= corr.index.max()])
            a.legend(fontsize=8, frameon=False)
        a.set_title(title, loc="left", fontsize=10)
        a.set_xlabel("lag (days)")
        a.grid(color=NEUTRALS["rule"], lw=0.4)

    a = fig.add_subplot(grid[1, 2])
    pg = diagnostics.periodogram
    if len(pg):
        a.semilogx(pg["period_days"], pg["power"], color=OKABE_ITO["bluish_green"], lw=1)
        peaks = diagnostics.peaks
        a.plot(peaks["period_days"], peaks["power"], "v", color=OKABE_ITO["vermillion"], ms=6)
        ticks = [t for t in (2, 3.5, 7, 14, 28, 91, 365) if t <= pg["period_days"].max()]
        a.set_xticks(ticks, [f"{t:g}" for t in ticks])
        a.minorticks_off()
        strongest = ", ".join(f"{p:.2f}" for p in peaks["period_days"])
        a.set_title(f"periodogram; strongest periods {strongest} days", loc="left",
                    fontsize=10)
    a.set_xlabel("period (days)")
    a.grid(color=NEUTRALS["rule"], lw=0.4)

    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    path = Path(path)
    write_private_file(path, buffer.getvalue())
    return path
