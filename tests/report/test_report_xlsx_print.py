"""plan.xlsx as printed: the demo's workbook converted to PDF by LibreOffice (headless), then
read back word by word with their boxes (poppler's ``pdftotext -bbox``).

Checks: no cell prints as "###" (a number wider than its column), every header word is on the
page, the page header stands above the table's header row and that row above the first data
row (no overlap), and every column prints on the same page as the first one (nothing runs past
the page). Skipped, with the reason, where LibreOffice or poppler is not installed; ``.ci/run``
installs both (Debian packages libreoffice-calc-nogui and poppler-utils).
"""
from __future__ import annotations

import html
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from planner.demo import demo_path
from planner.pipeline import PlanOptions, run_plan
from planner.report.xlsx import PLAN_COLUMNS

SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")
PDFTOTEXT = shutil.which("pdftotext")
pytestmark = pytest.mark.skipif(
    SOFFICE is None or PDFTOTEXT is None,
    reason="LibreOffice (soffice) and poppler's pdftotext are needed to print plan.xlsx: "
           "apt-get install libreoffice-calc-nogui poppler-utils")

WORD = re.compile(r'<word xMin="([\d.]+)" yMin="([\d.]+)" xMax="([\d.]+)" yMax="([\d.]+)">'
                  r'([^<]*)</word>')
PAGE = re.compile(r'<page width="([\d.]+)" height="([\d.]+)">(.*?)</page>', re.S)


@pytest.fixture(scope="module")
def printed(tmp_path_factory) -> list[dict]:
    """The demo's plan.xlsx as PDF pages: ``[{"width", "height", "words": [(x0, y0, x1, y1,
    text)]}]``."""
    root = tmp_path_factory.mktemp("print")
    options = PlanOptions(path_count=60, origins=1, evaluate=False, calibrate=False,
                          diagnose=False)
    run_plan(demo_path(), root / "run", options=options)
    book = root / "plan.xlsx"
    shutil.copyfile(root / "run" / "plan.xlsx", book)
    profile = (root / "profile").as_uri()
    subprocess.run([SOFFICE, f"-env:UserInstallation={profile}", "--headless",
                    "--convert-to", "pdf", "--outdir", str(root), str(book)],
                   check=True, capture_output=True, timeout=300)
    subprocess.run([PDFTOTEXT, "-bbox", str(root / "plan.pdf"), str(root / "plan.html")],
                   check=True, capture_output=True, timeout=120)
    text = (root / "plan.html").read_text(encoding="utf-8")
    pages = []
    for width, height, body in PAGE.findall(text):
        words = [(float(a), float(b), float(c), float(d), html.unescape(w))
                 for a, b, c, d, w in WORD.findall(body)]
        pages.append({"width": float(width), "height": float(height), "words": words,
                      "book": book})
    return pages


def _depot_pages(pages: list[dict]) -> list[dict]:
    """Pages of the depot sheets (their page header reads "Replenishment plan: Depot …")."""
    return [p for p in pages
            if any(a[4] == "plan:" and b[4] == "Depot" for a, b in zip(p["words"],
                                                                     p["words"][1:]))]


def test_no_cell_prints_as_hashes(printed):
    assert printed
    for number, page in enumerate(printed, start=1):
        assert not any("###" in w[4] for w in page["words"]), f"page {number}"


def test_every_header_word_prints_on_every_depot_page(printed):
    depot_pages = _depot_pages(printed)
    assert depot_pages
    for page in depot_pages:
        words = {w[4] for w in page["words"]}
        for header, *_ in PLAN_COLUMNS:
            for word in header.split():
                assert word in words, (header, word)


def test_page_header_table_header_and_first_row_do_not_overlap(printed):
    for page in _depot_pages(printed):
        words = page["words"]
        confidential = [w for w in words if w[4] == "Confidential"]
        assert confidential
        page_header_bottom = max(w[3] for w in confidential)
        # the table's header row: from the "Day" heading to the lowest word of any heading
        heads = {word for header, *_ in PLAN_COLUMNS for word in header.split()}
        day = min((w for w in words if w[4] == "Day"), key=lambda w: w[1])
        header_top = day[1]
        header_words = [w for w in words if w[4] in heads and w[1] < day[1] + 40]
        header_bottom = max(w[3] for w in header_words)
        body = [w for w in words if w[1] > header_bottom - 0.5 and w[4] not in heads
                and w[1] < page["height"] - 60]
        assert page_header_bottom < header_top, "page header over the table's header row"
        assert body, "no data row below the header"
        first_row_top = min(w[1] for w in body)
        assert header_bottom <= first_row_top + 0.5, "header row runs into the first row"


def test_every_column_prints_on_the_page_of_the_first(printed):
    # a column pushed past the page would print on a page of its own, without the "Day" column
    for page in _depot_pages(printed):
        words = {w[4] for w in page["words"]}
        assert "Day" in words and "Reason" in words
        assert all(w[2] <= page["width"] + 0.5 for w in page["words"])


def test_every_summary_label_prints_whole(printed):
    import openpyxl

    sheet = openpyxl.load_workbook(printed[0]["book"])["Summary"]
    labels = []
    for (value,) in sheet.iter_rows(min_row=2, max_col=1, values_only=True):
        if value is None:
            break
        labels.append(str(value))
    assert len(labels) > 10
    summary_pages = [p for p in printed if p not in _depot_pages(printed)]
    words = {w[4] for p in summary_pages for w in p["words"]}
    for label in labels:
        assert all(word in words for word in label.split()), label
