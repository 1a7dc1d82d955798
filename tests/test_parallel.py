"""Tests for pathfinder.parallel: one interface, three places to run.

The same seeded tasks must give the same results, in the same order and byte
for byte, in this process, on local worker processes and on a Dask cluster;
the shared data must reach each worker once; errors keep their type.

The Dask cluster used here is a LocalCluster listening on the loopback
address only. The data are invented (seeded random numbers): these are
property tests of the plumbing, not of any statistics.
"""

from __future__ import annotations

import os
import pickle
import subprocess
import sys
import time
from collections import Counter
from dataclasses import dataclass

import numpy as np
import pytest

from pathfinder import parallel
from pathfinder.errors import InputError
from pathfinder.parallel import Backend, describe, run_tasks

distributed = pytest.importorskip("distributed")


# --------------------------------------------------------------------------
# Task functions (top level, so that worker processes can find them)
# --------------------------------------------------------------------------


@dataclass
class SurveyArrays:
    """Stands in for the shared design: predictors x and response y."""

    x: np.ndarray
    y: np.ndarray


# How many times each shared object (by its label) was unpickled in this process.
_UNPICKLED: Counter = Counter()


class CountedArrays(SurveyArrays):
    """Shared data that count, per process, how often they arrive by unpickling."""

    def __init__(self, x, y, label):
        super().__init__(x, y)
        self.label = label

    def __setstate__(self, state):
        self.__dict__.update(state)
        _UNPICKLED[state["label"]] += 1


def bootstrap_fit(shared, task):
    """A least-squares fit on a bootstrap sample drawn with the task's own seed.

    Uneven sleeps make later tasks finish first when tasks run side by side,
    so returning results in task order is really exercised.
    """
    index, seed = task
    time.sleep(0.002 * (12 - index))
    rng = np.random.default_rng(seed)
    rows = rng.integers(0, shared.y.size, size=shared.y.size)
    coef, *_ = np.linalg.lstsq(shared.x[rows], shared.y[rows], rcond=None)
    return {"index": index, "coef": coef, "residual_sd": float(np.std(shared.y[rows] - shared.x[rows] @ coef))}


def long_table_half_fit(problem, task):
    """A binomial lasso path on half the rows of a long table (the long-table solver)."""
    rng = np.random.default_rng(task)
    rows = np.sort(rng.choice(problem.n, problem.n // 2, replace=False))
    return problem.fit(rows=rows, n_penalties=8, tol=1e-4).coef


def where_and_how_often(shared, task):
    """Which process ran the task, and how often that process received the shared data."""
    return os.getpid(), _UNPICKLED[shared.label], task


def fails_on_three(shared, task):
    if task == 3:
        raise InputError("task 3 has no sites left after filtering; use fewer folds")
    if task == 5:
        raise KeyError("elevation")
    return task


def make_arrays(cls=SurveyArrays, **extra):
    rng = np.random.default_rng(20240611)
    x = rng.normal(size=(300, 6))
    y = x @ np.array([1.0, -0.5, 0.0, 0.25, 0.0, 2.0]) + rng.normal(size=300)
    return cls(x, y, **extra)


SEEDED_TASKS = [(i, 1000 + 17 * i) for i in range(12)]


# --------------------------------------------------------------------------
# A Dask cluster on the loopback address, shared by the tests of this module
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def dask_cluster():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None)
    client = distributed.Client(cluster, set_as_default=False)
    client.wait_for_workers(2, timeout=60)
    yield cluster, client
    client.close()
    cluster.close()


# --------------------------------------------------------------------------
# Same results, same order, every backend
# --------------------------------------------------------------------------


def _check_in_order(results):
    assert [r["index"] for r in results] == [i for i, _ in SEEDED_TASKS]


def test_results_identical_in_task_order_on_every_backend(dask_cluster):
    cluster, client = dask_cluster
    shared = make_arrays()
    runs = {}
    finished = {}
    for name, backend in [("here", Backend()), ("local", Backend(jobs=2)),
                          ("dask address", Backend(cluster=cluster.scheduler_address)),
                          ("dask client", Backend(cluster=client))]:
        finished[name] = []
        runs[name] = run_tasks(bootstrap_fit, SEEDED_TASKS, shared, backend,
                               on_done=finished[name].append)

    reference = runs["here"]
    _check_in_order(reference)
    # Different seeds must give different fits, or the comparison below proves nothing.
    assert not np.array_equal(reference[0]["coef"], reference[1]["coef"])
    for name, results in runs.items():
        _check_in_order(results)
        for got, want in zip(results, reference):
            assert np.array_equal(got["coef"], want["coef"]), name
            assert got["residual_sd"] == want["residual_sd"], name
        # Byte-identical, result by result. (Pickling the whole list would also
        # compare object identity: a key string shared by all dicts here is
        # written once, but after a trip between processes it is written each time.)
        assert [pickle.dumps(r) for r in results] == [pickle.dumps(r) for r in reference], name
        # every task reported exactly once to the progress callback
        assert sorted(finished[name]) == list(range(len(SEEDED_TASKS))), name
    # The client handed in is still usable: only clients we create are closed.
    assert client.status == "running"
    assert client.submit(sum, [1, 2]).result() == 3


def test_long_table_fits_identical_on_every_backend(dask_cluster):
    # Half-samples of 24,000 rows: fitted by Newton steps on a sampled Gram
    # matrix, with passes summed in fixed pieces of rows. The data travel as
    # a Problem, which places its arrays on 64-byte boundaries on arrival.
    from pathfinder.choose.problem import Problem

    cluster, client = dask_cluster
    rng = np.random.default_rng(7)
    x = np.asfortranarray(rng.normal(size=(48_000, 12)) * 3 + 10)
    y = (rng.random(48_000) < 1 / (1 + np.exp(-(x[:, 0] - x[:, 1]) / 3))).astype(float)
    shared = Problem(x, y, "binomial", tuple(f"x{j}" for j in range(12)))
    runs = [run_tasks(long_table_half_fit, [1, 2, 3], shared, backend)
            for backend in (Backend(), Backend(jobs=2), Backend(cluster=client))]
    assert not np.array_equal(runs[0][0], runs[0][1])     # different halves, different fits
    for other in runs[1:]:
        assert all(np.array_equal(a, b) for a, b in zip(runs[0], other))


def test_shared_data_reach_each_local_worker_once():
    shared = make_arrays(CountedArrays, label="local-once")
    out = run_tasks(where_and_how_often, list(range(10)), shared, Backend(jobs=2))
    assert [task for _, _, task in out] == list(range(10))
    pids = {pid for pid, _, _ in out}
    assert os.getpid() not in pids and 1 <= len(pids) <= 2
    # With 10 tasks on at most 2 workers, one worker ran at least 5 tasks: if the
    # data travelled with each task, its count would have grown past 1.
    assert all(count == 1 for _, count, _ in out), out


def test_shared_data_scattered_once_per_dask_worker(dask_cluster):
    _, client = dask_cluster
    shared = make_arrays(CountedArrays, label="dask-once")
    out = run_tasks(where_and_how_often, list(range(10)), shared, Backend(cluster=client))
    assert [task for _, _, task in out] == list(range(10))
    worker_pids = set(client.run(os.getpid).values())
    assert {pid for pid, _, _ in out} <= worker_pids
    assert all(count == 1 for _, count, _ in out), out


def test_in_process_run_does_not_copy_the_shared_data():
    shared = make_arrays(CountedArrays, label="here")
    out = run_tasks(where_and_how_often, list(range(4)), shared, Backend())
    assert all(pid == os.getpid() and count == 0 for pid, count, _ in out)


def test_workers_capped_at_number_of_tasks(monkeypatch):
    asked = []

    class RecordingPool(parallel.ProcessPoolExecutor):
        def __init__(self, max_workers=None, **kwargs):
            asked.append(max_workers)
            super().__init__(max_workers=max_workers, **kwargs)

    monkeypatch.setattr(parallel, "ProcessPoolExecutor", RecordingPool)
    shared = make_arrays(CountedArrays, label="cap")
    out = run_tasks(where_and_how_often, [0, 1], shared, Backend(jobs=5))
    assert asked == [2] and [t for _, _, t in out] == [0, 1]
    # A single task is not worth starting a worker for: it runs here.
    out = run_tasks(where_and_how_often, [7], shared, Backend(jobs=5))
    assert asked == [2] and out == [(os.getpid(), 0, 7)]
    assert run_tasks(where_and_how_often, [], shared, Backend(jobs=5)) == []


# --------------------------------------------------------------------------
# Errors
# --------------------------------------------------------------------------


@pytest.mark.parametrize("where", ["here", "local", "dask"])
def test_task_errors_keep_their_type(where, request):
    if where == "dask":
        backend = Backend(cluster=request.getfixturevalue("dask_cluster")[1])
    else:
        backend = Backend(jobs=1 if where == "here" else 2)
    with pytest.raises(InputError, match="task 3 has no sites"):
        run_tasks(fails_on_three, [0, 1, 2, 3], None, backend)
    with pytest.raises(KeyError, match="elevation"):
        run_tasks(fails_on_three, [4, 5, 6], None, backend)


def test_unreachable_cluster_gives_one_line():
    started = time.perf_counter()
    with pytest.raises(InputError) as caught:
        run_tasks(bootstrap_fit, SEEDED_TASKS, make_arrays(),
                  Backend(cluster="tcp://127.0.0.1:1", connect_timeout=1.0))
    message = str(caught.value)
    assert "\n" not in message
    assert "tcp://127.0.0.1:1" in message and "scheduler" in message
    assert time.perf_counter() - started < 30


@pytest.mark.parametrize("address", ["not-an-address", "udp://127.0.0.1:5", "tcp://10.0.0.5:port"])
def test_malformed_cluster_address_gives_one_line(address):
    with pytest.raises(InputError, match="tcp://HOST:PORT") as caught:
        run_tasks(bootstrap_fit, SEEDED_TASKS, make_arrays(), Backend(cluster=address))
    assert "\n" not in str(caught.value) and address in str(caught.value)


def test_cluster_without_dask_says_how_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    with pytest.raises(InputError, match=r"pip install 'pathfinder\[cluster\]'"):
        run_tasks(bootstrap_fit, SEEDED_TASKS, make_arrays(), Backend(cluster="tcp://127.0.0.1:8786"))


def test_dask_is_imported_only_when_a_cluster_is_asked_for():
    code = ("import sys, pathfinder.parallel as p; "
            "p.run_tasks(getattr, ['__class__'], None, p.Backend(jobs=1)); "
            "print(any(m == 'dask' or m.startswith(('dask.', 'distributed')) for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def _nested_not_findable():
    def inner(shared, task):
        return task
    return inner


@pytest.mark.parametrize("fn", [lambda shared, task: task, _nested_not_findable()],
                         ids=["lambda", "nested"])
def test_functions_workers_cannot_find_are_refused_everywhere(fn):
    for backend in (Backend(), Backend(jobs=2)):
        with pytest.raises(InputError, match="top level of a module"):
            run_tasks(fn, [1, 2], None, backend)


@pytest.mark.parametrize("kwargs, words", [
    ({"jobs": 0}, "at least 1"),
    ({"jobs": 2.5}, "whole number"),
    ({"jobs": True}, "whole number"),
    ({"jobs": 2, "cluster": "tcp://10.0.0.5:8786"}, "give one of the two"),
    ({"cluster": "  "}, "address is empty"),
    ({"cluster": 8786}, "scheduler address"),
    ({"cluster": "tcp://10.0.0.5:8786", "connect_timeout": 0}, "positive number of seconds"),
])
def test_bad_backend_options_are_refused(kwargs, words):
    with pytest.raises(InputError, match=words) as caught:
        Backend(**kwargs)
    assert "\n" not in str(caught.value)


def test_describe_for_the_run_record(dask_cluster):
    _, client = dask_cluster
    assert describe(Backend()) == "this process"
    assert describe(Backend(jobs=2)) == "2 local processes"
    assert describe(Backend(cluster=" tcp://10.0.0.5:8786")) == "Dask cluster at tcp://10.0.0.5:8786"
    assert describe(Backend(cluster=client)) == f"Dask cluster at {client.scheduler.address}"


def test_data_of_a_run_are_released_from_the_callers_cluster(dask_cluster):
    _, client = dask_cluster
    shared = make_arrays()
    run_tasks(bootstrap_fit, SEEDED_TASKS, shared, Backend(cluster=client))
    with pytest.raises(InputError):
        run_tasks(fails_on_three, list(range(8)), None, Backend(cluster=client))
    deadline = time.monotonic() + 10
    while client.who_has() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert client.who_has() == {}


def test_a_session_sends_the_shared_data_once_for_many_stages():
    # Several stages of a run with the same shared object: one pool, one send.
    from pathfinder.parallel import Session
    shared = np.arange(10.0)
    with Session(Backend(jobs=2)) as session:
        first = session.run(_session_task, list(range(6)), shared)
        second = session.run(_session_task, list(range(6, 12)), shared)
        assert session.sends == 1
    assert first + second == [float(shared.sum()) + t for t in range(12)]


def _session_task(shared, task):
    return float(shared.sum()) + task
