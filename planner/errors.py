"""The one exception hierarchy of the planner.

Every error a user can cause by their input is an :class:`InputError`; the CLI turns it into a
message per problem and exit code 2. Anything else is a bug and exits with code 1.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One thing wrong with the input, located as precisely as we can.

    ``line`` is the line number in the file as a text editor shows it (the CSV header is line 1),
    or ``None`` when the problem concerns the whole file; ``row`` instead counts the data rows of
    a file without lines (Parquet), from 1. ``column`` is the CSV column or, in a TOML file, the
    dotted name of the setting (``planning.horizon_days``).
    """

    file: str
    problem: str
    fix: str
    line: int | None = None
    column: str | None = None
    row: int | None = None

    def __str__(self) -> str:
        where = self.file
        if self.line is not None:
            where += f", line {self.line}"
        if self.row is not None:
            where += f", row {self.row}"
        if self.column is not None:
            kind = "setting" if self.file.endswith(".toml") else "column"
            where += f", {kind} '{self.column}'"
        return f"{where}: {self.problem}. Fix: {self.fix}"


class PlannerError(Exception):
    """Base of every error the planner raises on purpose."""


class InputError(PlannerError):
    """The scenario folder (or an option) is malformed; carries every problem found."""

    def __init__(self, problems: list[Problem] | Problem):
        self.problems = [problems] if isinstance(problems, Problem) else list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class SolverError(PlannerError):
    """No solver could produce any plan (not even a feasible one)."""
