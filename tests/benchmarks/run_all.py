"""Run every benchmark script, one after another, and print their tables.

    python tests/benchmarks/run_all.py

Each script runs in its own process (so one's memory does not weigh on the
next). Ratios are pathfinder / peer measured side by side in one run; record
the dated figures, met or missed, in tests/benchmarks/RESULTS.md. Nothing here
fails on speed.
"""

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
SCRIPTS = ["bench_core.py", "bench_cv.py", "bench_stability.py", "bench_subsets.py", "bench_scale.py"]


def main():
    for script in SCRIPTS:
        print(f"\n== {script}", flush=True)
        subprocess.run([sys.executable, str(HERE / script)], check=False)


if __name__ == "__main__":
    main()
