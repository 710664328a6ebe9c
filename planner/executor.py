"""Where the per-terminal and per-depot work runs: this process, local worker processes, or a
Dask cluster (README, "Larger networks").

Every stage that fans work out (forecasting per terminal, diagnostics, the perfect-foresight
bound, the schedule per depot) hands a picklable function and a list of tasks to an executor's
:meth:`~Executor.map` and gets the results back in the order of the tasks. A task carries all
it needs, its seeds included (seeds are per terminal or per task, never per worker), so the
results do not depend on which engine ran them, on how many workers there are, or on the order
in which they finished.

- :class:`LocalExecutor`: ``workers = 1`` runs the tasks here, one after the other;
  ``workers > 1`` in a pool of worker processes started from a clean server process
  (``forkserver``; ``spawn`` where there is none), so no worker inherits state by accident.
- :class:`DaskExecutor`: a ``dask.distributed`` cluster, given by its scheduler's address or
  started on this machine (``LocalCluster``). Tasks of a worker that dies are run again by
  the scheduler on another worker. Plans and dispense histories say where cash moves, so a
  plain ``tcp://`` address that is not on this machine is refused unless ``insecure`` is
  asked for; ``tls://`` takes the certificate, key and CA files of
  :class:`distributed.security.Security` (or Dask's own configuration).
"""
from __future__ import annotations

import ipaddress
import multiprocessing as mp
import os
import socket
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import Any, Protocol
from urllib.parse import urlsplit

from planner.errors import InputError, Problem

Progress = Callable[[int, int], None]
"""``progress(done, total)``: called after each finished task, ``done`` counting the
``weights`` of the finished tasks (1 each by default)."""


class Executor(Protocol):
    """Runs ``fn(task)`` for every task; see the module text."""

    workers: int

    def map(self, fn: Callable[[Any], Any], tasks: Sequence[Any], *,
            progress: Progress | None = None,
            weights: Sequence[int] | None = None) -> list[Any]:
        """``[fn(t) for t in tasks]``, in the order of ``tasks``, whatever ran them."""
        ...

    def close(self) -> None:
        """Stop the workers (the executor may not be used afterwards)."""
        ...


def _report(progress: Progress | None, done: int, total: int) -> None:
    if progress is not None:
        progress(done, total)


def task_chunks(tasks: list, workers: int, per_worker: int = 4) -> list[list]:
    """``tasks`` in consecutive chunks: one task each in this process (progress after every
    terminal), else about ``per_worker`` chunks per worker, so that many small tasks cost few
    hand-overs to the workers."""
    if workers <= 1:
        return [[task] for task in tasks]
    size = max(1, -(-len(tasks) // (per_worker * workers)))
    return [list(tasks[i:i + size]) for i in range(0, len(tasks), size)]


class LocalExecutor:
    """Tasks in this process (``workers = 1``) or in local worker processes.

    The pool is started on the first :meth:`map` that has more than one task and is kept
    until :meth:`close` (also on leaving a ``with`` block), so one run pays for starting its
    workers once.
    """

    def __init__(self, workers: int = 1) -> None:
        if int(workers) < 1:
            raise ValueError(f"workers must be at least 1, got {workers}")
        self.workers = int(workers)
        self._pool: ProcessPoolExecutor | None = None

    def __enter__(self) -> "LocalExecutor":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _started(self) -> ProcessPoolExecutor:
        if self._pool is None:
            methods = mp.get_all_start_methods()
            context = mp.get_context("forkserver" if "forkserver" in methods else "spawn")
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=context)
        return self._pool

    def map(self, fn: Callable[[Any], Any], tasks: Sequence[Any], *,
            progress: Progress | None = None,
            weights: Sequence[int] | None = None) -> list[Any]:
        tasks = list(tasks)
        weights = [1] * len(tasks) if weights is None else [int(w) for w in weights]
        total = sum(weights)
        results: list[Any] = [None] * len(tasks)
        done = 0
        if self.workers == 1 or len(tasks) <= 1:
            for i, task in enumerate(tasks):
                results[i] = fn(task)
                done += weights[i]
                _report(progress, done, total)
            return results
        pool = self._started()
        pending = {pool.submit(fn, task): i for i, task in enumerate(tasks)}
        try:
            while pending:
                finished, _ = wait(pending, return_when=FIRST_COMPLETED)
                for future in finished:
                    i = pending.pop(future)
                    results[i] = future.result()
                    done += weights[i]
                    _report(progress, done, total)
        except BaseException:
            for future in pending:
                future.cancel()
            raise
        return results

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


@dataclass(frozen=True)
class ClusterSettings:
    """How to reach a Dask cluster.

    ``address``: the scheduler (``tcp://HOST:PORT`` or ``tls://HOST:PORT``); ``None`` starts
    a ``LocalCluster`` of ``workers`` worker processes on this machine. ``tls_ca_file``,
    ``tls_cert``, ``tls_key``: PEM files for ``tls://`` (``None``: Dask's own configuration).
    ``insecure``: allow a plain ``tcp://`` address that is not on this machine.
    """

    address: str | None = None
    workers: int = 2
    tls_ca_file: str | None = None
    tls_cert: str | None = None
    tls_key: str | None = None
    insecure: bool = False


def is_local_host(host: str) -> bool:
    """True when ``host`` names this machine (loopback, or one of its own addresses)."""
    if host in ("localhost", ""):
        return True
    try:
        infos = socket.getaddrinfo(host, None)
    except OSError:
        return False
    own = {"127.0.0.1", "::1"}
    try:
        own.update(i[4][0] for i in socket.getaddrinfo(socket.gethostname(), None))
    except OSError:
        pass
    for info in infos:
        addr = info[4][0]
        if ipaddress.ip_address(addr.split("%")[0]).is_loopback or addr in own:
            continue
        return False
    return True


def check_cluster_settings(settings: ClusterSettings) -> list[Problem]:
    """The problems of a cluster setting (empty when it may be used); never connects."""
    problems: list[Problem] = []
    where = "--scheduler"
    if settings.address is None:
        if settings.workers < 1:
            problems.append(Problem("--workers", f"{settings.workers} workers",
                                    "give at least 1 worker"))
        return problems
    parts = urlsplit(settings.address)
    if parts.scheme not in ("tcp", "tls") or not parts.hostname or parts.port is None:
        problems.append(Problem(where, f"{settings.address!r} is not a scheduler address",
                                "write tcp://HOST:PORT or tls://HOST:PORT"))
        return problems
    tls_files = (settings.tls_ca_file, settings.tls_cert, settings.tls_key)
    if parts.scheme == "tls":
        if any(tls_files) and not all(tls_files):
            problems.append(Problem("--tls-ca-file/--tls-cert/--tls-key",
                                    "only some of the TLS files are given",
                                    "give all three: the CA file, this client's certificate "
                                    "and its key"))
        for option, path in zip(("--tls-ca-file", "--tls-cert", "--tls-key"), tls_files):
            if path is not None and not os.path.isfile(path):
                problems.append(Problem(option, f"{path} is not a file",
                                        "give the path of a PEM file"))
    elif any(tls_files):
        problems.append(Problem(where, "TLS files are given for a plain tcp:// address",
                                "write the address as tls://HOST:PORT"))
    elif not settings.insecure and not is_local_host(parts.hostname):
        problems.append(Problem(
            where, f"{settings.address} would send plans and dispense histories unencrypted "
                   "to another machine",
            "use tls://HOST:PORT with --tls-ca-file, --tls-cert and --tls-key, or pass "
            "--insecure if the network between the machines is trusted"))
    return problems


class DaskExecutor:
    """Tasks on a ``dask.distributed`` cluster (see the module text).

    Raises :class:`~planner.errors.InputError` for settings that may not be used (see
    :func:`check_cluster_settings`) and when the scheduler cannot be reached.
    """

    def __init__(self, settings: ClusterSettings | None = None) -> None:
        from distributed import Client, LocalCluster

        settings = settings or ClusterSettings()
        problems = check_cluster_settings(settings)
        if problems:
            raise InputError(problems)
        self._cluster = None
        if settings.address is None:
            self._cluster = LocalCluster(n_workers=settings.workers, threads_per_worker=1,
                                         processes=True, dashboard_address=None)
            self._client = Client(self._cluster)
        else:
            security = None
            if settings.tls_ca_file:
                from distributed.security import Security

                security = Security(tls_ca_file=settings.tls_ca_file,
                                    tls_client_cert=settings.tls_cert,
                                    tls_client_key=settings.tls_key, require_encryption=True)
            try:
                self._client = Client(settings.address, security=security, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise InputError([Problem("--scheduler",
                                          f"cannot reach {settings.address}: {exc}",
                                          "start the scheduler and its workers (README, "
                                          "'Larger networks'), or check the address")]) from None
        self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))

    def __enter__(self) -> "DaskExecutor":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def map(self, fn: Callable[[Any], Any], tasks: Sequence[Any], *,
            progress: Progress | None = None,
            weights: Sequence[int] | None = None) -> list[Any]:
        from distributed import as_completed

        tasks = list(tasks)
        weights = [1] * len(tasks) if weights is None else [int(w) for w in weights]
        total = sum(weights)
        if not tasks:
            return []
        # pure=False: every task runs (identical tasks are not merged); the scheduler re-runs
        # the tasks of a worker that dies
        futures = self._client.map(fn, tasks, pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        results: list[Any] = [None] * len(tasks)
        done = 0
        try:
            for future in as_completed(futures):
                i = index[future.key]
                results[i] = future.result()
                done += weights[i]
                _report(progress, done, total)
        except BaseException:
            self._client.cancel(futures)
            raise
        return results

    def close(self) -> None:
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


ENGINES = ("local", "dask")


def engine_problems(engine: str) -> list[Problem]:
    """The problem of an unknown engine name (empty when it is one of :data:`ENGINES`)."""
    if engine in ENGINES:
        return []
    return [Problem("--executor", f"unknown executor {engine!r}",
                    "write --executor local or --executor dask")]


def make_executor(engine: str = "local", *, workers: int = 1,
                  cluster: ClusterSettings | None = None) -> Executor:
    """``"local"``: a :class:`LocalExecutor` of ``workers``; ``"dask"``: a
    :class:`DaskExecutor` (a local cluster of ``workers`` unless ``cluster`` gives an
    address). Raises :class:`~planner.errors.InputError` for an unknown engine."""
    if engine == "local":
        return LocalExecutor(workers)
    if engine == "dask":
        settings = cluster or ClusterSettings(workers=workers)
        return DaskExecutor(settings)
    raise InputError(engine_problems(engine))
