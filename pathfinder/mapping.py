"""Layers and records in, maps out: what the command line and the report call.

``presence_only_table(records, layers, ...)``
    Records (a CSV, a GeoPackage or shapefile of points, or a DataFrame) and
    GeoTIFF layers -> the table of records and quadrature points that a
    Poisson fit takes as the point-process fit, and plain notes.
``layer_values(table, layers, ...)``
    A survey table with coordinates -> the same table with every layer's
    value at each site as a column (sites outside the layers or on no-data
    cells left out and counted).
``model_extras(document, training, ...)``
    What a model file needs beyond its own keys for maps: the training
    means and covariance of its covariates for novelty, the observer-bias
    layers and their held values, and whether the model is presence-only.
``write_maps(model, layers, out_dir, ...)``
    The maps of a model file over layers (``geo/maps.py``), complete or not
    at all, and a :class:`MapResult` with notes and summary tables.
"""

from __future__ import annotations

import math
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError, setting
from .geo.layers import open_layers, values_at_points
from .geo.maps import (MESS, MOST_DISSIMILAR, NOVELTY, PREDICTION, Combinations, MapCounts,
                       MapModel, combination_summary, write_map_files)
from .geo.points import read_points
from .geo.quadrature import AREA, RECORD, RELATIVE_NOTE, PresenceOnly
from .geo.quadrature import presence_only_table as _presence_only
from .predict import Model, load_model

HELD_KEY = "held_fixed"          # model-file key: covariate -> value held on maps
COMBINATIONS_KEY = "combinations"
PRESENCE_KEY = "presence_only"
BIAS_PERCENTILE = 50             # default held value of a bias layer: its training median


# ---------------------------------------------------------------------------
# Tables from layers
# ---------------------------------------------------------------------------


def presence_only_data(records, layers, *, coords=None, points_crs=None, bias_layers=(),
                       **quadrature) -> PresenceOnly:
    """Records and layers -> :class:`pathfinder.geo.quadrature.PresenceOnly` (table and report).

    ``coords`` names the x and y columns of a records table (a file of point
    features has its own; the table then names them ``x`` and ``y``);
    ``points_crs`` is the records' coordinate system when it is not the
    layers' (or the file's own). Further keywords (``start_points``,
    ``change``, ``max_points``) tune the quadrature.
    """
    grid_layers = open_layers(layers)
    points = read_points(records, grid_layers.grid.crs_wkt, coords=coords,
                         points_crs=points_crs, what="records")
    result = _presence_only(grid_layers, points.x, points.y, coords=points.coords,
                            bias_layers=tuple(bias_layers), **quadrature)
    return PresenceOnly(result.table, result.settling, points.notes + result.notes,
                        result.n_records, result.area_unit)


def presence_only_table(records, layers, *, coords=None, points_crs=None, bias_layers=(),
                        **quadrature) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """The point-process table of records and quadrature points, and notes.

    Fit it with family Poisson, response ``record`` and survey effort
    ``area`` (log(area) as offset), or response ``record_density`` with
    weights ``area``: both are the Berman-Turner point-process likelihood
    (see ``geo/quadrature.py``). Coordinates keep the records' column names,
    so spatial blocks can be cut over records and quadrature points alike.
    """
    result = presence_only_data(records, layers, coords=coords, points_crs=points_crs,
                                bias_layers=bias_layers, **quadrature)
    return result.table, result.notes


def layer_values(table, layers, *, coords, points_crs=None, what="sites"):
    """A table with each layer's value at its sites added as columns, and notes.

    Rows outside the layers or on a no-data cell of any layer are left out
    and counted per layer. A layer with the name of a column is refused.
    """
    grid_layers = open_layers(layers)
    points = read_points(table, grid_layers.grid.crs_wkt, coords=coords, points_crs=points_crs,
                         what=what)
    clash = [name for name in grid_layers.names if name in points.frame.columns]
    if clash:
        raise InputError(f"layer '{clash[0]}' has the name of a column of the table; rename the "
                         "layer's file or the column")
    read = values_at_points(grid_layers, points.x, points.y)
    out = points.frame.copy()
    for name in grid_layers.names:
        out[name] = read.values[name].to_numpy()
    out = out.loc[read.usable]
    if out.empty:
        raise InputError(f"none of the {len(read.usable)} {what} lies on a cell with a value in "
                         "every layer; check that the table and the layers share a coordinate "
                         "system (give " + setting("points_crs=", "--points-crs") + " when not)")
    return out, points.notes + read.notes(what)


def model_extras(document: dict, training: pd.DataFrame, *, bias_layers=(), bias_values=None,
                 area_unit: str | None = None) -> dict:
    """Keys to add to a model file (``document``) so that maps can be drawn from it alone.

    ``combinations``: means, whitening and largest squared distance of the
    model's numeric covariates (bias layers left out) over the ``training``
    rows (records and quadrature points for presence-only data), for the
    novelty map; null when fewer than two covariates or a singular
    covariance. ``held_fixed``: each bias layer and the value maps hold it at
    (``bias_values[name]``, else its training median). ``presence_only``:
    ``{"area_unit": ...}`` for a point-process fit (``area_unit`` given),
    else false. Model files without these keys still map (without novelty,
    with nothing held unless asked).
    """
    bias = tuple(bias_layers)
    model = Model(document)
    names = [c for c in model.numeric if c not in bias]
    values = training[names].apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    combos = combination_summary(values, names)
    held = {}
    for name in bias:
        given = None if bias_values is None else bias_values.get(name)
        column = pd.to_numeric(training[name], errors="coerce").to_numpy(dtype=np.float64)
        held[name] = float(given) if given is not None else \
            float(np.nanpercentile(column, BIAS_PERCENTILE))
    return {COMBINATIONS_KEY: None if combos is None else combos.to_dict(), HELD_KEY: held,
            PRESENCE_KEY: {"area_unit": str(area_unit)} if area_unit else False}


# ---------------------------------------------------------------------------
# Maps
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class MapResult:
    """What ``write_maps`` wrote and found.

    ``paths``: map name -> file; ``notes``: plain lines for the terminal,
    run record and report; ``summary``: one row per map (file, shows,
    cells_mapped, low, high); ``novel_by_covariate``: for each MESS
    covariate, the number and share of mapped cells where it lies outside
    its sampled range and sets the MESS; ``held``: covariates held at one
    value; ``covariates``: the MESS covariates in the order of the indices
    of ``most_dissimilar.tif`` (1 = first).
    """

    paths: dict
    notes: tuple[str, ...]
    summary: pd.DataFrame
    novel_by_covariate: pd.DataFrame
    held: dict
    covariates: tuple[str, ...]
    counts: MapCounts


def write_maps(model_path, layers, out_dir, *, jobs=1, bias_values=None, reference=None,
               window_rows=None, overwrite=False) -> MapResult:
    """Map a model over layers: prediction, MESS, most dissimilar and novelty GeoTIFFs.

    ``model_path``: a model file (or a loaded :class:`pathfinder.predict.Model`).
    ``layers``: a folder of GeoTIFFs, a file or a list of files, holding every
    covariate of the model's terms (other layers are ignored).
    ``out_dir``: the folder for the maps (created if missing; existing maps
    are replaced only with ``overwrite=True``); the files appear complete or
    not at all.
    ``bias_values``: covariates of observer bias held at one value on every
    cell: a mapping name -> value (None: the value in the model file, else
    the training median), or a list of names. Without it, the model file's
    ``held_fixed`` is used. Held covariates need no layer.
    ``reference``: the training rows (a DataFrame) for the novelty map when
    the model file has no ``combinations``.
    ``jobs``: windows computed at once, on threads.
    """
    model = model_path if isinstance(model_path, Model) else load_model(model_path)
    doc = model.document
    held = _held_values(model, bias_values)
    mess_names = tuple(name for name in model.numeric if name not in held)
    keep = [model.numeric.index(name) for name in mess_names]
    combos = _combinations(doc, reference, mess_names)
    map_model = MapModel(
        intercept=model.intercept,
        terms=model.active_terms,
        coef=model.coef[model.coef != 0],
        inverse_link=model.inverse_link,
        factors={k: tuple(v) for k, v in model.factors.items()},
        mess_names=mess_names,
        percentiles=model.percentiles[keep].reshape(len(keep), -1),
        ranges=model.ranges[keep].reshape(len(keep), 2),
        held=held,
        combinations=combos,
        prediction_words=_prediction_words(doc),
    )
    grid_layers = open_layers(layers)
    needed = map_model.layer_names
    absent = [name for name in needed if name not in grid_layers.names]
    if absent:
        listed = ", ".join(f"'{name}'" for name in absent)
        raise InputError(f"the layers lack {listed}, which the model uses; add a GeoTIFF named "
                         f"after each (e.g. {absent[0]}.tif) on the grid of the others")
    if not needed:
        raise InputError("the model uses no covariate that a layer could give (an intercept-only "
                         "model maps to one value); choose a model with terms")
    used = grid_layers.subset(needed)
    out = _prepare_folder(out_dir, overwrite)
    temp = Path(tempfile.mkdtemp(prefix=".maps-", dir=out))
    try:
        written, counts, nodata = write_map_files(map_model, used, temp, jobs=jobs,
                                                  rows=window_rows)
        paths = {}
        for name, path in written.items():
            target = out / name
            os.replace(path, target)
            paths[name[:-4]] = target
    finally:
        shutil.rmtree(temp, ignore_errors=True)
    notes = _notes(model, map_model, counts, nodata, doc, len(grid_layers.names) - len(needed))
    return MapResult(paths, notes, _summary(paths, counts, map_model),
                     _by_covariate(map_model, counts), held, mess_names, counts)


def _held_values(model: Model, bias_values) -> dict:
    doc_held = model.document.get(HELD_KEY) or {}
    if bias_values is None:
        wanted = dict(doc_held)
    elif isinstance(bias_values, dict):
        wanted = dict(bias_values)
    else:
        wanted = {name: None for name in bias_values}
    held = {}
    sources = set(model.numeric) | {s for t in model.terms for s in t.sources}
    for name, value in wanted.items():
        if name not in sources:
            continue       # a bias layer the model dropped needs no value
        if value is None:
            value = doc_held.get(name)
        if value is None:
            table = model.document["training"]["numeric"].get(name)
            if table is None:
                raise InputError(f"no value to hold '{name}' at: give one, e.g. "
                                 + setting(f"bias_values={{'{name}': 0}}",
                                           f"--bias-layers {name}=0"))
            value = table["percentiles"][BIAS_PERCENTILE]
        if not math.isfinite(float(value)):
            raise InputError(f"the value to hold '{name}' at must be a finite number, not {value}")
        held[name] = float(value)
    return held


def _combinations(doc, reference, names) -> Combinations | None:
    if reference is not None:
        missing = [n for n in names if n not in reference.columns]
        if missing:
            raise InputError(f"the reference table lacks '{missing[0]}', a covariate of the model")
        values = reference[list(names)].apply(pd.to_numeric, errors="coerce")
        return combination_summary(values.to_numpy(dtype=np.float64), names)
    stored = doc.get(COMBINATIONS_KEY)
    if not stored:
        return None
    combos = Combinations.from_dict(stored)
    return combos if combos.names == tuple(names) else None


def _prediction_words(doc) -> str:
    presence = doc.get(PRESENCE_KEY)
    if presence:
        unit = presence.get("area_unit", "unit area") if isinstance(presence, dict) else "unit area"
        return f"relative intensity: expected records per {unit}"
    return str(doc["response"].get("prediction") or "prediction")


def _prepare_folder(out_dir, overwrite) -> Path:
    out = Path(out_dir).expanduser()
    if out.exists() and not out.is_dir():
        raise InputError(f"{out} is a file; give the maps a folder, e.g. --out maps")
    if not out.parent.is_dir():
        raise InputError(f"the folder above {out} does not exist; create it first")
    out.mkdir(exist_ok=True)
    there = [name for name in (PREDICTION, MESS, MOST_DISSIMILAR, NOVELTY) if (out / name).exists()]
    if there and not overwrite:
        raise InputError(f"{out} already holds {there[0]}; choose another folder, or "
                         + setting("give overwrite=True", "add --overwrite") + " to replace the maps")
    return out


def _notes(model, map_model, counts, nodata, doc, n_ignored) -> tuple[str, ...]:
    notes = [f"{counts.mapped} of {counts.cells} cells mapped; the others lack a value in a "
             "layer the model uses and hold the no-data value "
             f"({'NaN' if math.isnan(nodata) else format(nodata, 'g')}; 0 in most_dissimilar.tif)"]
    if doc.get(PRESENCE_KEY):
        notes.append("prediction.tif: " + RELATIVE_NOTE)
    else:
        notes.append(f"prediction.tif: {map_model.prediction_words}")
    rule = model.offset_rule
    if rule is not None and rule.get("column") != AREA:
        what = "per unit of effort" if rule.get("kind") == "effort" else "with the offset at 0"
        notes.append(f"the model's offset '{rule.get('column')}' has no layer: predictions are "
                     f"{what}")
    for name, value in map_model.held.items():
        notes.append(f"'{name}' (observer bias) held at {value:g} on every cell, so the map "
                     "shows habitat, not access; under a model where it enters alone and "
                     "linearly, another value would rescale the map without changing its ranking")
    if counts.not_finite:
        notes.append(f"{counts.not_finite} cells have a prediction too large for a number "
                     "(far outside the training range) and hold the no-data value")
    if map_model.mess_names:
        notes.append(f"{counts.novel} mapped cells are novel (MESS < 0): a covariate lies outside "
                     "its sampled range there, so the prediction is an extrapolation")
    else:
        notes.append("the model has no numeric covariate: no MESS")
    if map_model.combinations is not None:
        notes.append(f"{counts.novel_combinations} mapped cells inside every covariate's range "
                     "hold a combination of covariates never sampled (novelty above 1, Mesgaran "
                     "et al. 2014)")
    elif len(map_model.mess_names) >= 2:
        notes.append("no map of novel combinations: the model file carries no training "
                     "covariance of these covariates (give the training rows as reference)")
    if n_ignored:
        notes.append(f"{n_ignored} layers the model does not use were not read")
    return tuple(notes)


def _summary(paths, counts: MapCounts, map_model: MapModel) -> pd.DataFrame:
    shows = {"prediction": map_model.prediction_words,
             "mess": "similarity to the sampled conditions (MESS); below 0 = novel",
             "most_dissimilar": "covariate that sets the MESS (1 = "
                                + (map_model.mess_names[0] if map_model.mess_names else "-") + ")",
             "novel_combinations": "squared Mahalanobis distance / largest in training"}
    rows = []
    for name, path in paths.items():
        low, high = (counts.low, counts.high) if name == "prediction" else (math.nan, math.nan)
        rows.append({"map": name, "file": path.name, "shows": shows[name],
                     "cells_mapped": counts.mapped, "low": low, "high": high})
    return pd.DataFrame(rows)


def _by_covariate(map_model: MapModel, counts: MapCounts) -> pd.DataFrame:
    novel = np.array(counts.by_covariate, dtype=np.int64)
    share = novel / counts.mapped if counts.mapped else np.zeros(len(novel))
    return pd.DataFrame({"index": np.arange(1, len(novel) + 1),
                         "covariate": list(map_model.mess_names), "novel_cells": novel,
                         "share_of_mapped": share})
