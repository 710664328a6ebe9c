"""Executors: the same results in the order of the tasks whatever runs them (this process,
local worker processes, a Dask cluster), a worker that dies mid-run, TLS to a cluster, and the
refusal of an unencrypted address on another machine."""
from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from planner.errors import InputError
from planner.executor import (ClusterSettings, DaskExecutor, LocalExecutor,
                              check_cluster_settings, is_local_host, make_executor)


def seeded_task(task: tuple[int, int]) -> float:
    """Work of uneven size (so tasks finish out of order) with its own seed."""
    index, seed = task
    rng = np.random.default_rng(seed)
    size = 200 if index % 3 == 0 else 20
    return float(np.linalg.eigvalsh(rng.standard_normal((size, size)) + np.eye(size)).sum())


def dies_once(task: tuple[str, int]) -> int:
    """The first attempt of task 3 ends its worker process abruptly; later attempts succeed."""
    marker, index = task
    if index == 3 and not os.path.exists(marker):
        Path(marker).write_text("the worker died here once")
        os._exit(1)
    return index * index


TASKS = [(i, 1000 + i) for i in range(12)]
EXPECTED = [seeded_task(t) for t in TASKS]


def test_local_executor_in_this_process_keeps_order_and_reports_weights():
    seen = []
    with LocalExecutor(1) as ex:
        out = ex.map(seeded_task, TASKS, progress=lambda d, t: seen.append((d, t)),
                     weights=[2] * len(TASKS))
    assert out == EXPECTED
    assert seen == [(2 * (i + 1), 24) for i in range(12)]


def test_local_worker_processes_give_the_same_results_in_task_order():
    seen = []
    with LocalExecutor(2) as ex:
        out = ex.map(seeded_task, TASKS, progress=lambda d, t: seen.append(d))
        again = ex.map(seeded_task, TASKS[::-1])          # the pool is reused
    assert out == EXPECTED
    assert again == EXPECTED[::-1]
    assert sorted(seen) == list(range(1, 13)) and seen[-1] == 12


def test_local_executor_refuses_no_workers():
    with pytest.raises(ValueError):
        LocalExecutor(0)


def test_dask_local_cluster_gives_the_same_results():
    seen = []
    with make_executor("dask", workers=2) as ex:
        assert isinstance(ex, DaskExecutor) and ex.workers == 2
        out = ex.map(seeded_task, TASKS, progress=lambda d, t: seen.append(d))
    assert out == EXPECTED
    assert sorted(seen) == list(range(1, 13))


def test_a_worker_that_dies_is_replaced_and_the_run_completes(tmp_path):
    marker = str(tmp_path / "died")
    with make_executor("dask", workers=2) as ex:
        out = ex.map(dies_once, [(marker, i) for i in range(8)])
    assert Path(marker).exists()                       # the worker really died once
    assert out == [i * i for i in range(8)]


def _self_signed(folder: Path) -> tuple[str, str]:
    """A self-signed certificate and key for localhost (openssl)."""
    cert, key = folder / "cert.pem", folder / "key.pem"
    subprocess.run(["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2",
                    "-subj", "/CN=localhost", "-addext", "subjectAltName=DNS:localhost,"
                    "IP:127.0.0.1", "-keyout", str(key), "-out", str(cert)],
                   check=True, capture_output=True)
    return str(cert), str(key)


@pytest.mark.skipif(shutil.which("openssl") is None, reason="openssl is not installed")
def test_tls_cluster_with_a_self_signed_certificate(tmp_path):
    from distributed import LocalCluster
    from distributed.security import Security

    cert, key = _self_signed(tmp_path)
    security = Security(tls_ca_file=cert, tls_scheduler_cert=cert, tls_scheduler_key=key,
                        tls_worker_cert=cert, tls_worker_key=key, tls_client_cert=cert,
                        tls_client_key=key, require_encryption=True)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, protocol="tls://",
                      host="127.0.0.1", security=security, dashboard_address=None) as cluster:
        address = cluster.scheduler_address
        assert address.startswith("tls://")
        settings = ClusterSettings(address=address, tls_ca_file=cert, tls_cert=cert,
                                   tls_key=key)
        with DaskExecutor(settings) as ex:
            assert ex.map(seeded_task, TASKS[:4]) == EXPECTED[:4]


@pytest.mark.parametrize("settings, fragment", [
    (ClusterSettings(address="tcp://10.20.30.40:8786"), "unencrypted"),
    (ClusterSettings(address="tcp://scheduler.example:8786"), "unencrypted"),
    (ClusterSettings(address="http://127.0.0.1:8786"), "not a scheduler address"),
    (ClusterSettings(address="tcp://127.0.0.1"), "not a scheduler address"),
    (ClusterSettings(address="tls://10.20.30.40:8786", tls_cert="c.pem"), "only some"),
    (ClusterSettings(address="tcp://10.20.30.40:8786", tls_ca_file="a", tls_cert="b",
                     tls_key="c"), "plain tcp://"),
    (ClusterSettings(workers=0), "0 workers"),
])
def test_cluster_settings_that_are_refused(settings, fragment):
    problems = check_cluster_settings(settings)
    assert problems and fragment in " ".join(p.problem for p in problems)
    with pytest.raises(InputError):
        DaskExecutor(settings)


def test_cluster_settings_that_are_accepted_without_connecting():
    assert check_cluster_settings(ClusterSettings(address="tcp://127.0.0.1:8786")) == []
    assert check_cluster_settings(ClusterSettings(address="tcp://localhost:8786")) == []
    assert check_cluster_settings(ClusterSettings(address="tcp://10.20.30.40:8786",
                                                  insecure=True)) == []
    assert check_cluster_settings(ClusterSettings(address="tls://10.20.30.40:8786")) == []
    assert is_local_host("127.0.0.1") and not is_local_host("10.20.30.40")


def test_unknown_engine_is_an_input_error():
    with pytest.raises(InputError, match="unknown executor"):
        make_executor("spark")


def test_a_plan_on_a_dask_cluster_equals_the_plan_in_this_process(tiny_dir):
    """The whole run on a 2-worker local cluster: the forecast per terminal and the schedule
    per depot give the same plan, byte for byte, as in this process."""
    from planner.optimize.schedule import solve_plan
    from planner.demo.synthetic import synthetic_problem
    from planner.pipeline import plan_scenario

    problem = synthetic_problem(terminals=60, depots=3, horizon_days=7, tail_days=7, paths=40,
                                seed=3, crew_share=0.4, mode="swap")
    here = solve_plan(problem, time_limit_s=60)
    quick = dict(evaluate=False, diagnose=False, calibrate=False, path_count=60)
    alone = plan_scenario(tiny_dir, **quick)
    with make_executor("dask", workers=2) as cluster:
        there = solve_plan(problem, time_limit_s=60, executor=cluster)
        assert any(line.startswith("network: 3 depot(s) on 2 worker(s)") for line in there.log)
        spread = plan_scenario(tiny_dir, executor=cluster, **quick)
    assert np.array_equal(here.visits, there.visits)
    assert np.array_equal(here.loads, there.loads)
    assert here.objective == there.objective
    assert alone.plan.to_csv() == spread.plan.to_csv()
    assert np.array_equal(alone.forecast.paths, spread.forecast.paths)


def test_a_whole_plan_completes_with_the_same_plan_when_workers_are_killed_mid_run(tiny_dir):
    """A worker process is killed while the forecasts run on the cluster (at the first
    finished terminal, the others still running), and another as the diagnostics start; the
    scheduler re-runs their tasks on the restarted workers, and the plan, its forecast paths
    and its evaluation are those of the run in this process."""
    import signal

    from planner.pipeline import plan_scenario

    settings = dict(diagnose=True, calibrate=True, path_count=60)
    alone = plan_scenario(tiny_dir, **settings)
    kill_at = {"forecast": 1, "diagnose": 0}           # stage: tasks done when it is killed
    killed: dict[str, int] = {}
    with make_executor("dask", workers=2) as cluster:
        client = cluster._client                      # the executor's own dask client

        def kill_one(stage: str, done: int, total: int) -> None:
            if stage in kill_at and stage not in killed and done >= kill_at[stage]:
                pid = sorted(client.run(os.getpid).values())[0]
                os.kill(pid, signal.SIGKILL)
                killed[stage] = pid

        spread = plan_scenario(tiny_dir, executor=cluster, progress=kill_one, **settings)
        alive = set(client.run(os.getpid).values())
    assert set(killed) == set(kill_at)                # both kills happened …
    assert not alive & set(killed.values())           # … and both workers were replaced
    assert alone.plan.to_csv() == spread.plan.to_csv()
    assert np.array_equal(alone.forecast.paths, spread.forecast.paths)
    assert alone.evaluation.to_csv() == spread.evaluation.to_csv()
