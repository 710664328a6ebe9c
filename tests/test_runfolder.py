"""The run folder is written whole or not at all, with owner-only permissions."""
from __future__ import annotations

import os
import signal
import stat
import subprocess
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pytest

from planner.errors import InputError
from planner.runfolder import MARKER, RunFolderWriter, write_private_file

REPO = Path(__file__).resolve().parents[1]


def _mode(p: Path) -> int:
    return stat.S_IMODE(p.stat().st_mode)


def test_commit_publishes_all_files_owner_only(tmp_path):
    target = tmp_path / "run"
    with RunFolderWriter(target) as w:
        w.write_csv("plan.csv", pd.DataFrame({"a": [1, 2]}))
        w.write_json("summary.json", {"x": 1})
        assert not target.exists()  # nothing visible before the commit
    assert sorted(p.name for p in target.iterdir()) == [MARKER, "plan.csv", "summary.json"]
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
    assert sorted(p.name for p in target.iterdir()) == [MARKER, "a.csv"]


def test_private_file_is_atomic_and_owner_only(tmp_path):
    p = tmp_path / "x" / "f.bin"
    write_private_file(p, b"abc")
    assert p.read_bytes() == b"abc" and _mode(p) == 0o600


# Writes twenty files, says so, then waits on its standard input: the test kills it there, in
# the middle of the run folder (a handshake on the pipes, no polling with sleeps).
SLOW_WRITER = textwrap.dedent("""
    import sys
    from pathlib import Path
    from planner.runfolder import RunFolderWriter
    with RunFolderWriter(Path(sys.argv[1])) as w:
        for i in range(20):
            w.write_text(f"part{i:03d}.csv", "x" * 1000)
        print("written", flush=True)
        sys.stdin.readline()
        w.write_text("last.csv", "x")
""")


def test_kill_during_write_leaves_no_half_written_folder(tmp_path):
    target = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-c", SLOW_WRITER, str(target)], cwd=REPO,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "written"
        assert len(list(tmp_path.glob(".run.partial-*/part*.csv"))) == 20
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    assert not target.exists()
    # the next write cleans the leftover staging folder and publishes a complete folder
    with RunFolderWriter(target) as w:
        w.write_text("plan.csv", "ok\n")
    assert sorted(p.name for p in target.iterdir()) == [MARKER, "plan.csv"]
    assert not list(tmp_path.glob(".run.partial-*"))


# ------------------------------------------------------------------ what may be replaced


def _tree(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*") if p.is_file()}


def test_a_folder_with_someone_elses_files_is_refused_and_left_as_it_was(tmp_path):
    precious = tmp_path / "precious"
    (precious / "sub").mkdir(parents=True)
    (precious / "thesis.txt").write_text("years of work")
    (precious / "sub" / "data.csv").write_text("1\n")
    before = _tree(precious)
    with pytest.raises(InputError, match="holding files this tool did not write"):
        RunFolderWriter(precious)
    assert _tree(precious) == before


def test_a_users_file_inside_an_old_run_folder_keeps_it_from_being_replaced(tmp_path):
    target = tmp_path / "run"
    with RunFolderWriter(target) as w:
        w.write_text("plan.csv", "old\n")
    (target / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="notes.txt"):
        RunFolderWriter(target)
    assert (target / "notes.txt").read_text() == "mine"
    (target / "notes.txt").unlink()
    with RunFolderWriter(target) as w:                  # a plain old run folder is replaced
        w.write_text("plan.csv", "new\n")
    assert (target / "plan.csv").read_text() == "new\n"


def test_the_scenario_folder_its_parents_and_the_current_folder_are_never_targets(
        tmp_path, monkeypatch):
    scenario = tmp_path / "parent" / "scen"
    scenario.mkdir(parents=True)
    (scenario / "scenario.toml").write_text("name = 'x'\n")
    for target in (scenario, scenario.parent, tmp_path):
        with pytest.raises(InputError, match="scenario folder"):
            RunFolderWriter(target, protect=[scenario])
    monkeypatch.chdir(scenario)
    for target in (Path("."), Path(".."), scenario):
        with pytest.raises(InputError):
            RunFolderWriter(target)
    assert (scenario / "scenario.toml").exists()


def test_a_file_or_an_unwritable_place_is_refused_before_any_work(tmp_path):
    afile = tmp_path / "afile"
    afile.write_text("keep")
    with pytest.raises(InputError, match="existing file"):
        RunFolderWriter(afile)
    assert afile.read_text() == "keep"
    locked = tmp_path / "locked"
    locked.mkdir()
    os.chmod(locked, 0o500)
    try:
        if os.access(locked, os.W_OK):
            pytest.skip("running as a user who may write anywhere (root)")
        with pytest.raises(InputError, match="not writable"):
            RunFolderWriter(locked / "run")
    finally:
        os.chmod(locked, 0o700)
    assert not list(tmp_path.glob(".*partial-*"))


def test_a_second_run_to_the_same_folder_fails_at_once_and_spares_the_first(tmp_path):
    target = tmp_path / "conc"
    first = RunFolderWriter(target)
    first.write_text("plan.csv", "first\n")
    with pytest.raises(InputError, match="another run is writing"):
        RunFolderWriter(target)
    assert first.staging.exists()                     # the live staging folder survives
    first.commit()
    assert (target / "plan.csv").read_text() == "first\n"
    assert _mode(target) == 0o700
    with RunFolderWriter(target) as w:                # the lock is free again
        w.write_text("plan.csv", "second\n")
    assert (target / "plan.csv").read_text() == "second\n"


def test_private_write_replaces_whole_file(tmp_path) -> None:
    target = tmp_path / "a" / "x.csv"
    write_private_file(target, b"one")
    write_private_file(target, b"two")
    assert target.read_bytes() == b"two"
    assert stat.S_IMODE(os.stat(target).st_mode) == 0o600
    assert [p.name for p in target.parent.iterdir()] == ["x.csv"]
