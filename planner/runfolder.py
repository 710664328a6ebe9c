"""Write a run folder whole or not at all, readable by the owner only (README, "Outputs").

Files are first written into a hidden staging folder beside the target, then the staging folder
is renamed onto the target in one step. A process killed while writing leaves at most a hidden
``.<name>.partial-*`` folder; it never leaves a half-written run folder under the target name.

What may be replaced (checked before any work, and again at the moment of replacing):

- a missing folder, an empty folder, or a run folder this tool wrote — it holds the marker
  file :data:`MARKER` with the run's id and the list of its files, and nothing else;
- never a file, a folder holding anything else (a user's notes in an old run folder
  included), the scenario folder or any folder containing it, the current directory or any
  folder containing it.

A run holds an advisory lock on ``.<name>.lock`` beside the target from its start to its end
(and removes the file when it ends): a second run to the same target fails at once. Staging folders of the target are removed
only by their own run, or by a later run holding the lock (then no live run owns them).
"""
from __future__ import annotations

import fcntl
import json
import os
import shutil
import tempfile
import uuid
from pathlib import Path
from typing import Any, Callable, Iterable

import pandas as pd

from planner.errors import InputError, Problem

FILE_MODE = 0o600
DIR_MODE = 0o700
MARKER = ".planner-run.json"
NEW_FOLDER = "choose a new folder for --out, or remove this one yourself"


def _refuse(target: Path, problem: str, fix: str = NEW_FOLDER) -> InputError:
    return InputError(Problem("--out", f"{target} {problem}", fix))


def check_target(target: Path, protect: Iterable[Path] = ()) -> Path:
    """The resolved target of a run folder, or :class:`InputError` (exit 2) when it may not
    be written (module text). Nothing is changed."""
    raw = Path(target)
    if raw.name in ("", ".", ".."):
        raise _refuse(raw, "names the current folder or one above it")
    resolved = raw.expanduser().resolve()
    cwd = Path.cwd().resolve()
    if resolved == cwd or resolved in cwd.parents:
        raise _refuse(raw, "is the current folder or contains it")
    for folder in protect:
        kept = Path(folder).expanduser().resolve()
        if resolved == kept or resolved in kept.parents:
            raise _refuse(raw, f"is the scenario folder {kept.name} or contains it",
                          "write the run folder somewhere else (for example runs/NAME)")
    if resolved.exists() or resolved.is_symlink():
        if not resolved.is_dir() or resolved.is_symlink():
            raise _refuse(raw, "is an existing file, not a folder")
        extra = foreign_entries(resolved)
        if extra:
            shown = ", ".join(sorted(extra)[:5]) + (" …" if len(extra) > 5 else "")
            raise _refuse(raw, f"is an existing folder holding files this tool did not write "
                               f"({shown})")
    parent = resolved.parent
    while not parent.exists():
        parent = parent.parent
    if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
        raise _refuse(raw, f"cannot be created: the folder {parent} is not writable",
                      "choose a folder you may write to")
    return resolved


def foreign_entries(folder: Path) -> list[str]:
    """Entries of ``folder`` that are not part of a run folder this tool wrote (all of them
    when it has no marker)."""
    names = {p.name for p in folder.iterdir()}
    if not names:
        return []
    try:
        marker = json.loads((folder / MARKER).read_text(encoding="utf-8"))
        written = {Path(f).parts[0] for f in marker["files"]} | {MARKER}
    except (OSError, ValueError, KeyError, TypeError, IndexError):
        return sorted(names)
    return sorted(names - written)


class RunFolderWriter:
    """Collects the files of a run folder in a staging folder; :meth:`commit` publishes them."""

    def __init__(self, target: Path, protect: Iterable[Path] = ()):
        self.target = check_target(Path(target), protect)
        self.target.parent.mkdir(parents=True, exist_ok=True)
        self._lock_path = self.target.parent / f".{self.target.name}.lock"
        self._lock = open(self._lock_path, "a")
        try:
            fcntl.flock(self._lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
            # the lock file is removed when a run ends: make sure ours is still the one there
            if os.stat(self._lock_path).st_ino != os.fstat(self._lock.fileno()).st_ino:
                raise OSError("the lock file was replaced")
        except OSError:
            self._lock.close()
            raise _refuse(Path(target), "another run is writing to this folder now",
                          "wait for it to finish, or choose another folder for --out")
        # holding the lock: any staging folder of this target is a dead run's
        for stale in self.target.parent.glob(f".{self.target.name}.partial-*"):
            shutil.rmtree(stale, ignore_errors=True)
        self.staging = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.partial-",
                                             dir=self.target.parent))
        os.chmod(self.staging, DIR_MODE)
        self.run_id = uuid.uuid4().hex

    def _release(self) -> None:
        """Remove the lock file (still holding the lock, so no other run holds it) and
        unlock: nothing of the run stays beside the target."""
        if not self._lock.closed:
            self._lock_path.unlink(missing_ok=True)
            fcntl.flock(self._lock, fcntl.LOCK_UN)
            self._lock.close()

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
        """Publish the staging folder under the target name, replacing an older run folder
        (only one this tool wrote, checked again now)."""
        files = sorted(str(p.relative_to(self.staging)) for p in self.staging.rglob("*")
                       if p.is_file())
        self.write_json(MARKER, {"run_id": self.run_id, "files": files})
        for p in self.staging.rglob("*"):
            os.chmod(p, DIR_MODE if p.is_dir() else FILE_MODE)
        check_target(self.target)
        old = None
        if self.target.exists():
            old = self.target.with_name(f".{self.target.name}.partial-old")
            if old.exists():
                shutil.rmtree(old)
            os.replace(self.target, old)
        os.replace(self.staging, self.target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        self._release()
        return self.target

    def abort(self) -> None:
        shutil.rmtree(self.staging, ignore_errors=True)
        self._release()

    def __enter__(self) -> "RunFolderWriter":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self.abort()
        elif self.staging.exists():
            try:
                self.commit()
            except BaseException:
                self.abort()
                raise


def rounded(frame: pd.DataFrame) -> pd.DataFrame:
    """A table as the run folder writes it: floats to cents (2 places), shares, probabilities,
    ratios, savings and gaps to 4 places; dates as YYYY-MM-DD."""
    out = frame.copy()
    for col in out.columns:
        fine = any(word in str(col) for word in ("probability", "share", "ratio", "saving")) \
            or col == "gap"
        if out[col].dtype.kind == "f":
            out[col] = out[col].round(4 if fine else 2)
        elif out[col].dtype.kind == "M":
            out[col] = out[col].dt.strftime("%Y-%m-%d")
    return out


def write_private_file(path: Path, data: bytes) -> None:
    """Write one file atomically (temp file + rename) with owner-only permissions."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, FILE_MODE)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
