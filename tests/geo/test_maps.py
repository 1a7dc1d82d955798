"""Maps over layers: grid kept, windows that change nothing, MESS and novelty as published."""

import numpy as np
import pandas as pd
import pytest
import rasterio

from pathfinder.data.design import Term, apply_design
from pathfinder.errors import InputError
from pathfinder.geo.layers import open_layers, read_all
from pathfinder.mapping import model_extras, write_maps
from pathfinder.outputs.model_file import model_document, save_model
from pathfinder.predict import Model, load_model

from .invented_layers import smooth, write_layers

SHAPE = (45, 70)
TEMP_C, RAIN_C = 12.0, 900.0
TERMS = (Term("temp", "numeric", ("temp",), group="temp"),
         Term("rain", "numeric", ("rain",), group="rain"),
         Term("temp^2", "square", ("temp",), group="temp", centers=(TEMP_C,)),
         Term("temp:rain", "interaction", ("temp", "rain"), group="temp:rain",
              centers=(TEMP_C, RAIN_C)),
         Term("road", "numeric", ("road",), group="road"))
COEF = np.array([0.4, 0.004, -0.08, 0.001, -0.2])


@pytest.fixture(scope="module")
def mapped(tmp_path_factory):
    """Invented layers; a model trained on the western half only, so the east is novel."""
    root = tmp_path_factory.mktemp("maps")
    rng = np.random.default_rng(3)
    temp = 12 + 2.5 * smooth(rng, SHAPE, 5.0) + np.linspace(-2, 3, SHAPE[1])[None, :]
    rain = 900 + 120 * smooth(rng, SHAPE, 5.0) + 40 * (temp - 12)   # moves with temperature
    road = np.abs(3 * smooth(rng, SHAPE, 2.0))
    unused = smooth(rng, SHAPE)
    temp[10:14, 20:26] = np.nan
    unused[30:40, 5:15] = np.nan
    folder = write_layers(root / "layers", {"temp": temp, "rain": rain, "road": road,
                                            "unused": unused})
    layers = open_layers(folder)
    cells = dict(zip(layers.names, read_all(layers)))
    r = rng.integers(0, SHAPE[0], 2500)
    c = rng.integers(0, SHAPE[1] // 2, 2500)
    frame = pd.DataFrame({name: cells[name][r, c] for name in ("temp", "rain", "road")}).dropna()
    frame = frame.reset_index(drop=True)
    doc = model_document(family="poisson", response_name="count", response_labels=None,
                         terms=TERMS, reference_levels={}, intercept=-1.5, coef=COEF,
                         offset_rule=None, training_frame=frame,
                         training_X=apply_design(TERMS, {}, frame),
                         pick={"method": "lasso", "rule": "min", "mix": 1.0, "penalty": 0.01},
                         package_version="0.1.0")
    doc.update(model_extras(doc, frame, bias_layers=("road",), bias_values={"road": 0.5}))
    model_path = root / "model.json"
    save_model(doc, model_path)
    whole = write_maps(model_path, folder, root / "whole", window_rows=SHAPE[0])
    return {"root": root, "folder": folder, "layers": layers, "cells": cells, "frame": frame,
            "model": model_path, "whole": whole}


def _read(path):
    with rasterio.open(path) as ds:
        return ds.read(1), ds.profile


def test_maps_keep_the_grid_crs_and_nodata_of_the_layers(mapped):
    with rasterio.open(mapped["folder"] / "temp.tif") as src:
        grid = (src.crs, src.transform, src.width, src.height, src.nodata)
    for name, path in mapped["whole"].paths.items():
        with rasterio.open(path) as ds:
            assert (ds.crs, ds.transform, ds.width, ds.height) == grid[:4], name
            assert ds.nodata == (0 if name == "most_dissimilar" else grid[4])
            assert ds.profile["tiled"] and ds.profile["compress"] == "zstd"
    assert set(mapped["whole"].paths) == {"prediction", "mess", "most_dissimilar",
                                          "novel_combinations"}


@pytest.mark.parametrize("rows, jobs", [(7, 1), (1, 2), (16, 2)])
def test_windowed_maps_equal_the_whole_array_exactly(mapped, rows, jobs):
    out = write_maps(mapped["model"], mapped["folder"], mapped["root"] / f"w{rows}_{jobs}",
                     window_rows=rows, jobs=jobs)
    for name, path in mapped["whole"].paths.items():
        a, _ = _read(path)
        b, _ = _read(out.paths[name])
        assert np.array_equal(a, b, equal_nan=True), name
    assert out.counts == mapped["whole"].counts


def test_prediction_equals_the_model_file_prediction_with_bias_held(mapped):
    """Reference: pathfinder.predict.Model.predict on a table of the cells' values, with the
    bias layer 'road' set to the held value 0.5 (Warton, Renner & Ramp 2013)."""
    cells = mapped["cells"]
    pred, profile = _read(mapped["whole"].paths["prediction"])
    has = np.isfinite(cells["temp"]) & np.isfinite(cells["rain"])
    table = pd.DataFrame({"temp": cells["temp"][has], "rain": cells["rain"][has], "road": 0.5})
    expected = load_model(mapped["model"]).predict(table)["prediction"].to_numpy()
    np.testing.assert_allclose(pred[has], expected, rtol=1e-6)
    assert np.all(pred[~has] == profile["nodata"])          # the unused layer's gaps are mapped
    assert mapped["whole"].held == {"road": 0.5}
    assert any("'road' (observer bias) held at 0.5" in n for n in mapped["whole"].notes)


def _elith_similarity(p, train):
    """Elith, Kearney & Phillips (2010), Appendix S3 formula, from the training values."""
    low, high = train.min(), train.max()
    f = 100.0 * (train[None, :] < p[:, None]).mean(axis=1)
    return np.select([f == 0, f <= 50, f < 100],
                     [(p - low) / (high - low) * 100, 2 * f, 2 * (100 - f)],
                     default=(high - p) / (high - low) * 100)


def test_mess_equals_the_formula_of_elith_et_al(mapped):
    """Reference: the MESS formula of Elith et al. (2010) on the training values directly.

    Outside the sampled range the formula is exact; inside it the model file keeps 101
    percentiles, not the 2,400 training values, so f is read by interpolation and may
    differ by up to one percentile step: similarity within 2 (the module notes say so).
    """
    cells, frame = mapped["cells"], mapped["frame"]
    score, _ = _read(mapped["whole"].paths["mess"])
    worst, _ = _read(mapped["whole"].paths["most_dissimilar"])
    has = np.isfinite(cells["temp"]) & np.isfinite(cells["rain"])
    names = mapped["whole"].covariates
    assert names == ("temp", "rain")                         # road is held: not in MESS
    each = np.column_stack([_elith_similarity(cells[n][has], frame[n].to_numpy())
                            for n in names])
    direct = each.min(axis=1)
    ours = score[has].astype(np.float64)
    outside = direct < 0
    assert 100 < outside.sum() < has.sum()
    np.testing.assert_allclose(ours[outside], direct[outside], rtol=1e-5, atol=1e-4)
    assert np.all(np.abs(ours[~outside] - direct[~outside]) <= 2.0)
    assert np.array_equal(ours < 0, outside)
    clear = np.abs(each[:, 0] - each[:, 1]) > 5
    assert np.array_equal(worst[has][clear], each[clear].argmin(axis=1) + 1)
    novel = mapped["whole"].novel_by_covariate
    assert novel["novel_cells"].sum() == outside.sum() == mapped["whole"].counts.novel


def test_novelty_is_the_mahalanobis_ratio_of_mesgaran_et_al(mapped):
    """Reference: Mesgaran, Cousens & Webber (2014) NT2, squared Mahalanobis distance from the
    training mean over its largest value in training, here with numpy's inverse covariance."""
    cells, frame = mapped["cells"], mapped["frame"]
    novelty, _ = _read(mapped["whole"].paths["novel_combinations"])
    has = np.isfinite(cells["temp"]) & np.isfinite(cells["rain"])
    train = frame[["rain", "temp"]].to_numpy()
    inverse = np.linalg.inv(np.cov(train, rowvar=False))
    centred = train - train.mean(axis=0)
    largest = np.max(np.einsum("ij,jk,ik->i", centred, inverse, centred))
    new = np.column_stack([cells["rain"][has], cells["temp"][has]]) - train.mean(axis=0)
    expected = np.einsum("ij,jk,ik->i", new, inverse, new) / largest
    np.testing.assert_allclose(novelty[has], expected, rtol=1e-5)
    assert mapped["whole"].counts.novel_combinations == int(np.sum(
        (expected > 1) & (_read(mapped["whole"].paths["mess"])[0][has] >= 0)))


def test_a_missing_layer_is_refused_in_one_line_unless_it_is_held(mapped, tmp_path):
    only = write_layers(tmp_path / "some", {"temp": mapped["cells"]["temp"]})
    with pytest.raises(InputError, match=r"^the layers lack 'rain', which the model uses"):
        write_maps(mapped["model"], only, tmp_path / "out")
    model = load_model(mapped["model"])
    doc = dict(model.document, held_fixed={})
    with pytest.raises(InputError, match="lack 'road'"):
        write_maps(Model(doc), [mapped["folder"] / "temp.tif", mapped["folder"] / "rain.tif"],
                   tmp_path / "out2")
    result = write_maps(Model(doc), [mapped["folder"] / "temp.tif", mapped["folder"] / "rain.tif"],
                        tmp_path / "out3", bias_values={"road": 0.5})
    a, _ = _read(result.paths["prediction"])
    b, _ = _read(mapped["whole"].paths["prediction"])
    assert np.array_equal(a, b, equal_nan=True)


def test_existing_maps_are_kept_unless_overwrite(mapped):
    with pytest.raises(InputError, match="already holds prediction.tif"):
        write_maps(mapped["model"], mapped["folder"], mapped["root"] / "whole")
    again = write_maps(mapped["model"], mapped["folder"], mapped["root"] / "whole",
                       window_rows=SHAPE[0], overwrite=True)
    assert again.counts == mapped["whole"].counts
    assert sorted(p.name for p in (mapped["root"] / "whole").iterdir()) == sorted(
        p.name for p in again.paths.values())


def test_the_map_command_writes_the_three_maps_the_contract_names(mapped, tmp_path):
    """DESIGN.md's command-line contract: `pathfinder map MODEL.json LAYERS --out MAPDIR` writes
    prediction.tif, mess.tif and most_dissimilar.tif on the layers' grid; the values are those
    write_maps gives (checked above against the model file and Elith et al. 2010)."""
    from pathfinder.cli import main

    out = tmp_path / "maps"
    assert main(["map", str(mapped["model"]), str(mapped["folder"]), "--out", str(out),
                 "--quiet"]) == 0
    for name in ("prediction.tif", "mess.tif", "most_dissimilar.tif"):
        with rasterio.open(out / name) as made, rasterio.open(mapped["whole"].paths[name.split(".")[0]]) as whole:
            assert made.shape == SHAPE and made.crs == whole.crs
            assert np.array_equal(made.read(1), whole.read(1), equal_nan=True)
    assert main(["map", str(mapped["model"]), str(tmp_path / "nowhere"), "--out",
                 str(tmp_path / "m2"), "--quiet"]) == 2
