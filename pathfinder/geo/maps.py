"""A model mapped over raster layers, window by window, with its extrapolation maps.

For every cell with a value in each layer the model uses, four maps on the
layers' grid and CRS:

``prediction.tif``  the model's prediction on the response scale (expected
    records per unit area for a presence-only model; a probability or an
    expected count per site for a survey model), with layers of observer bias
    held at one value.
``mess.tif``  the multivariate environmental similarity surface (Elith,
    Kearney & Phillips 2010, Methods Ecol. Evol. 1:330-342), computed by
    :func:`pathfinder.diagnostics.extrapolation.mess` from the training
    percentiles in the model file: negative where a covariate lies outside
    its sampled range.
``most_dissimilar.tif``  which covariate sets the MESS (1 = the first of
    ``MapModel.mess_names``, 2 the second, ...; 0 where no value).
``novel_combinations.tif``  Mahalanobis distance from the centre of the
    training rows, squared, divided by its largest value among those rows
    (the NT2 measure of Mesgaran, Cousens & Webber 2014, Divers. Distrib.
    20:1147-1159). Above 1 a cell lies outside the envelope of the sampled
    combinations of covariates, even when each covariate alone is within its
    range, which MESS cannot see. Written only when the model carries the
    training means and covariance (:class:`Combinations`).

Cells are processed in windows of whole rows (read, computed and written one
window at a time, optionally several windows at once on ``jobs`` threads),
and inside a window in chunks of cells, so memory stays near a few windows
of the layers whatever their size. Every value of a cell is computed from
that cell alone with element-by-element arithmetic in a fixed order (no
matrix products, whose summation order may depend on the size of the
block), so the maps do not depend on the windows or the number of threads.
Outputs are tiled (256 x 256) GeoTIFFs compressed with Zstandard (level 1:
about five times faster to write than deflate, read by GDAL 2.3 and later, so
by QGIS, R's terra and rasterio); their nodata value is
the first mapped layer's nodata when a 32-bit float can hold it, else NaN.
"""

from __future__ import annotations

import math
import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import rasterio
from rasterio.windows import Window

from ..data.design import Term
from ..diagnostics.extrapolation import mess
from ..errors import InputError
from .layers import Layers, Readers, missing_cells

PREDICTION, MESS, MOST_DISSIMILAR, NOVELTY = ("prediction.tif", "mess.tif", "most_dissimilar.tif",
                                              "novel_combinations.tif")
TILE = 256
WINDOW_CELLS = 1 << 20        # cells per window (rows rounded to whole tiles)
CHUNK_CELLS = 1 << 16         # cells computed at once inside a window
NO_INDEX = 0                  # most_dissimilar where there is no value
COMPRESSION = "zstd"          # five times faster to write than deflate; read by GDAL >= 2.3
COMPRESSION_LEVEL = 1


@dataclass(frozen=True)
class Combinations:
    """What Mesgaran et al.'s novelty needs from the training rows.

    ``mean`` of each covariate, ``whitening`` the inverse of the lower
    Cholesky factor of their covariance (so that the squared Mahalanobis
    distance is the squared length of ``whitening @ (x - mean)``), and
    ``largest`` the largest squared distance among the training rows.
    """

    names: tuple[str, ...]
    mean: np.ndarray
    whitening: np.ndarray
    largest: float

    def to_dict(self) -> dict:
        return {"names": list(self.names), "mean": [float(v) for v in self.mean],
                "whitening": [[float(v) for v in row] for row in self.whitening],
                "largest": float(self.largest)}

    @classmethod
    def from_dict(cls, doc: dict) -> "Combinations":
        return cls(tuple(doc["names"]), np.asarray(doc["mean"], dtype=np.float64),
                   np.asarray(doc["whitening"], dtype=np.float64), float(doc["largest"]))


def combination_summary(values, names) -> Combinations | None:
    """Means, whitening and largest squared distance of training rows (n, m).

    None when there are fewer than two covariates (MESS sees everything
    then) or the covariance is singular (a covariate is a combination of
    the others, so no distance is defined).
    """
    X = np.asarray(values, dtype=np.float64)
    names = tuple(names)
    if X.ndim != 2 or X.shape[1] != len(names) or len(names) < 2 or X.shape[0] <= len(names):
        return None
    X = X[np.all(np.isfinite(X), axis=1)]
    mean = X.mean(axis=0)
    cov = np.cov(X, rowvar=False)
    try:
        lower = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        return None
    whitening = np.linalg.solve(lower, np.eye(len(names)))
    whitening = np.tril(whitening)
    largest = float(np.max(squared_distance(X, mean, whitening)))
    return Combinations(names, mean, whitening, largest)


def squared_distance(X, mean, whitening) -> np.ndarray:
    """Squared Mahalanobis distance of each row of X, element by element in a fixed order."""
    X = np.asarray(X, dtype=np.float64)
    m = len(mean)
    centred = [X[:, j] - mean[j] for j in range(m)]
    total = np.zeros(X.shape[0])
    for i in range(m):
        part = np.zeros(X.shape[0])
        for j in range(i + 1):
            part += whitening[i, j] * centred[j]
        total += part * part
    return total


@dataclass(frozen=True)
class MapModel:
    """What mapping needs of a model: terms, coefficients, link and training summaries."""

    intercept: float
    terms: tuple[Term, ...]
    coef: np.ndarray
    inverse_link: Callable
    factors: dict                       # factor name -> known levels (text)
    mess_names: tuple[str, ...]         # covariates of MESS (held ones left out)
    percentiles: np.ndarray             # (m, 101)
    ranges: np.ndarray                  # (m, 2)
    held: dict = field(default_factory=dict)   # covariate -> value on every cell
    combinations: Combinations | None = None
    prediction_words: str = "prediction"

    @property
    def layer_names(self) -> list[str]:
        """Covariates read from layers (every source of a term, except held ones)."""
        sources = dict.fromkeys(s for term in self.terms for s in term.sources)
        for name in self.mess_names:
            sources.setdefault(name, None)
        if self.combinations is not None:
            for name in self.combinations.names:
                sources.setdefault(name, None)
        return [s for s in sources if s not in self.held]


@dataclass(frozen=True)
class MapCounts:
    """Cell counts and extremes gathered over the windows (independent of them)."""

    cells: int = 0
    mapped: int = 0               # cells with a value in every layer used
    not_finite: int = 0           # mapped cells whose prediction overflowed
    novel: int = 0                # MESS < 0
    novel_combinations: int = 0   # ratio > 1 where MESS >= 0
    low: float = math.inf
    high: float = -math.inf
    by_covariate: tuple = ()      # novel cells per MESS covariate

    def add(self, other: "MapCounts") -> "MapCounts":
        by = tuple(a + b for a, b in zip(self.by_covariate, other.by_covariate)) \
            if self.by_covariate else other.by_covariate
        return MapCounts(self.cells + other.cells, self.mapped + other.mapped,
                         self.not_finite + other.not_finite, self.novel + other.novel,
                         self.novel_combinations + other.novel_combinations,
                         min(self.low, other.low), max(self.high, other.high), by)


# ---------------------------------------------------------------------------
# One block of cells
# ---------------------------------------------------------------------------


def predict_cells(model: MapModel, columns: dict) -> np.ndarray:
    """Predictions at cells whose covariates are ``columns`` (name -> (n,) float64)."""
    n = len(next(iter(columns.values()))) if columns else 0
    eta = np.full(n, model.intercept)
    unknown = np.zeros(n, dtype=bool)
    for term, b in zip(model.terms, model.coef):
        values, bad = _term_values(term, columns, model.factors, n)
        eta += b * values
        unknown |= bad
    with np.errstate(over="ignore", invalid="ignore"):
        out = model.inverse_link(eta)
    out = np.asarray(out, dtype=np.float64)
    out[unknown] = np.nan
    return out


def _term_values(term: Term, columns: dict, factors: dict, n: int):
    bad = np.zeros(n, dtype=bool)
    if term.kind == "numeric":
        return columns[term.sources[0]], bad
    if term.kind == "square":
        return (columns[term.sources[0]] - term.centers[0]) ** 2, bad
    if term.kind == "interaction":
        a, b = term.sources
        return (columns[a] - term.centers[0]) * (columns[b] - term.centers[1]), bad
    if term.kind == "level":
        # A raster holds numbers: a level matches a cell when it reads as that number;
        # a cell whose value is no known level cannot be predicted.
        values = columns[term.sources[0]]
        known = np.array([_level_number(v) for v in factors.get(term.sources[0], ())])
        bad = ~np.isin(values, known[np.isfinite(known)])
        return (values == _level_number(term.level)).astype(np.float64), bad
    raise InputError(f"term '{term.name}' has an unknown kind '{term.kind}'; the model record "
                     "is damaged")


def _level_number(level) -> float:
    try:
        return float(level)
    except (TypeError, ValueError):
        return math.nan


def map_cells(model: MapModel, columns: dict) -> dict:
    """Prediction, MESS, most dissimilar (1-based) and novelty ratio at cells."""
    n = len(next(iter(columns.values()))) if columns else 0
    full = dict(columns)
    for name, value in model.held.items():
        full[name] = np.full(n, float(value))
    out = {"prediction": predict_cells(model, full)}
    values = np.column_stack([full[s] for s in model.mess_names]) if model.mess_names \
        else np.empty((n, 0))
    scores, worst = mess(values, model.percentiles, model.ranges)
    out["mess"] = scores
    out["most_dissimilar"] = np.where(worst >= 0, worst + 1, NO_INDEX)
    if model.combinations is not None:
        c = model.combinations
        X = np.column_stack([full[s] for s in c.names])
        out["novelty"] = squared_distance(X, c.mean, c.whitening) / c.largest
    return out


# ---------------------------------------------------------------------------
# Windows
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class WindowResult:
    window: Window
    arrays: dict          # file name -> 2-D array as written
    counts: MapCounts


def window_rows(width: int, cells: int = WINDOW_CELLS) -> int:
    """Rows per window: about ``cells`` cells, in whole tiles of rows."""
    rows = max(1, cells // max(width, 1))
    return max(TILE, rows // TILE * TILE)


def windows_of(height: int, width: int, rows: int) -> list[Window]:
    return [Window(0, r0, width, min(rows, height - r0)) for r0 in range(0, height, rows)]


def compute_window(model: MapModel, layers: Layers, readers: Readers, window: Window,
                   nodata: float) -> WindowResult:
    """Read one window of the layers, map its cells chunk by chunk, return the output blocks."""
    raw = readers.read(window)
    shape = raw[0].shape if raw else (int(window.height), int(window.width))
    valid = np.ones(shape, dtype=bool)
    for block, layer in zip(raw, layers.layers):
        valid &= ~missing_cells(block, layer)
    flat = np.flatnonzero(valid)
    size = shape[0] * shape[1]
    outputs = {PREDICTION: np.full(size, nodata, dtype=np.float32),
               MESS: np.full(size, nodata, dtype=np.float32),
               MOST_DISSIMILAR: np.full(size, NO_INDEX, dtype=np.int16)}
    if model.combinations is not None:
        outputs[NOVELTY] = np.full(size, nodata, dtype=np.float32)
    counts = MapCounts(cells=size, by_covariate=(0,) * len(model.mess_names))
    names = layers.names
    for start in range(0, flat.size, CHUNK_CELLS):
        cells = flat[start:start + CHUNK_CELLS]
        columns = {name: block.ravel()[cells].astype(np.float64)
                   for name, block in zip(names, raw)}
        result = map_cells(model, columns)
        counts = counts.add(_count(result, len(model.mess_names)))
        pred = result["prediction"]
        outputs[PREDICTION][cells] = np.where(np.isfinite(pred), pred, nodata)
        score = result["mess"]
        outputs[MESS][cells] = np.where(np.isnan(score), nodata, score)
        outputs[MOST_DISSIMILAR][cells] = result["most_dissimilar"]
        if NOVELTY in outputs:
            outputs[NOVELTY][cells] = result["novelty"]
    arrays = {name: values.reshape(shape) for name, values in outputs.items()}
    return WindowResult(window, arrays, counts)


def _count(result: dict, m: int) -> MapCounts:
    pred = result["prediction"]
    finite = np.isfinite(pred)
    score = result["mess"]
    novel = score < 0
    worst = result["most_dissimilar"]
    by = tuple(int(np.sum(novel & (worst == j + 1))) for j in range(m))
    combos = 0
    if "novelty" in result:
        combos = int(np.sum((result["novelty"] > 1) & (score >= 0)))
    return MapCounts(0, int(pred.size), int((~finite).sum()), int(novel.sum()), combos,
                     float(pred[finite].min()) if finite.any() else math.inf,
                     float(pred[finite].max()) if finite.any() else -math.inf, by)


def output_nodata(layers: Layers) -> float:
    """The first layer's nodata when a 32-bit float holds it exactly, else NaN."""
    value = layers.layers[0].nodata if layers.layers else None
    if value is None or not math.isfinite(value) or float(np.float32(value)) != value:
        return math.nan
    return value


def output_profile(layers: Layers, dtype: str, nodata) -> dict:
    grid = layers.grid
    return {"driver": "GTiff", "width": grid.width, "height": grid.height, "count": 1,
            "dtype": dtype, "crs": rasterio.crs.CRS.from_wkt(grid.crs_wkt) if grid.crs_wkt
            else None, "transform": grid.affine, "nodata": nodata, "tiled": True,
            "blockxsize": TILE, "blockysize": TILE, "compress": COMPRESSION,
            "zstd_level": COMPRESSION_LEVEL, "predictor": 2 if dtype == "int16" else 1}


def write_map_files(model: MapModel, layers: Layers, out_dir, *, jobs: int = 1,
                    rows: int | None = None) -> tuple[dict, MapCounts, float]:
    """Write the maps of ``model`` over ``layers`` into ``out_dir`` (see the module notes).

    ``layers`` must hold the layers ``model.layer_names``, in that order.
    Returns ``(paths by file name, counts, nodata)``. With ``jobs`` above 1
    windows are computed on that many threads, at most two per thread at a
    time, and written in order by this thread; with one job, one window at a
    time in this thread.
    """
    out_dir = Path(out_dir)
    grid = layers.grid
    nodata = output_nodata(layers)
    rows = rows or window_rows(grid.width)
    windows = windows_of(grid.height, grid.width, rows)
    files = [PREDICTION, MESS, MOST_DISSIMILAR] + ([NOVELTY] if model.combinations else [])
    paths = {name: out_dir / name for name in files}
    # GDAL's block cache: one layer's tiles of a window twice over, and one window of the
    # outputs (14 bytes a cell), so that memory follows the window, not the layers.
    largest = max(np.dtype(layer.dtype).itemsize for layer in layers.layers)
    cache = max(8 << 20, rows * grid.width * (2 * largest + 14))
    local = threading.local()

    def work(window):
        if not hasattr(local, "readers"):
            local.readers = Readers(layers).__enter__()
            opened.append(local.readers)
        return compute_window(model, layers, local.readers, window, nodata)

    opened: list = []
    counts = MapCounts(by_covariate=(0,) * len(model.mess_names))
    with rasterio.Env(GDAL_CACHEMAX=cache, GDAL_NUM_THREADS=1):
        outs = {}
        try:
            for name in files:
                dtype = "int16" if name == MOST_DISSIMILAR else "float32"
                outs[name] = rasterio.open(paths[name], "w", **output_profile(
                    layers, dtype, NO_INDEX if name == MOST_DISSIMILAR else nodata))
            _describe(outs, model)
            if int(jobs) <= 1:      # one window at a time, in this thread: the least memory
                for window in windows:
                    counts = _write(outs, work(window), counts)
                windows = []
            with ThreadPoolExecutor(max_workers=max(1, int(jobs))) as pool:
                pending = deque()
                queue = iter(windows)
                for window in queue:
                    pending.append(pool.submit(work, window))
                    if len(pending) >= 2 * max(1, int(jobs)):
                        counts = _write(outs, pending.popleft().result(), counts)
                while pending:
                    counts = _write(outs, pending.popleft().result(), counts)
        finally:
            for readers in opened:
                readers.__exit__(None, None, None)
            for ds in outs.values():
                ds.close()
    return paths, counts, nodata


def _describe(outs: dict, model: MapModel) -> None:
    outs[PREDICTION].set_band_description(1, model.prediction_words[:200])
    outs[MESS].set_band_description(1, "MESS (Elith et al. 2010): below 0 = outside the "
                                       "sampled range of a covariate")
    legend = {f"covariate_{i + 1}": name for i, name in enumerate(model.mess_names)}
    outs[MOST_DISSIMILAR].set_band_description(1, "covariate setting the MESS (see tags)")
    outs[MOST_DISSIMILAR].update_tags(**legend)
    if NOVELTY in outs:
        outs[NOVELTY].set_band_description(1, "squared Mahalanobis distance / largest in "
                                              "training (above 1 = novel combination)")


def _write(outs: dict, result: WindowResult, counts: MapCounts) -> MapCounts:
    for name, array in result.arrays.items():
        outs[name].write(array, 1, window=result.window)
    return counts.add(result.counts)
