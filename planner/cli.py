"""Command line: a thin Typer app over :mod:`planner.pipeline`.

Each command parses its options, makes one library call and prints. Exit codes: 0 ok, 2 bad
input (one message per problem), 1 internal error (short message; ``--debug`` shows the
traceback).
"""
from __future__ import annotations

import json
import os
import sys

# The work is many small linear-algebra problems (one per terminal, spread over processes with
# --jobs); threaded BLAS only adds contention there, so one BLAS thread per process unless the
# user chose otherwise. Set before numpy is first imported.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
from pathlib import Path
from typing import Annotated, Callable, Optional

import typer
from rich.console import Console
from rich.table import Table

from planner import __version__
from planner.errors import InputError, PlannerError

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help="Cash replenishment planner: visit days and loads for cash machines, from dispense "
         "history to a costed plan.",
)
console = Console(stderr=False, highlight=False, width=None if sys.stdout.isatty() else 120)
errors = Console(stderr=True, highlight=False)

SCENARIO_HELP = ("Scenario folder (scenario.toml, terminals.csv, depots.csv, dispense.csv, "
                 "optional committed.csv). Default: the bundled demo network.")

ScenarioArg = Annotated[Optional[Path], typer.Argument(help=SCENARIO_HELP, show_default=False,
                                                       metavar="SCENARIO")]
OutOpt = typer.Option("--out", "-o", help="Run folder to write: a new or empty folder, or an "
                                           "earlier run folder of this tool holding nothing "
                                           "else (then replaced whole).")
HorizonOpt = Annotated[Optional[int], typer.Option(
    "--horizon", min=1, help="Horizon in days (default: the scenario's planning.horizon_days).")]
PathsOpt = Annotated[Optional[int], typer.Option(
    "--paths", min=1, help="Number of demand paths (default: the scenario's paths.count).")]
SeedOpt = Annotated[Optional[int], typer.Option(
    "--seed", help="Random seed for the demand paths (default: the scenario's paths.seed).")]
JobsOpt = Annotated[int, typer.Option(
    "--jobs", "-j", min=1, help="Worker processes for the per-terminal and per-depot work "
                                "(with --executor dask and no --scheduler: the workers of the "
                                "local cluster).")]
EngineOpt = Annotated[str, typer.Option(
    "--executor", help="Where the per-terminal and per-depot work runs: 'local' processes "
                       "or a 'dask' cluster (README, 'Larger networks').")]
SchedulerOpt = Annotated[Optional[str], typer.Option(
    "--scheduler", help="With --executor dask: the cluster's scheduler, tls://HOST:PORT (or "
                        "tcp://HOST:PORT on this machine or with --insecure); without it a "
                        "local cluster of --jobs workers is started.")]
TlsCaOpt = Annotated[Optional[str], typer.Option(
    "--tls-ca-file", help="With a tls:// scheduler: the CA certificate (PEM).")]
TlsCertOpt = Annotated[Optional[str], typer.Option(
    "--tls-cert", help="With a tls:// scheduler: this client's certificate (PEM).")]
TlsKeyOpt = Annotated[Optional[str], typer.Option(
    "--tls-key", help="With a tls:// scheduler: this client's private key (PEM).")]
InsecureOpt = Annotated[bool, typer.Option(
    "--insecure", help="Allow a plain tcp:// scheduler on another machine (plans and "
                       "dispense histories then cross the network unencrypted).")]
TimeLimitOpt = Annotated[float, typer.Option("--time-limit", min=1.0,
                                             help="Solver time limit in seconds (per plan).")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="Print only errors.")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print the result as JSON.")]
DebugOpt = Annotated[bool, typer.Option("--debug", help="Show tracebacks of internal errors.")]


def _version(value: bool) -> None:
    if value:
        console.print(f"planner {__version__}")
        raise typer.Exit()


@app.callback()
def main(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    """Cash replenishment planner."""


def _run(debug: bool, action: Callable[[], int | None], as_json: bool = False) -> None:
    """Run one library call, mapping our errors to exit codes and clear messages (with
    ``as_json`` also a JSON object of the problems on standard output)."""
    try:
        code = action()
    except InputError as exc:
        if as_json:
            console.print_json(json.dumps({"ok": False, "exit_code": 2, "problems": [
                {"file": p.file, "line": p.line, "column": p.column, "problem": p.problem,
                 "fix": p.fix} for p in exc.problems]}))
        errors.print(f"[bold]Input problem{'s' if len(exc.problems) > 1 else ''} "
                     f"({len(exc.problems)}):[/bold]")
        for p in exc.problems:
            errors.print(f"  - {p}", markup=False)
        raise typer.Exit(2)
    except PlannerError as exc:
        errors.print(f"Error: {exc}", markup=False)
        raise typer.Exit(1)
    except (KeyboardInterrupt, typer.Exit):
        raise
    except Exception as exc:  # noqa: BLE001 - the last line of defence for users
        if debug:
            raise
        errors.print(f"Internal error: {type(exc).__name__}: {exc}", markup=False)
        errors.print("Rerun with --debug to see the traceback, and report it with the "
                     "scenario folder if you can.")
        raise typer.Exit(1)
    if code:
        raise typer.Exit(code)


def _engine(engine: str, scheduler: Optional[str], tls_ca_file: Optional[str],
            tls_cert: Optional[str], tls_key: Optional[str], insecure: bool,
            jobs: int) -> dict:
    """The executor fields of :class:`planner.options.PlanOptions` from the command line
    (refused settings raise :class:`InputError` before any work)."""
    from planner.errors import Problem
    from planner.executor import ClusterSettings, check_cluster_settings, engine_problems

    if engine_problems(engine):
        raise InputError(engine_problems(engine))
    given = [name for name, value in (("--scheduler", scheduler), ("--tls-ca-file",
             tls_ca_file), ("--tls-cert", tls_cert), ("--tls-key", tls_key),
             ("--insecure", insecure)) if value]
    if engine == "local":
        if given:
            raise InputError(Problem(given[0], f"{given[0]} is given without --executor dask",
                                     "add --executor dask, or leave it out"))
        return {"jobs": jobs}
    cluster = ClusterSettings(address=scheduler, workers=jobs, tls_ca_file=tls_ca_file,
                              tls_cert=tls_cert, tls_key=tls_key, insecure=insecure)
    problems = check_cluster_settings(cluster)
    if problems:
        raise InputError(problems)
    return {"jobs": jobs, "engine": "dask", "cluster": cluster}


def _scenario_path(scenario: Optional[Path]) -> Path:
    from planner.demo import demo_path

    return scenario if scenario is not None else demo_path()


def _print_warnings(warnings: tuple[str, ...] | list[str], quiet: bool) -> None:
    if quiet:
        return
    for w in warnings:
        errors.print(f"[yellow]notice[/yellow] {w}", markup=True, highlight=False)


class StageProgress:
    """Rich progress bars for pipeline stages (elapsed and remaining time), as the
    ``progress(stage, done, total)`` callback of :mod:`planner.pipeline`."""

    LABELS = {"clean": "Cleaning history", "forecast": "Forecasting terminals",
              "optimize": "Optimizing the schedule", "evaluate": "Checking out of sample",
              "diagnose": "Diagnosing the history",
              "backtest": "Replaying past weeks", "compare": "Planning what-if variants",
              "report": "Writing report"}

    def __init__(self, enabled: bool):
        from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                                   TimeElapsedColumn, TimeRemainingColumn)

        self.enabled = enabled
        self.bar = Progress(TextColumn("{task.description:<26}"), BarColumn(),
                            MofNCompleteColumn(), TimeElapsedColumn(), TextColumn("left"),
                            TimeRemainingColumn(), console=errors, transient=False)
        self.tasks: dict[str, int] = {}

    def __call__(self, stage: str, done: int, total: int) -> None:
        if not self.enabled:
            return
        if stage not in self.tasks:
            self.tasks[stage] = self.bar.add_task(self.LABELS.get(stage, stage), total=total)
        self.bar.update(self.tasks[stage], completed=done, total=total)

    def __enter__(self) -> "StageProgress":
        if self.enabled:
            self.bar.start()
        return self

    def __exit__(self, *exc) -> None:
        if self.enabled:
            self.bar.stop()


def _frame_table(frame, title: str, max_rows: int = 200) -> Table:
    table = Table(title=title, title_justify="left")
    for col in frame.columns:
        # long names without spaces (a variant's KEY=VALUE) fold onto the next line instead
        # of being cut
        table.add_column(str(col).replace("_", " "), overflow="fold",
                         justify="right" if frame[col].dtype.kind in "iuf" else "left")
    for _, row in frame.head(max_rows).iterrows():
        table.add_row(*[_cell(v) for v in row])
    return table


def _cell(v) -> str:
    import math

    import pandas as pd

    if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
        return "—"
    if isinstance(v, float):
        if v.is_integer() and abs(v) >= 1:
            return f"{v:,.0f}"
        return f"{v:,.3f}" if abs(v) < 10 else f"{v:,.0f}"
    if isinstance(v, pd.Timestamp):
        return f"{v:%Y-%m-%d}"
    return str(v)


# ---------------------------------------------------------------------------------------------


@app.command()
def check(
    scenario: ScenarioArg = None,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Validate a scenario folder and print a data-quality table per terminal."""

    def action() -> None:
        from planner.pipeline import check_scenario

        result = check_scenario(_scenario_path(scenario))
        if as_json:
            console.print_json(json.dumps({
                "scenario": result.scenario.name,
                "warnings": list(result.scenario.warnings),
                "terminals": json.loads(result.quality.to_json(orient="records",
                                                               date_format="iso")),
                "network": result.network,
                "undeclared_calendar_effects": json.loads(
                    result.calendar.to_json(orient="records")),
            }))
            return
        _print_warnings(list(result.scenario.warnings) + result.crewless_commitments(), False)
        console.print(_frame_table(result.understood(), "What the scenario says"))
        console.print(_frame_table(result.quality, f"Data quality — {result.scenario.name}"))
        console.print(_frame_table(result.network_frame(), "Network totals"))
        if len(result.calendar):
            shown = result.calendar.assign(z=result.calendar["z"].round(1))
            console.print(_frame_table(shown[["effect", "z", "months_shown", "months", "add"]],
                                       "Calendar effects in the history that scenario.toml "
                                       "does not declare (not used by the forecast)"))
        console.print("[green]Scenario is valid.[/green]")

    _run(debug, action, as_json)


@app.command()
def plan(
    scenario: ScenarioArg = None,
    out: Annotated[Path, OutOpt] = Path("runs/plan"),
    horizon: HorizonOpt = None,
    paths: PathsOpt = None,
    seed: SeedOpt = None,
    jobs: JobsOpt = 1,
    engine: EngineOpt = "local",
    scheduler: SchedulerOpt = None,
    tls_ca_file: TlsCaOpt = None,
    tls_cert: TlsCertOpt = None,
    tls_key: TlsKeyOpt = None,
    insecure: InsecureOpt = False,
    time_limit: TimeLimitOpt = 60.0,
    backtest_weeks: Annotated[int, typer.Option(
        "--backtest-weeks", min=0, help="Also replay this many past weeks against the "
                                        "baseline routines (0: no replay).")] = 0,
    sets: Annotated[Optional[list[str]], typer.Option(
        "--set", "-s", help="Also compare a what-if variant KEY=VALUE (repeatable; see "
                            "'planner compare --help').")] = None,
    variant: Annotated[Optional[list[Path]], typer.Option(
        "--variant", help="Also compare the what-if variant of this TOML file "
                          "(repeatable).")] = None,
    max_memory: Annotated[Optional[float], typer.Option(
        "--max-memory", min=0.0, help="Refuse the run when its memory estimate exceeds this, "
                                      "in GB (default: the memory available now).")] = None,
    quiet: QuietOpt = False,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Forecast demand, plan visits and loads, and write the run folder (plan.csv, orders.csv,
    summary.json, report.html, plan.xlsx and more); optionally with a replay of past weeks and
    what-if variants, which then appear in the report too."""

    def action() -> None:
        from planner.pipeline import PlanOptions, run_plan

        options = PlanOptions(horizon_days=horizon, path_count=paths, seed=seed,
                              time_limit_s=time_limit, backtest_weeks=backtest_weeks,
                              what_if=tuple(sets or ()), variant_files=tuple(variant or ()),
                              max_memory_gb=max_memory,
                              **_engine(engine, scheduler, tls_ca_file, tls_cert, tls_key,
                                        insecure, jobs))
        with StageProgress(enabled=not (quiet or as_json)) as progress:
            result = run_plan(_scenario_path(scenario), out, options=options,
                              progress=progress)
        if as_json:
            console.print_json(json.dumps(result.summary, default=str))
            return
        if quiet:
            return
        _print_warnings(list(result.scenario.warnings)
                        + list(result.summary.get("calendar_notices", [])), quiet)
        console.print(_frame_table(result.summary_frame(), "Plan summary"))
        for note in result.notes():
            console.print(f"[yellow]target not reachable[/yellow] {note}", highlight=False)
        for line in result.advice():
            console.print(f"[yellow]over the target[/yellow] {line}", highlight=False)
        console.print(f"Run folder written: [bold]{result.run_folder}[/bold]")

    _run(debug, action, as_json)


@app.command()
def forecast(
    scenario: ScenarioArg = None,
    out: Annotated[Path, OutOpt] = Path("runs/forecast"),
    horizon: HorizonOpt = None,
    paths: PathsOpt = None,
    seed: SeedOpt = None,
    origins: Annotated[int, typer.Option(
        "--origins", min=1, help="Weekly backtest origins used to choose each terminal's "
                                 "model.")] = 8,
    jobs: JobsOpt = 1,
    quiet: QuietOpt = False,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Forecast demand per terminal: accuracy by model from a rolling-origin backtest, the
    champion per terminal, and forecasts (written to the run folder)."""

    def action() -> None:
        from planner.pipeline import PlanOptions, run_forecast

        options = PlanOptions(horizon_days=horizon, path_count=paths, seed=seed, jobs=jobs,
                              origins=origins, tail_days=0)
        result = run_forecast(_scenario_path(scenario), out, options=options)
        if as_json:
            console.print_json(result.by_model.to_json(orient="records"))
            return
        if quiet:
            return
        _print_warnings(result.scenario.warnings, quiet)
        from planner.forecast.models import model_label

        shown = result.by_model.copy()
        if "model" in shown.columns:
            shown["model"] = shown["model"].map(model_label)
        elif shown.index.name == "model":
            shown.index = shown.index.map(model_label)
        console.print(_frame_table(shown, "Forecast accuracy by model "
                                                    "(median over terminals)"))
        console.print("Champion per terminal and its reason: champions.csv in the run folder.")
        console.print(f"Run folder written: [bold]{result.run_folder}[/bold]")

    _run(debug, action, as_json)


@app.command()
def diagnose(
    scenario: ScenarioArg = None,
    terminal: Annotated[Optional[list[str]], typer.Option(
        "--terminal", "-t", help="Terminal id to diagnose (repeatable) (default: all "
                                 "terminals).")] = None,
    out: Annotated[Path, OutOpt] = Path("runs/diagnose"),
    quiet: QuietOpt = False,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Statistical diagnostics per terminal: descriptive statistics, ADF and KPSS, ACF and
    PACF, periodogram, and residual tests (Ljung-Box, Durbin-Watson, Breusch-Godfrey) of the
    champion model; tables and one chart page per terminal."""

    def action() -> None:
        from planner.pipeline import run_diagnose

        result = run_diagnose(_scenario_path(scenario), out, terminal_ids=terminal or None)
        if as_json:
            console.print_json(result.tests.to_json(orient="records"))
            return
        if quiet:
            return
        console.print(_frame_table(result.tests, "Diagnostics"))
        console.print(f"Run folder written: [bold]{result.run_folder}[/bold]")

    _run(debug, action, as_json)


@app.command()
def backtest(
    scenario: ScenarioArg = None,
    weeks: Annotated[int, typer.Option(
        "--weeks", "-w", min=1, help="Weeks to replay, ending with the last day of "
                                     "history.")] = 12,
    past_visits: Annotated[Optional[Path], typer.Option(
        "--past-visits", help="CSV of the visits actually made (terminal_id, date, load), "
                              "replayed as one more baseline routine.")] = None,
    out: Annotated[Path, OutOpt] = Path("runs/backtest"),
    paths: PathsOpt = None,
    seed: SeedOpt = None,
    origins: Annotated[int, typer.Option(
        "--origins", min=1, help="Weekly origins of the model-choice backtest inside each "
                                 "weekly plan.")] = 4,
    jobs: JobsOpt = 1,
    engine: EngineOpt = "local",
    scheduler: SchedulerOpt = None,
    tls_ca_file: TlsCaOpt = None,
    tls_cert: TlsCertOpt = None,
    tls_key: TlsKeyOpt = None,
    insecure: InsecureOpt = False,
    time_limit: TimeLimitOpt = 60.0,
    quiet: QuietOpt = False,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Replay past weeks: each week plan with the data known then, execute 7 days against the
    recorded demand, carry the balances; compare with baseline routines and the
    perfect-foresight bound."""

    def action() -> None:
        from planner.pipeline import PlanOptions, run_backtest

        options = PlanOptions(path_count=paths, seed=seed, origins=origins,
                              time_limit_s=time_limit,
                              **_engine(engine, scheduler, tls_ca_file, tls_cert, tls_key,
                                        insecure, jobs))
        say = None if (quiet or as_json) else (lambda text: errors.print(text, markup=False))
        result = run_backtest(_scenario_path(scenario), out, weeks=weeks, options=options,
                              past_visits=past_visits, progress=say)
        if as_json:
            console.print_json(result.table.to_json(orient="records"))
            return
        if quiet:
            return
        console.print(_frame_table(result.compact(), "Backtest by policy"))
        for line in result.summary.get("headline", []):
            console.print(line, markup=False)
        console.print(f"Run folder written: [bold]{out}[/bold]")

    _run(debug, action, as_json)


COMPARE_EXAMPLES = (
    "Examples: planner compare --set costs.visit_fee=+15%\n\n"
    "planner compare --set depots.Ashmere.max_visits_per_day=3\n\n"
    "planner compare -s 'costs.visit_fee=+15%;costs.carry_rate_annual=0.06' (one variant "
    "of two changes)")


@app.command(epilog=COMPARE_EXAMPLES)
def compare(
    scenario: ScenarioArg = None,
    sets: Annotated[Optional[list[str]], typer.Option(
        "--set", "-s", help="One what-if variant as KEY=VALUE, several joined by ';' or ',' "
                            "(repeat --set for more variants); examples below.")] = None,
    variant: Annotated[Optional[list[Path]], typer.Option(
        "--variant", help="TOML file of one variant (same keys as scenario.toml, plus a "
                          "table per depot, depots.NAME); repeatable.")] = None,
    out: Annotated[Path, OutOpt] = Path("runs/compare"),
    paths: PathsOpt = None,
    seed: SeedOpt = None,
    jobs: JobsOpt = 1,
    engine: EngineOpt = "local",
    scheduler: SchedulerOpt = None,
    tls_ca_file: TlsCaOpt = None,
    tls_cert: TlsCertOpt = None,
    tls_key: TlsKeyOpt = None,
    insecure: InsecureOpt = False,
    time_limit: TimeLimitOpt = 60.0,
    quiet: QuietOpt = False,
    as_json: JsonOpt = False,
    debug: DebugOpt = False,
) -> None:
    """Compare what-if variants (courier fees, rates, service targets, crews): each is
    re-planned on the same demand paths and priced on the same out-of-sample paths."""

    def action() -> None:
        from planner.pipeline import PlanOptions, run_compare

        options = PlanOptions(path_count=paths, seed=seed, time_limit_s=time_limit,
                              **_engine(engine, scheduler, tls_ca_file, tls_cert, tls_key,
                                        insecure, jobs))
        result = run_compare(_scenario_path(scenario), out, sets=sets or [],
                             files=variant or [], options=options)
        if as_json:
            console.print_json(result.table.to_json(orient="records"))
            return
        if quiet:
            return
        console.print(_frame_table(_compare_view(result.table, result.currency),
                                   "What-if variants against the base"))
        for line in result.summary.get("headline", []):
            console.print(line, markup=False)
        console.print(f"Run folder written: [bold]{out}[/bold]")

    _run(debug, action, as_json)


def _compare_view(table, currency: str):
    """The comparison table with the columns a terminal has room for."""
    import pandas as pd

    def change(r) -> str:
        if r["variant"] == table["variant"].iloc[0]:
            return "base"
        return (f"{r['cost_delta']:+,.0f} ({r['cost_delta_low']:+,.0f} … "
                f"{r['cost_delta_high']:+,.0f})")

    return pd.DataFrame({
        "variant": table["variant"],
        f"expected cost ({currency})": table["expected_cost"].round(0),
        "of which horizon": table["expected_cost_horizon"].round(0),
        "of which look-ahead": table["expected_cost_look_ahead"].round(0),
        "change, 95 % interval": table.apply(change, axis=1),
        "dry days change": table["dry_days_delta"].round(2),
        "terminals over target": table["terminals_over_target"],
    })


def run() -> None:  # pragma: no cover - console entry for `python -m planner`
    app()



def _one_paragraph_help() -> None:
    """Docstrings keep their source line breaks; help texts are one paragraph each, so the
    terminal wraps them at its own width (never mid-sentence at the source's)."""
    for command in app.registered_commands:
        doc = command.callback.__doc__ if command.callback else None
        if doc and not command.help:
            command.help = "\n\n".join(" ".join(part.split())
                                       for part in doc.strip().split("\n\n"))


_one_paragraph_help()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(app())
