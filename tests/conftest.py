"""Shared fixtures: a private copy of the tiny demo scenario, and a way to change one file of it."""
from __future__ import annotations

import shutil
from pathlib import Path
from typing import Callable

import pytest

TINY = Path(__file__).resolve().parents[1] / "scenarios" / "tiny"

# An edit receives the file's text ("" if the file does not exist) and returns the new content:
# text (written as UTF-8), bytes (written as they are) or None (the file is deleted).
Edit = Callable[[str], "str | bytes | None"]


def rewrite(folder: Path, name: str, edit: Edit) -> Path:
    """Replace file ``name`` of a scenario folder by ``edit(old text)``; returns its path."""
    path = folder / name
    old = path.read_text(encoding="utf-8", errors="replace") if path.is_file() else ""
    new = edit(old)
    if new is None:
        path.unlink(missing_ok=True)
    elif isinstance(new, bytes):
        path.write_bytes(new)
    else:
        path.write_text(new, encoding="utf-8", newline="")
    return path


@pytest.fixture
def tiny_dir(tmp_path: Path) -> Path:
    """A copy of ``scenarios/tiny`` in the test's own temporary folder."""
    return Path(shutil.copytree(TINY, tmp_path / "tiny"))


@pytest.fixture
def rewrite_tiny(tiny_dir: Path) -> Callable[[str, Edit], Path]:
    """``rewrite_tiny(name, edit)``: change one file of the ``tiny_dir`` copy."""
    return lambda name, edit: rewrite(tiny_dir, name, edit)
