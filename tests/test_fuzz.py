"""Fuzzing the loaders and the command line: whatever the bytes or the option values, the
outcome is exit 0 or exit 2 with a message — never a traceback — and nothing outside the run
folder changes. Seeded (derandomized), so every run tries the same cases."""
from __future__ import annotations

import shutil
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from planner.cli import app
from planner.errors import InputError
from planner.scenario import load_scenario
from conftest import TINY

runner = CliRunner()
FILES = ("scenario.toml", "terminals.csv", "depots.csv", "dispense.csv", "committed.csv")
SETTINGS = settings(max_examples=40, deadline=None, derandomize=True, database=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): p.read_bytes() for p in folder.rglob("*")
            if p.is_file()}


@SETTINGS
@given(file=st.sampled_from(FILES), cut=st.floats(0.0, 1.0), junk=st.binary(max_size=40))
def test_truncated_or_spliced_files_give_an_input_error_or_a_scenario(tmp_path_factory, file,
                                                                     cut, junk):
    folder = Path(shutil.copytree(TINY, tmp_path_factory.mktemp("fz") / "tiny"))
    path = folder / file
    data = path.read_bytes() if path.exists() else b""
    path.write_bytes(data[:int(len(data) * cut)] + junk)
    try:
        load_scenario(folder)
    except InputError as exc:
        assert exc.problems and all(p.problem and p.fix for p in exc.problems)


@SETTINGS
@given(horizon=st.integers(-5, 10**7), paths=st.integers(-5, 10**7),
       seed=st.integers(-10**20, 10**20))
def test_random_option_values_never_crash_and_touch_nothing(tmp_path_factory, horizon, paths,
                                                           seed):
    base = tmp_path_factory.mktemp("opt")
    folder = Path(shutil.copytree(TINY, base / "tiny"))
    before = _snapshot(base)
    # a tiny memory limit: every run that passes the checks stops before the work
    result = runner.invoke(app, ["plan", str(folder), "--out", str(base / "run"),
                                 "--horizon", str(horizon), "--paths", str(paths),
                                 "--seed", str(seed), "--max-memory", "0.000001"])
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output and result.output.strip()
    assert _snapshot(base) == before
    assert not (base / "run").exists()
