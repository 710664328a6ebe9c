"""Invented demo scenarios shipped with the package (see README.md in this folder)."""
from __future__ import annotations

from pathlib import Path

HERE = Path(__file__).parent


def demo_path(name: str = "northvale") -> Path:
    """Folder of a bundled demo scenario: ``northvale`` (the demo network) or ``tiny``."""
    path = HERE / name
    if not (path / "scenario.toml").is_file():
        raise FileNotFoundError(f"demo scenario {name!r} is not installed at {path}")
    return path
