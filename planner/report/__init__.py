"""The run folder's human-readable outputs: ``report.html`` and ``plan.xlsx``.

- :func:`write_report` — one self-contained HTML page (charts embedded, no external resource,
  prints on A4): :mod:`planner.report.html`, charts in :mod:`planner.report.charts`, colours
  in :mod:`planner.report.palette`.
- :func:`write_plan_xlsx` — the plan as a spreadsheet ready to print, one sheet per depot:
  :mod:`planner.report.xlsx`.
"""
from __future__ import annotations

__all__ = ["write_report", "render_report", "write_plan_xlsx", "plan_workbook"]


def __getattr__(name: str):
    # matplotlib and openpyxl are loaded on first use only
    if name in ("write_report", "render_report"):
        from planner.report import html

        return getattr(html, name)
    if name in ("write_plan_xlsx", "plan_workbook"):
        from planner.report import xlsx

        return getattr(xlsx, name)
    raise AttributeError(f"module 'planner.report' has no attribute {name!r}")
