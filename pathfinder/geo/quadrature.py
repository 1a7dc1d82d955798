"""Presence-only records as a point process: quadrature points and Berman-Turner weights.

Records seen with no absences are taken as the points of an inhomogeneous
Poisson process on the region covered by the layers, with intensity
``lambda(s) = exp(b0 + x(s)'b)`` (expected records per unit area). Its
log-likelihood is

    sum over records of log lambda(s_i)  -  integral over the region of lambda(s) ds.

Berman & Turner (1992, Applied Statistics 41:31-38) approximate the integral
by a weighted sum over quadrature points (here: the records and a regular
grid of extra points), ``sum_j w_j lambda(s_j)``. With ``y_j`` = 1 for a
record and 0 for an extra point and ``z_j = y_j / w_j``, the approximation is

    sum_j w_j (z_j log lambda_j - lambda_j),

the log-likelihood of a Poisson GLM with response ``z`` and observation
weights ``w`` (up to a constant); equivalently a Poisson GLM of the 0/1
``y`` with offset ``log w``, whose log-likelihood is the same sum. Fitting
it by penalised Poisson regression gives the point-process lasso, elastic net
and ridge (Warton & Shepherd 2010, Ann. Appl. Stat. 4:1383-1402; Renner et
al. 2015, Methods Ecol. Evol. 6:366-379).

Weights. The valid cells (a value in every layer) are cut into square tiles
of ``step x step`` cells. Each tile holds one extra point, at its valid cell
nearest the tile's centre, and its area is the area of its valid cells. The
area is shared equally among the extra point and the records in the tile
(Berman & Turner's counting weights), so the weights add up to the area of
the region exactly. At ``step = 1`` every valid cell is an extra point and,
since a raster's covariates are constant within a cell, the sum equals the
integral: the fit is then the exact maximum-likelihood fit of the process on
the raster.

How many points. The grid starts coarse (about ``START_POINTS`` tiles) and is
halved until the maximised log-likelihood of the model of every layer changes
by at most ``SETTLE_CHANGE`` (half a unit: less than a quarter of the
smallest difference in AIC anyone reads as a difference), or ``step`` reaches
1, or the next grid would pass ``MAX_POINTS`` extra points; every grid tried
is reported, and a grid that did not settle is said.

The intensity is relative: records without a record of effort cannot tell how
many individuals there are or what share of the region is occupied, only
where records are more or less likely; every note says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyproj
from rasterio.windows import Window

from ..core.glm import fit_glm
from ..errors import InputError
from .layers import Grid, Layers, Readers, missing_cells, values_at_points

RECORD = "record"               # 1 for a record, 0 for a quadrature point
AREA = "area"                   # the Berman-Turner weight w (area units of the layers)
DENSITY = "record_density"      # z = record / area
START_POINTS = 1_000
SETTLE_CHANGE = 0.5
MAX_POINTS = 250_000
EARTH_RADIUS_KM = 6371.0072     # radius of the sphere of equal area (GRS80), from memory
WINDOW_ROWS = 512

RELATIVE_NOTE = ("presence-only records give a relative intensity: the model says where records "
                 "are more or less likely per unit area, not how many individuals there are or "
                 "the chance that a place is occupied, which would need a record of effort")


@dataclass(frozen=True)
class CellAreas:
    """The area of one cell in each row of the grid, and its unit in words."""

    by_row: np.ndarray
    unit: str
    note: str | None = None


def cell_areas(grid: Grid) -> CellAreas:
    """Cell areas: constant on a projected grid, on a sphere for longitude-latitude grids."""
    a, b, c, d, e, f = grid.transform
    crs = pyproj.CRS.from_wkt(grid.crs_wkt) if grid.crs_wkt else None
    if crs is not None and crs.is_geographic:
        if b or d:
            raise InputError("the layers are in longitude and latitude on a rotated grid; "
                             "project them onto a grid in metres first")
        top = f + e * np.arange(grid.height)
        bottom = top + e
        lat1, lat2 = np.radians(np.minimum(top, bottom)), np.radians(np.maximum(top, bottom))
        by_row = EARTH_RADIUS_KM ** 2 * math.radians(abs(a)) * (np.sin(lat2) - np.sin(lat1))
        return CellAreas(by_row, "square km",
                         "the layers are in longitude and latitude: cell areas are taken on a "
                         "sphere of the Earth's area, in square km")
    area = abs(a * e - b * d)
    name = crs.axis_info[0].unit_name if crs is not None and crs.axis_info else None
    if name == "metre":             # areas in square km: readable numbers for records
        return CellAreas(np.full(grid.height, area / 1e6), "square km")
    unit = "square km" if name == "kilometre" else \
        (f"square {name}" if name else "square unit of the layers' coordinates")
    return CellAreas(np.full(grid.height, area), unit)


def valid_cells(layers: Layers) -> np.ndarray:
    """(rows, cols) True where every layer has a value; read in windows of rows."""
    grid = layers.grid
    valid = np.empty((grid.height, grid.width), dtype=bool)
    with Readers(layers) as readers:
        for r0 in range(0, grid.height, WINDOW_ROWS):
            h = min(WINDOW_ROWS, grid.height - r0)
            block = np.ones((h, grid.width), dtype=bool)
            for raw, layer in zip(readers.read(Window(0, r0, grid.width, h)), layers.layers):
                block &= ~missing_cells(raw, layer)
            valid[r0:r0 + h] = block
    return valid


@dataclass(frozen=True)
class Tiles:
    """Square tiles of ``step`` cells over the valid cells, one extra point each."""

    step: int
    tile_id: np.ndarray        # (n_tiles,) id of each tile with a valid cell (sorted)
    point_row: np.ndarray      # its extra point: row and column of a valid cell
    point_col: np.ndarray
    area: np.ndarray           # area of the tile's valid cells
    tiles_across: int

    def of_cells(self, rows, cols) -> np.ndarray:
        """Position in ``tile_id`` of the tile holding each cell (the cell must be valid)."""
        ids = (np.asarray(rows) // self.step) * self.tiles_across + np.asarray(cols) // self.step
        return np.searchsorted(self.tile_id, ids)


def lay_tiles(valid: np.ndarray, areas: CellAreas, step: int) -> Tiles:
    """Tiles of ``step x step`` cells, the extra point of each, and its area."""
    step = int(step)
    if step < 1:
        raise ValueError("step must be at least 1")
    rows, cols = np.nonzero(valid)
    if rows.size == 0:
        raise InputError("no cell has a value in every layer; check the layers' no-data values")
    across = -(-valid.shape[1] // step)
    ids = (rows // step) * across + cols // step
    centre_r = (rows // step) * step + (step - 1) / 2.0
    centre_c = (cols // step) * step + (step - 1) / 2.0
    distance = (rows - centre_r) ** 2 + (cols - centre_c) ** 2
    order = np.lexsort((cols, rows, distance, ids))     # by tile, nearest the centre first
    first = np.ones(order.size, dtype=bool)
    first[1:] = ids[order][1:] != ids[order][:-1]
    chosen = order[first]
    tile_id = ids[chosen]
    area = np.bincount(np.searchsorted(tile_id, ids), weights=areas.by_row[rows],
                       minlength=tile_id.size)
    return Tiles(step, tile_id, rows[chosen], cols[chosen], area, across)


def berman_turner_weights(tiles: Tiles, record_rows, record_cols) -> tuple[np.ndarray, np.ndarray]:
    """Counting weights: each tile's area shared by its extra point and its records.

    Returns ``(extra_point_weights (n_tiles,), record_weights (n_records,))``;
    together they add up to the area of the valid cells.
    """
    where = tiles.of_cells(record_rows, record_cols)
    share = tiles.area / (1.0 + np.bincount(where, minlength=tiles.tile_id.size))
    return share, share[where]


@dataclass(frozen=True)
class Settling:
    """The grids tried and the maximised log-likelihood on each."""

    table: pd.DataFrame        # step_cells, quadrature_points, log_likelihood, change
    step: int                  # the grid used
    settled: bool

    def note(self) -> str:
        row = self.table.iloc[-1]
        grids = len(self.table)
        if self.settled:
            return (f"{int(row['quadrature_points'])} quadrature points on a grid of one per "
                    f"{self.step} x {self.step} cells: the log-likelihood of the model of every "
                    f"layer changed by {abs(row['change']):.3g} from the grid before "
                    f"(at most {SETTLE_CHANGE} asked; {grids} grids tried)")
        if self.step == 1:
            return (f"{int(row['quadrature_points'])} quadrature points, one in every valid cell: "
                    "the sum over cells is the exact integral on the raster")
        return (f"the quadrature did not settle: {int(row['quadrature_points'])} points on a grid "
                f"of one per {self.step} x {self.step} cells, the largest allowed ({MAX_POINTS} "
                f"points), still changed the log-likelihood by {abs(row['change']):.3g}; "
                "treat small differences between models with care")


def point_process_log_likelihood(X, record, area) -> float:
    """Maximised Berman-Turner log-likelihood of the unpenalised model of every column of X.

    ``sum over records of eta - sum_j w_j exp(eta_j)``, from a Poisson GLM of
    ``record`` with offset ``log area`` (:func:`pathfinder.core.glm.fit_glm`).
    """
    fit = fit_glm(X, record, "poisson", offset=np.log(area))
    eta = fit.intercept + np.asarray(X, dtype=np.float64) @ fit.coef
    return float(eta[record > 0].sum() - np.sum(area * np.exp(eta)))


def settle(valid, areas: CellAreas, record_rows, record_cols, record_X, cell_values,
           *, start_points=START_POINTS, change=SETTLE_CHANGE, max_points=MAX_POINTS):
    """Halve the grid until the log-likelihood settles (see the module notes).

    ``cell_values(rows, cols) -> (n, k)`` gives the covariates at cells.
    Returns ``(Settling, tiles, extra-point covariates)`` of the grid used.
    """
    n_valid = int(valid.sum())
    step = max(1, int(math.sqrt(n_valid / max(start_points, 1))))
    rows_out, previous, chosen = [], None, None
    settled = False
    while True:
        tiles = lay_tiles(valid, areas, step)
        extra_w, record_w = berman_turner_weights(tiles, record_rows, record_cols)
        extra_X = cell_values(tiles.point_row, tiles.point_col)
        X = np.vstack([record_X, extra_X])
        record = np.r_[np.ones(len(record_X)), np.zeros(len(extra_X))]
        ll = point_process_log_likelihood(X, record, np.r_[record_w, extra_w])
        rows_out.append((step, tiles.tile_id.size, ll,
                         np.nan if previous is None else ll - previous))
        chosen = (tiles, extra_X)
        if previous is not None and abs(ll - previous) <= change:
            settled = True
            break
        next_step = step // 2
        if step == 1 or lay_count(valid, next_step) > max_points:
            break
        previous, step = ll, next_step
    table = pd.DataFrame(rows_out, columns=["step_cells", "quadrature_points", "log_likelihood",
                                            "change"])
    return Settling(table, step, settled), chosen[0], chosen[1]


def lay_count(valid: np.ndarray, step: int) -> int:
    """How many tiles of ``step`` cells hold a valid cell."""
    rows, cols = np.nonzero(valid)
    across = -(-valid.shape[1] // step)
    return int(np.unique((rows // step) * across + cols // step).size)


@dataclass(frozen=True)
class PresenceOnly:
    """The table a Poisson fit takes, and what was done to make it."""

    table: pd.DataFrame
    settling: Settling
    notes: tuple[str, ...]
    n_records: int
    area_unit: str


def presence_only_table(layers: Layers, x, y, *, coords=("x", "y"), bias_layers=(),
                        start_points=START_POINTS, change=SETTLE_CHANGE,
                        max_points=MAX_POINTS, what="records") -> PresenceOnly:
    """Records at (x, y) (in the layers' CRS) and quadrature points as one table.

    Columns: every layer (covariates), the two coordinates, ``record`` (1 for
    a record, 0 for a quadrature point), ``area`` (the Berman-Turner weight)
    and ``record_density`` (record / area). A Poisson fit of ``record`` with
    ``log(area)`` as offset (survey effort ``area``), or of
    ``record_density`` with weights ``area``, is the point-process fit.
    ``bias_layers`` are layers of observer bias (distance to a road, ...):
    fitted as covariates and held at one value on maps (Warton, Renner &
    Ramp 2013, PLoS ONE 8:e79168).
    """
    names = layers.names
    clash = [c for c in (*coords, RECORD, AREA, DENSITY) if c in names]
    if clash:
        raise InputError(f"a layer is named '{clash[0]}', a column of the presence-only table; "
                         "rename that layer's file")
    unknown = [b for b in bias_layers if b not in names]
    if unknown:
        raise InputError(f"bias layer '{unknown[0]}' is not one of the layers "
                         f"({', '.join(names)}); give the name of its file without .tif")
    at_records = values_at_points(layers, x, y)
    keep = at_records.usable
    if not keep.any():
        raise InputError(f"none of the {len(keep)} {what} lies on a cell with a value in every "
                         "layer; check that the records and the layers share a coordinate "
                         "system (give --points-crs when they do not)")
    notes = list(at_records.notes(what))
    areas = cell_areas(layers.grid)
    if areas.note:
        notes.append(areas.note)
    valid = valid_cells(layers)

    def cell_values(rows, cols):
        cx, cy = layers.grid.cell_centres(rows, cols)
        return values_at_points(layers, cx, cy).values.to_numpy()

    record_X = at_records.values.to_numpy()[keep]
    settling, tiles, extra_X = settle(valid, areas, at_records.rows[keep], at_records.cols[keep],
                                      record_X, cell_values, start_points=start_points,
                                      change=change, max_points=max_points)
    extra_w, record_w = berman_turner_weights(tiles, at_records.rows[keep], at_records.cols[keep])
    ex, ey = layers.grid.cell_centres(tiles.point_row, tiles.point_col)
    n_rec = int(keep.sum())
    table = pd.DataFrame(np.vstack([record_X, extra_X]), columns=names)
    table[coords[0]] = np.r_[np.asarray(x, dtype=np.float64)[keep], ex]
    table[coords[1]] = np.r_[np.asarray(y, dtype=np.float64)[keep], ey]
    table[RECORD] = np.r_[np.ones(n_rec, dtype=np.int64), np.zeros(ex.size, dtype=np.int64)]
    table[AREA] = np.r_[record_w, extra_w]
    table[DENSITY] = table[RECORD] / table[AREA]
    notes.append(settling.note())
    notes.append(f"intensity is in expected records per {areas.unit}; " + RELATIVE_NOTE)
    if bias_layers:
        listed = ", ".join(f"'{b}'" for b in bias_layers)
        notes.append(f"{listed} fitted as observer bias and held at one value on maps, so the "
                     "maps show habitat, not access (Warton, Renner & Ramp 2013)")
    return PresenceOnly(table, settling, tuple(notes), n_rec, areas.unit)
