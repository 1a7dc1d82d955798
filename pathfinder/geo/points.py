"""Points (records or sites) from a table or a file of point features, in the layers' CRS.

Points come as a table with two coordinate columns (a CSV or Parquet file,
read by :func:`pathfinder.data.intake.read_table`, or a pandas DataFrame), or
as a GeoPackage, shapefile or other vector file of points, read with
``pyogrio`` (its own CRS is used unless another is given). Coordinates in
another CRS than the layers' are transformed with ``pyproj`` (x = easting or
longitude, y = northing or latitude, whatever the CRS's axis order). A table
whose CRS is not given is taken to be in the layers' CRS, and a note says so.
Points with a missing coordinate are left out and counted.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyproj

from ..data.intake import parse_numbers, read_table
from ..errors import InputError, setting

VECTOR_SUFFIXES = (".gpkg", ".shp", ".geojson", ".json", ".fgb", ".gml", ".kml")
_WKB_POINT = 1


@dataclass(frozen=True)
class Points:
    """Points in the layers' CRS: their attributes, coordinates and what was done."""

    frame: pd.DataFrame        # attributes, one row per point kept (index: original rows)
    x: np.ndarray
    y: np.ndarray
    coords: tuple[str, str]    # names of the coordinate columns in ``frame``
    notes: tuple[str, ...]


def read_points(source, layers_crs_wkt: str, *, coords=None, points_crs=None,
                what: str = "records") -> Points:
    """Read points and bring them into the layers' CRS (see the module notes)."""
    if isinstance(source, pd.DataFrame):
        frame, notes, own_crs = source.copy(), [], None
    else:
        path = Path(source).expanduser()
        if path.suffix.lower() in VECTOR_SUFFIXES:
            frame, own_crs = _read_vector(path)
            coords = coords or ("x", "y")
            notes = [f"{what} read from the point features of {path.name}"]
        else:
            frame, info = read_table(path)
            notes, own_crs = list(info.notes), None
    if coords is None:
        raise InputError(f"the {what} table needs its coordinate columns: give "
                         + setting("coords=('X', 'Y')", "--coords X,Y"))
    coords = tuple(coords)
    if len(coords) != 2:
        raise InputError(f"give two coordinate columns (x then y), not {len(coords)}")
    for name in coords:
        if name not in frame.columns:
            raise InputError(f"the {what} have no column '{name}' for coordinates; the columns "
                             f"are {', '.join(map(str, frame.columns[:12]))}")
    x, bad_x = parse_numbers(frame[coords[0]])
    y, bad_y = parse_numbers(frame[coords[1]])
    if bad_x.any() or bad_y.any():
        name = coords[0] if bad_x.any() else coords[1]
        row = int(np.flatnonzero(bad_x | bad_y)[0]) + 1
        raise InputError(f"coordinate column '{name}' of the {what} holds text that is not a "
                         f"number (row {row}); correct it")
    keep = np.isfinite(x) & np.isfinite(y)
    if not keep.all():
        notes.append(f"{int((~keep).sum())} {what} without both coordinates left out")
    if not keep.any():
        raise InputError(f"none of the {what} has both coordinates; check the columns "
                         f"{coords[0]} and {coords[1]}")
    frame, x, y = frame.loc[keep], x[keep], y[keep]

    source_crs, said = _source_crs(points_crs, own_crs, layers_crs_wkt, what)
    notes.extend(said)
    if source_crs is not None:
        target = pyproj.CRS.from_wkt(layers_crs_wkt)
        if not source_crs.equals(target):
            transformer = pyproj.Transformer.from_crs(source_crs, target, always_xy=True)
            x, y = transformer.transform(x, y, errcheck=False)
            x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
            notes.append(f"{what} coordinates transformed from {_crs_name(source_crs)} to the "
                         f"layers' {_crs_name(target)}")
    return Points(frame, np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64),
                  coords, tuple(notes))


def parse_crs(text, what: str = "the points") -> pyproj.CRS:
    """A CRS from user text (``EPSG:4326``, a WKT or PROJ string); one line when it is not one."""
    try:
        return pyproj.CRS.from_user_input(text)
    except pyproj.exceptions.CRSError:
        raise InputError(f"'{text}' is not a coordinate system pyproj knows, for {what}; give "
                         "one such as EPSG:4326 (longitude, latitude) or EPSG:32630") from None


def _source_crs(points_crs, own_crs, layers_wkt, what):
    if points_crs is not None:
        given = parse_crs(points_crs, f"the {what}")
        if own_crs is not None and not given.equals(own_crs):
            return given, [f"the {what} are taken to be in {_crs_name(given)} as given, not in "
                           f"their file's own {_crs_name(own_crs)}"]
        return given, []
    if own_crs is not None:
        return own_crs, []
    if not layers_wkt:
        return None, []
    return None, [f"the {what}' coordinates are taken to be in the layers' coordinate system "
                  f"({_crs_name(pyproj.CRS.from_wkt(layers_wkt))}); give "
                  + setting("points_crs=", "--points-crs") + " when they are not"]


def _crs_name(crs: pyproj.CRS) -> str:
    epsg = crs.to_epsg()
    if epsg:
        return f"EPSG:{epsg}"
    return crs.name if crs.name and crs.name != "unknown" else "a system without an EPSG code"


def _read_vector(path: Path) -> tuple[pd.DataFrame, pyproj.CRS | None]:
    import pyogrio
    from pyogrio.errors import DataSourceError

    if not path.exists():
        raise InputError(f"file of points not found: {path}; check the name")
    try:
        meta, _, geometry, fields = pyogrio.raw.read(path)
    except DataSourceError as error:
        raise InputError(f"cannot read {path} as point features ({str(error).splitlines()[0]}); "
                         "give a GeoPackage, shapefile or a CSV with coordinate columns") from None
    if geometry is None:
        raise InputError(f"{path.name} holds no geometries; give a file of points")
    xy = np.array([_wkb_point(g, path.name, i) for i, g in enumerate(geometry)],
                  dtype=np.float64).reshape(-1, 2)
    frame = pd.DataFrame({str(name): values for name, values in zip(meta["fields"], fields)})
    if "x" in frame.columns or "y" in frame.columns:
        raise InputError(f"{path.name} has an attribute named x or y, which the point "
                         "coordinates would overwrite; rename it")
    frame["x"], frame["y"] = xy[:, 0], xy[:, 1]
    own = pyproj.CRS.from_user_input(meta["crs"]) if meta.get("crs") else None
    return frame, own


def _wkb_point(blob, file_name: str, index: int) -> tuple[float, float]:
    """x and y of a WKB point (2D, Z, M or ZM; ISO or extended codes); NaN for an empty one."""
    if blob is None:
        return (np.nan, np.nan)
    data = bytes(blob)
    order = "<" if data[0] == 1 else ">"
    (code,) = struct.unpack(order + "I", data[1:5])
    base = (code & 0x0FFFFFFF) % 1000
    offset = 5 + (4 if code & 0x20000000 else 0)   # extended WKB with an SRID
    if base != _WKB_POINT:
        raise InputError(f"feature {index + 1} of {file_name} is not a single point; give a "
                         "file of points (multipoints and shapes cannot be records)")
    x, y = struct.unpack(order + "dd", data[offset:offset + 16])
    return (x, y)
