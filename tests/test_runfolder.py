"""The run folder is written whole or not at all, with owner-only permissions."""
from __future__ import annotations

import os
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pandas as pd
import pytest

from planner.runfolder import RunFolderWriter, write_private_file

REPO = Path(__file__).resolve().parents[1]


def _mode(p: Path) -> int:
    return stat.S_IMODE(p.stat().st_mode)


def test_commit_publishes_all_files_owner_only(tmp_path):
    target = tmp_path / "run"
    with RunFolderWriter(target) as w:
        w.write_csv("plan.csv", pd.DataFrame({"a": [1, 2]}))
        w.write_json("summary.json", {"x": 1})
        assert not target.exists()  # nothing visible before the commit
    assert sorted(p.name for p in target.iterdir()) == ["plan.csv", "summary.json"]
    assert _mode(target) == 0o700
    assert all(_mode(p) == 0o600 for p in target.iterdir())
    assert not list(tmp_path.glob(".run.partial-*"))


def test_error_while_writing_leaves_old_folder_untouched(tmp_path):
    target = tmp_path / "run"
    with RunFolderWriter(target) as w:
        w.write_text("plan.csv", "old\n")
    with pytest.raises(RuntimeError):
        with RunFolderWriter(target) as w:
            w.write_text("plan.csv", "new\n")
            raise RuntimeError("stage failed")
    assert (target / "plan.csv").read_text() == "old\n"
    assert not list(tmp_path.glob(".run.partial-*"))


def test_rewrite_replaces_the_whole_folder(tmp_path):
    target = tmp_path / "run"
    with RunFolderWriter(target) as w:
        w.write_text("a.csv", "1\n")
        w.write_text("b.csv", "1\n")
    with RunFolderWriter(target) as w:
        w.write_text("a.csv", "2\n")
    assert sorted(p.name for p in target.iterdir()) == ["a.csv"]


def test_private_file_is_atomic_and_owner_only(tmp_path):
    p = tmp_path / "x" / "f.bin"
    write_private_file(p, b"abc")
    assert p.read_bytes() == b"abc" and _mode(p) == 0o600


SLOW_WRITER = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from planner.runfolder import RunFolderWriter
    with RunFolderWriter(Path(sys.argv[1])) as w:
        for i in range(200):
            w.write_text(f"part{i:03d}.csv", "x" * 1000)
            time.sleep(0.01)
""")


def test_kill_during_write_leaves_no_half_written_folder(tmp_path):
    target = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-c", SLOW_WRITER, str(target)], cwd=REPO)
    deadline = time.monotonic() + 30
    while not list(tmp_path.glob(".run.partial-*/part01*.csv")):
        assert time.monotonic() < deadline, "writer never started"
        time.sleep(0.005)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert not target.exists()
    # the next write cleans the leftover staging folder and publishes a complete folder
    with RunFolderWriter(target) as w:
        w.write_text("plan.csv", "ok\n")
    assert [p.name for p in target.iterdir()] == ["plan.csv"]
    assert not list(tmp_path.glob(".run.partial-*"))
