"""Raster layers as covariates: one grid, read in windows, read at points.

A covariate layer is one band of a GeoTIFF. Layers come as a folder (every
``.tif`` / ``.tiff`` in it, one covariate per single-band file, named by the
file), a list of files, or one multiband file whose band descriptions name
the covariates. Every layer must share one grid: the same coordinate
reference system (CRS), the same transform (origin and cell size) and the
same number of rows and columns. Layers that do not are refused with one line
naming the layer that differs and what to do; nothing is resampled silently.

A cell is missing in a layer when it equals the band's nodata value or is
not a finite number. Values at points are the values of the cell that holds
the point (the cell whose row and column come from the inverse transform,
rounded down, as rasterio's own ``index`` and ``sample`` do); a point outside
the grid, or on a missing cell of any layer, is left out and counted, per
layer.

Everything here is a pure function over small dataclasses; files are only
read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import rasterio
from rasterio.errors import RasterioIOError
from rasterio.windows import Window

from ..errors import InputError

SUFFIXES = (".tif", ".tiff")
POINT_STRIP_ROWS = 256       # rows read at a time when reading values at points


@dataclass(frozen=True)
class Grid:
    """The grid every layer shares: CRS (WKT), affine transform and shape."""

    crs_wkt: str
    transform: tuple          # (a, b, c, d, e, f) of the affine transform
    width: int
    height: int

    @property
    def affine(self) -> rasterio.Affine:
        return rasterio.Affine(*self.transform)

    @property
    def n_cells(self) -> int:
        return self.width * self.height

    @property
    def is_geographic(self) -> bool:
        return bool(self.crs_wkt) and rasterio.crs.CRS.from_wkt(self.crs_wkt).is_geographic

    def cell_centres(self, rows, cols) -> tuple[np.ndarray, np.ndarray]:
        """Coordinates of the centres of cells (row, col)."""
        a, b, c, d, e, f = self.transform
        r = np.asarray(rows, dtype=np.float64) + 0.5
        q = np.asarray(cols, dtype=np.float64) + 0.5
        return a * q + b * r + c, d * q + e * r + f

    def rows_cols(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Row and column of the cell holding each point (may fall outside the grid)."""
        inverse = ~self.affine
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        col = inverse.a * x + inverse.b * y + inverse.c
        row = inverse.d * x + inverse.e * y + inverse.f
        with np.errstate(invalid="ignore"):
            return np.floor(row), np.floor(col)


@dataclass(frozen=True)
class Layer:
    """One covariate: a band of a file, its name and its nodata value."""

    name: str
    path: str
    band: int                 # 1-based, as in GDAL
    nodata: float | None
    dtype: str


@dataclass(frozen=True)
class Layers:
    """Covariate layers on one grid."""

    layers: tuple[Layer, ...]
    grid: Grid

    @property
    def names(self) -> list[str]:
        return [layer.name for layer in self.layers]

    def subset(self, names) -> "Layers":
        """The named layers, in the order given."""
        by_name = {layer.name: layer for layer in self.layers}
        missing = [name for name in names if name not in by_name]
        if missing:
            raise InputError(f"no layer named {', '.join(repr(m) for m in missing)}; the layers "
                             f"are {', '.join(self.names)}")
        return Layers(tuple(by_name[name] for name in names), self.grid)

    @property
    def cell_bytes(self) -> int:
        """Bytes of one cell of every layer, as stored (for memory budgets)."""
        return sum(np.dtype(layer.dtype).itemsize for layer in self.layers)


# ---------------------------------------------------------------------------
# Opening layers and checking the grid
# ---------------------------------------------------------------------------


def open_layers(spec) -> Layers:
    """Layers from a folder, one file, or a list of files (see the module notes).

    Raises :class:`InputError` (one line) for a missing path, a folder
    without GeoTIFFs, a file GDAL cannot read, a multiband file without band
    descriptions, two layers with one name, and layers on different grids.
    """
    if isinstance(spec, Layers):
        return spec
    files = _layer_files(spec)
    layers, grids = [], []
    for file in files:
        for layer, grid in _layers_of_file(file, several_files=len(files) > 1):
            layers.append(layer)
            grids.append(grid)
    seen = {}
    for layer in layers:
        if layer.name in seen:
            raise InputError(f"two layers are named '{layer.name}' ({seen[layer.name]} and "
                             f"{Path(layer.path).name}); rename one file or band description")
        seen[layer.name] = Path(layer.path).name
    check_one_grid(layers, grids)
    return Layers(tuple(layers), grids[0])


def _layer_files(spec) -> list[Path]:
    if isinstance(spec, (str, Path)):
        path = Path(spec).expanduser()
        if not path.exists():
            raise InputError(f"layers not found: {path}; give a folder of GeoTIFF files, a "
                             "GeoTIFF file or a list of them")
        if path.is_dir():
            files = sorted(p for p in path.iterdir()
                           if p.is_file() and p.suffix.lower() in SUFFIXES)
            if not files:
                raise InputError(f"the folder {path} holds no GeoTIFF (.tif or .tiff) files; "
                                 "put one file per covariate in it")
            return files
        return [path]
    files = [Path(p).expanduser() for p in spec]
    if not files:
        raise InputError("no layers given; give a folder of GeoTIFF files or a list of them")
    for file in files:
        if not file.is_file():
            raise InputError(f"layer file not found: {file}; check the name")
    return files


def _layers_of_file(file: Path, several_files: bool):
    try:
        with rasterio.open(file) as ds:
            grid = Grid(ds.crs.to_wkt() if ds.crs else "", tuple(ds.transform)[:6],
                        ds.width, ds.height)
            descriptions = ds.descriptions
            if ds.count == 1:
                names = [file.stem]
            else:
                missing = [i + 1 for i, d in enumerate(descriptions) if not d]
                if missing:
                    raise InputError(
                        f"band {missing[0]} of the multiband file {file.name} has no description, "
                        "so it cannot name a covariate; give every band a description (its "
                        "covariate's name) or write one file per covariate")
                names = [str(d).strip() for d in descriptions]
            return [(Layer(name, str(file), band, _nodata(ds.nodatavals[band - 1]),
                           ds.dtypes[band - 1]), grid)
                    for band, name in enumerate(names, start=1)]
    except RasterioIOError as error:
        raise InputError(f"cannot read the layer {file} as a raster ({_first_line(error)}); "
                         "give GeoTIFF files") from None


def _nodata(value):
    return None if value is None else float(value)


def _first_line(error) -> str:
    return str(error).strip().splitlines()[0] if str(error).strip() else type(error).__name__


def check_one_grid(layers, grids) -> None:
    """Refuse layers whose grid differs from the first layer's, naming the first that does."""
    first, reference = layers[0], grids[0]
    ref_crs = rasterio.crs.CRS.from_wkt(reference.crs_wkt) if reference.crs_wkt else None
    for layer, grid in zip(layers[1:], grids[1:]):
        problem = None
        crs = rasterio.crs.CRS.from_wkt(grid.crs_wkt) if grid.crs_wkt else None
        if (crs is None) != (ref_crs is None) or (crs is not None and crs != ref_crs):
            problem = (f"its coordinate system ({_crs_words(crs)}) is not that of "
                       f"'{first.name}' ({_crs_words(ref_crs)}); reproject it onto the grid of "
                       f"{Path(first.path).name}")
        elif (grid.height, grid.width) != (reference.height, reference.width):
            problem = (f"it has {grid.height} rows x {grid.width} columns, '{first.name}' has "
                       f"{reference.height} x {reference.width}; resample or crop it onto the "
                       f"grid of {Path(first.path).name}")
        elif not _same_transform(grid.transform, reference.transform):
            problem = (f"its origin or cell size differs from that of '{first.name}' "
                       f"({_transform_words(grid.transform)} against "
                       f"{_transform_words(reference.transform)}); resample it onto the grid of "
                       f"{Path(first.path).name}")
        if problem:
            raise InputError(f"layer '{layer.name}' ({Path(layer.path).name}) is not on the "
                             f"grid of the other layers: {problem} (same coordinate system, "
                             "origin, cell size, rows and columns)")


def _same_transform(t1, t2) -> bool:
    size = max(abs(t2[0]), abs(t2[4]), 1e-300)
    return all(abs(p - q) <= 1e-6 * size for p, q in zip(t1, t2))


def _crs_words(crs) -> str:
    if crs is None:
        return "none given"
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else (crs.to_string()[:60] or "unnamed")


def _transform_words(t) -> str:
    return f"origin {t[2]:g}, {t[5]:g}; cell {abs(t[0]):g} x {abs(t[4]):g}"


# ---------------------------------------------------------------------------
# Reading cells
# ---------------------------------------------------------------------------


class Readers:
    """Open datasets of some layers, one per file (a context manager).

    One instance serves one thread: GDAL datasets must not be shared between
    threads.
    """

    def __init__(self, layers: Layers):
        self.layers = layers
        self._open = {}

    def __enter__(self):
        for layer in self.layers.layers:
            if layer.path not in self._open:
                self._open[layer.path] = rasterio.open(layer.path)
        return self

    def __exit__(self, *exc):
        for ds in self._open.values():
            ds.close()
        self._open.clear()

    def read(self, window: Window) -> list[np.ndarray]:
        """Each layer's cells in ``window``, as stored (nodata not yet replaced)."""
        return [self._open[layer.path].read(layer.band, window=window)
                for layer in self.layers.layers]


def missing_cells(values: np.ndarray, layer: Layer) -> np.ndarray:
    """True where a layer's stored values are its nodata value or not finite."""
    if np.issubdtype(values.dtype, np.floating):
        bad = ~np.isfinite(values)
    else:
        bad = np.zeros(values.shape, dtype=bool)
    if layer.nodata is not None and not math.isnan(layer.nodata):
        bad |= values == np.asarray(layer.nodata).astype(values.dtype)
    return bad


def as_numbers(values: np.ndarray, layer: Layer) -> np.ndarray:
    """A layer's stored values as float64, NaN where missing."""
    out = values.astype(np.float64)
    out[missing_cells(values, layer)] = np.nan
    return out


def read_all(layers: Layers) -> np.ndarray:
    """Every cell of every layer, (k, rows, cols) float64 with NaN where missing.

    For small grids and tests; large grids are read in windows.
    """
    window = Window(0, 0, layers.grid.width, layers.grid.height)
    with Readers(layers) as readers:
        raw = readers.read(window)
    return np.stack([as_numbers(v, layer) for v, layer in zip(raw, layers.layers)])


# ---------------------------------------------------------------------------
# Values at points
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class PointValues:
    """Covariate values read at points, with what was left out and why.

    ``values`` has one column per layer and one row per point (NaN where the
    point is outside the grid or on a missing cell); ``usable`` marks points
    inside the grid with every layer present; ``outside`` counts points
    outside the grid; ``missing_by_layer`` counts, per layer, the points
    inside the grid on a missing cell of that layer (a point may count for
    several layers).
    """

    values: pd.DataFrame
    rows: np.ndarray
    cols: np.ndarray
    inside: np.ndarray
    usable: np.ndarray
    outside: int
    missing_by_layer: dict = field(default_factory=dict)

    @property
    def n_left_out(self) -> int:
        return int((~self.usable).sum())

    def notes(self, what: str = "points") -> tuple[str, ...]:
        """Plain lines saying what was left out (nothing when nothing was)."""
        n = len(self.usable)
        if self.n_left_out == 0:
            return (f"all {n} {what} lie on cells with a value in every layer",)
        lines = [f"{self.n_left_out} of {n} {what} left out: no value in every layer there"]
        if self.outside:
            lines.append(f"{self.outside} {what} lie outside the layers")
        for name, count in self.missing_by_layer.items():
            if count:
                lines.append(f"{count} {what} lie on a no-data cell of layer '{name}'")
        return tuple(lines)


def values_at_points(layers: Layers, x, y) -> PointValues:
    """The value of every layer at each point (x, y) in the layers' CRS.

    Points are read strip by strip (``POINT_STRIP_ROWS`` rows of the grid at a
    time, only the columns the points span), so memory stays small whatever
    the size of the layers.
    """
    grid = layers.grid
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    row, col = grid.rows_cols(x, y)
    inside = (np.isfinite(row) & np.isfinite(col) & (row >= 0) & (row < grid.height)
              & (col >= 0) & (col < grid.width))
    rows = np.where(inside, row, -1).astype(np.int64)
    cols = np.where(inside, col, -1).astype(np.int64)
    values = np.full((n, len(layers.layers)), np.nan)
    if inside.any():
        with Readers(layers) as readers:
            strips = rows[inside] // POINT_STRIP_ROWS
            for strip in np.unique(strips):
                here = np.flatnonzero(inside)[strips == strip]
                r0 = int(strip) * POINT_STRIP_ROWS
                r1 = min(r0 + POINT_STRIP_ROWS, grid.height)
                c0, c1 = int(cols[here].min()), int(cols[here].max()) + 1
                raw = readers.read(Window(c0, r0, c1 - c0, r1 - r0))
                for j, (block, layer) in enumerate(zip(raw, layers.layers)):
                    cells = as_numbers(block, layer)
                    values[here, j] = cells[rows[here] - r0, cols[here] - c0]
    missing = {layer.name: int((inside & np.isnan(values[:, j])).sum())
               for j, layer in enumerate(layers.layers)}
    usable = inside & np.all(np.isfinite(values), axis=1)
    frame = pd.DataFrame(values, columns=layers.names)
    return PointValues(frame, rows, cols, inside, usable, int((~inside).sum()), missing)
