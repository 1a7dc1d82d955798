"""Scale: a million-row path on one machine, and stability on a cluster vs local processes.

Run from the repository root:

    python tests/benchmarks/bench_scale.py            # both cases
    python tests/benchmarks/bench_scale.py million    # one

* million: binomial lasso path, 50 penalties, n = 1,000,000, p = 100, against
  one X'X product on the same data (goal <= 15), and its peak memory above
  the data (goal <= 2 x the size of X), measured in a child process. Path
  and product alternate three times; the medians are compared, and the
  first path (which also pays for touching fresh memory) is shown too.
* cluster: stability selection with 50 complementary pairs (100 half-sample
  fits) of a binomial lasso on n = 200,000, p = 100, on a 2-worker Dask
  LocalCluster against the same work on 2 local processes (goal <= 1.2), and
  the scheduling overhead on the cluster from Dask's task stream: the gaps
  between one task and the next on each worker, and all the workers' time
  not spent computing (start-up, sending the data, waiting for the last
  task), each against the time spent computing (goal <= 0.1).
"""

from __future__ import annotations

import json
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ROOT, print_cases  # noqa: E402

MILLION_CHILD = """
import json, resource, sys, time
import numpy as np
sys.path.insert(0, {root!r})
from pathfinder import fit_path
n, p = 1_000_000, 100
rng = np.random.default_rng(5)
X = np.empty((n, p), order="F")
for j in range(p):
    X[:, j] = rng.standard_normal(n)
eta = X[:, :8] @ np.linspace(0.4, -0.4, 8) - 0.5
y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
# compile first, on a table long enough for the same kernels and the same layout
fit_path(np.asfortranarray(X[:30_000]), y[:30_000], family="binomial", n_penalties=3)
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
paths, grams = [], []
for _ in range(3):   # alternate, so that both sides see the same machine
    t = time.perf_counter(); fit = fit_path(X, y, family="binomial", n_penalties=50)
    paths.append(time.perf_counter() - t)
    t = time.perf_counter(); X.T @ X; grams.append(time.perf_counter() - t)
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
print(json.dumps(dict(path=float(np.median(paths)), first=paths[0], gram=float(np.median(grams)),
                      x_bytes=X.nbytes, rss_rise=after - before, steps=len(fit.penalties))))
"""


def case_million():
    out = subprocess.run([sys.executable, "-c", MILLION_CHILD.format(root=str(ROOT))],
                         capture_output=True, text=True, check=True)
    m = json.loads(out.stdout.strip().splitlines()[-1])
    name = f"million  binomial lasso path ({m['steps']} penalties), n=1,000,000 p=100 / one X'X product"
    return [(name + " (median of 3)", m["path"], m["gram"], 15.0),
            (name + " (first run in a fresh process)", m["first"], m["gram"], 15.0),
            ("million  peak resident memory above the data / size of X", m["rss_rise"] / m["x_bytes"],
             1.0, 2.0)]


def case_cluster():
    from dask.distributed import Client, LocalCluster, get_task_stream

    from pathfinder.choose.problem import Problem
    from pathfinder.choose.stability import stability_selection
    from pathfinder.parallel import Backend, Session

    rng = np.random.default_rng(6)
    n, p = 200_000, 100
    X = np.empty((n, p), order="F")
    for j in range(p):
        X[:, j] = rng.standard_normal(n)
    eta = X[:, :6] @ np.linspace(0.3, -0.3, 6)
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    problem = Problem(X, y, "binomial", tuple(f"x{j}" for j in range(p)))
    grid = problem.fit(n_penalties=30).penalties

    def timed(backend):
        with Session(backend) as session:
            t = time.perf_counter()
            stability_selection(problem, n_pairs=50, penalties=grid, seed=1,
                                run=lambda fn, tasks, shared: session.run(fn, tasks, shared))
            return time.perf_counter() - t

    local = timed(Backend(jobs=2))
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as client:
        with get_task_stream(client) as stream:
            on_cluster = timed(Backend(cluster=client))
        spans = {}
        for task in stream.data:
            for part in task["startstops"]:
                if part["action"] == "compute":
                    spans.setdefault(task["worker"], []).append((part["start"], part["stop"]))
    computing = sum(stop - start for each in spans.values() for start, stop in each)
    # between one task's end and the next one's start on the same worker
    gaps = sum(b[0] - a[1] for each in spans.values()
               for a, b in zip(sorted(each), sorted(each)[1:]))
    return [("cluster  stability, 100 half fits, n=200,000 p=100: 2-worker LocalCluster / 2 local processes",
             on_cluster, local, 1.2),
            ("cluster  the same: scheduling gaps between tasks / worker time computing",
             gaps, computing, 0.1),
            ("cluster  the same: all worker time not computing (start-up, data, last task) / computing",
             2 * on_cluster - computing, computing, 0.1)]


CASES = {"million": case_million, "cluster": case_cluster}


def main(argv):
    print_cases(CASES, argv)


if __name__ == "__main__":
    main(sys.argv[1:])
