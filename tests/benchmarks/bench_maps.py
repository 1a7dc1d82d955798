"""Cost of mapping a model over layers, against reading the layers once with rasterio.

Run from the repository root:

    python tests/benchmarks/bench_maps.py          # both cases
    python tests/benchmarks/bench_maps.py t        # time only

Invented layers: six float32 GeoTIFFs of 3,000 x 3,000 cells (9 million
cells each), tiled 256 x 256 and compressed with deflate (as layers are
usually shipped), with a no-data patch. The model: a Poisson model file with
the six layers as terms plus a squared term and an interaction, and the
training means and covariance for the novelty map, so all four maps are
written.

* t  time: ``write_maps`` (one job) against reading every layer once, whole,
     with ``rasterio`` (``dataset.read(1)``), timed alternately; goal: at most
     3 times.
* m  memory: ``write_maps`` run in a fresh process; the rise of its peak
     resident memory (which counts GDAL's block cache too),
     sampled every 2 ms, over the memory held after the model and layers
     are opened, against
     one window of all six layers as stored (rows per window x width x 6 x 4
     bytes) plus the model file's size; goal: below 4 times.

These are measurements, not tests: nothing here fails on speed.
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import textwrap
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import ROOT, print_cases, side_by_side  # noqa: E402

SIZE = 3000
NAMES = ("temp", "rain", "heather", "slope", "wind", "road")
TIME_GOAL = 3.0
MEMORY_GOAL = 4.0
REPEATS = 3


def make_layers(folder: Path) -> Path:
    """Six invented smooth layers, tiled and compressed, with a no-data patch in one."""
    import rasterio
    layers = folder / "layers"
    layers.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(17)
    y, x = np.mgrid[0:SIZE, 0:SIZE].astype(np.float32) / SIZE
    profile = {"driver": "GTiff", "width": SIZE, "height": SIZE, "count": 1,
               "dtype": "float32", "crs": "EPSG:32630", "nodata": -9999.0,
               "transform": rasterio.Affine(25.0, 0, 400_000.0, 0, -25.0, 6_200_000.0),
               "tiled": True, "blockxsize": 256, "blockysize": 256, "compress": "deflate"}
    for k, name in enumerate(NAMES):
        a, b, c = rng.uniform(1, 6, 3)
        values = (np.sin(a * x + k) * np.cos(b * y) + c * x * y
                  + 0.05 * rng.standard_normal((SIZE, SIZE)).astype(np.float32))
        if k == 1:
            values[100:400, 2000:2600] = -9999.0
        with rasterio.open(layers / f"{name}.tif", "w", **profile) as out:
            out.write(values.astype(np.float32), 1)
    return layers


def make_model(folder: Path, layers: Path) -> Path:
    """A model file on the six layers (training rows: 5,000 random cells)."""
    import pandas as pd
    from pathfinder.data.design import Term, apply_design
    from pathfinder.geo.layers import open_layers, values_at_points
    from pathfinder.mapping import model_extras
    from pathfinder.outputs.model_file import model_document, save_model

    grid = open_layers(layers)
    rng = np.random.default_rng(5)
    x, y = grid.grid.cell_centres(rng.integers(0, SIZE, 5000), rng.integers(0, SIZE // 2, 5000))
    read = values_at_points(grid, x, y)
    frame = read.values.loc[read.usable].reset_index(drop=True)
    terms = tuple(Term(n, "numeric", (n,), group=n) for n in NAMES) + (
        Term("temp^2", "square", ("temp",), group="temp", centers=(float(frame.temp.mean()),)),
        Term("temp:rain", "interaction", ("temp", "rain"), group="temp:rain",
             centers=(float(frame.temp.mean()), float(frame.rain.mean()))))
    coef = np.array([0.5, -0.3, 0.2, 0.05, -0.1, -0.2, -0.4, 0.1])
    doc = model_document(family="poisson", response_name="record", response_labels=None,
                         terms=terms, reference_levels={}, intercept=-2.0, coef=coef,
                         offset_rule=None, training_frame=frame,
                         training_X=apply_design(terms, {}, frame),
                         pick={"method": "lasso", "rule": "min", "mix": 1.0, "penalty": 0.01},
                         package_version="0.1.0")
    doc.update(model_extras(doc, pd.DataFrame(frame)))
    return save_model(doc, folder / "model.json")


def read_once(layers: Path) -> None:
    import rasterio
    for name in NAMES:
        with rasterio.open(layers / f"{name}.tif") as ds:
            ds.read(1)


def case_time(folder, layers, model):
    from pathfinder.mapping import write_maps
    rows = []
    for jobs in (1, 2):
        ours, peer = side_by_side(
            lambda: write_maps(model, layers, folder / "maps", overwrite=True, jobs=jobs),
            lambda: read_once(layers), repeats=REPEATS)
        rows.append((f"t{jobs} mapping 9 million cells from 6 layers (4 maps, {jobs} job(s)) / "
                     "reading the layers once with rasterio", ours, peer, TIME_GOAL))
    return rows


MEMORY_SCRIPT = textwrap.dedent("""
    import json, resource, sys
    from pathlib import Path
    from pathfinder.geo.layers import open_layers
    from pathfinder.geo.maps import window_rows
    from pathfinder.mapping import write_maps
    from pathfinder.predict import load_model
    layers, model, out = map(Path, sys.argv[1:4])
    m = load_model(model)
    opened = open_layers(layers)
    import threading, time
    rss = lambda: int(open("/proc/self/statm").read().split()[1]) * resource.getpagesize()
    before, peak, done = rss(), [0], threading.Event()
    def watch():
        while not done.is_set():
            peak[0] = max(peak[0], rss())
            time.sleep(0.002)
    watcher = threading.Thread(target=watch)
    watcher.start()
    write_maps(m, opened, out, overwrite=True, jobs=int(sys.argv[4]))
    done.set()
    watcher.join()
    window = window_rows(opened.grid.width) * opened.grid.width * opened.cell_bytes
    print(json.dumps({"rise": max(peak[0], rss()) - before, "window": window,
                      "model": model.stat().st_size}))
""")


def case_memory(folder, layers, model):
    rows = []
    for jobs in (1, 2):
        done = subprocess.run([sys.executable, "-c", MEMORY_SCRIPT, str(layers), str(model),
                               str(folder / "maps_memory"), str(jobs)], capture_output=True,
                              text=True, cwd=ROOT, check=True)
        got = json.loads(done.stdout.strip().splitlines()[-1])
        budget = got["window"] + got["model"]
        print(f"   jobs {jobs}: peak rise {got['rise'] / 2**20:.1f} MiB; one window of the six "
              f"layers {got['window'] / 2**20:.1f} MiB; model file {got['model'] / 1024:.1f} KiB")
        rows.append((f"m{jobs} peak memory rise of write_maps ({jobs} job(s)) / (one window of "
                     "all layers + the model file)", got["rise"], budget, MEMORY_GOAL))
    return rows


def main(argv):
    with tempfile.TemporaryDirectory(prefix="bench-maps-") as tmp:
        folder = Path(tmp)
        layers = make_layers(folder)
        model = make_model(folder, layers)
        cases = {"t": lambda: case_time(folder, layers, model),
                 "m": lambda: case_memory(folder, layers, model)}
        print_cases(cases, argv)


if __name__ == "__main__":
    main(sys.argv[1:])
