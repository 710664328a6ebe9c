"""Write a run folder whole or not at all, readable by the owner only (README, "Outputs").

Files are first written into a hidden staging folder beside the target, then the staging folder
is renamed onto the target in one step. A process killed while writing leaves at most a hidden
``.<name>.partial-*`` folder, which the next write to the same target removes; it never leaves a
half-written run folder under the target name.
"""
from __future__ import annotations

import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any, Callable

import pandas as pd

FILE_MODE = 0o600
DIR_MODE = 0o700


class RunFolderWriter:
    """Collects the files of a run folder in a staging folder; :meth:`commit` publishes them."""

    def __init__(self, target: Path):
        self.target = Path(target)
        self.target.parent.mkdir(parents=True, exist_ok=True)
        for stale in self.target.parent.glob(f".{self.target.name}.partial-*"):
            shutil.rmtree(stale, ignore_errors=True)
        self.staging = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.partial-",
                                             dir=self.target.parent))
        os.chmod(self.staging, DIR_MODE)

    def path(self, name: str) -> Path:
        """Path of a file inside the staging folder (for writers that take a path)."""
        p = self.staging / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def write_bytes(self, name: str, data: bytes) -> None:
        p = self.path(name)
        fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, FILE_MODE)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)

    def write_text(self, name: str, text: str) -> None:
        self.write_bytes(name, text.encode("utf-8"))

    def write_csv(self, name: str, frame: pd.DataFrame, **kwargs: Any) -> None:
        self.write_text(name, frame.to_csv(index=False, lineterminator="\n", **kwargs))

    def write_json(self, name: str, data: Any) -> None:
        self.write_text(name, json.dumps(data, indent=2, sort_keys=True, default=str) + "\n")

    def write_with(self, name: str, writer: Callable[[Path], None]) -> None:
        """Let ``writer(path)`` write a file (charts, spreadsheets), then restrict it."""
        p = self.path(name)
        writer(p)
        os.chmod(p, FILE_MODE)

    def commit(self) -> Path:
        """Publish the staging folder under the target name, replacing an older run folder."""
        for p in self.staging.rglob("*"):
            os.chmod(p, DIR_MODE if p.is_dir() else FILE_MODE)
        old = None
        if self.target.exists():
            old = self.target.with_name(f".{self.target.name}.partial-old")
            if old.exists():
                shutil.rmtree(old)
            os.replace(self.target, old)
        os.replace(self.staging, self.target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        return self.target

    def abort(self) -> None:
        shutil.rmtree(self.staging, ignore_errors=True)

    def __enter__(self) -> "RunFolderWriter":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self.abort()
        elif self.staging.exists():
            self.commit()


def write_private_file(path: Path, data: bytes) -> None:
    """Write one file atomically (temp file + rename) with owner-only permissions."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.chmod(tmp, FILE_MODE)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
