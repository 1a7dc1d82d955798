"""From records and layers to a map, on the invented Carrow landscape (known intensity).

The landscape and records are invented (data_examples/landscape.py): records follow a
Poisson process with log-intensity linear in July temperature, rain and heather cover,
thinned by distance to a road; slope and wind have no effect.
"""

import numpy as np
import pytest
import rasterio
import statsmodels.api as sm
from scipy.stats import spearmanr

import pathfinder
from pathfinder.mapping import model_extras, presence_only_data, write_maps
from pathfinder.outputs.model_file import save_model
from pathfinder.outputs.write import model_of

from data_examples.landscape import (BIAS_LAYER, HABITAT, LAYERS, NOISE, make_landscape,
                                     write_landscape)

COORDS = ("x_m", "y_m")


@pytest.fixture(scope="module")
def land(tmp_path_factory):
    root = tmp_path_factory.mktemp("landscape")
    paths = write_landscape(root)
    data = presence_only_data(paths["records"], paths["layers"], coords=COORDS,
                              bias_layers=(BIAS_LAYER,))
    return {"root": root, "paths": paths, "data": data, "truth": make_landscape()}


def _glm(table, names):
    """Reference: statsmodels GLM, Poisson, records with offset log(area) (unpenalised)."""
    X = sm.add_constant(table[list(names)].to_numpy())
    return sm.GLM(table["record"].to_numpy(), X, family=sm.families.Poisson(),
                  offset=np.log(table["area"].to_numpy())).fit()


def test_lasso_keeps_the_habitat_layers_with_their_signs_and_the_map_ranks_cells(land):
    table = land["data"].table
    study = pathfinder.explore(
        table, response="record", family="poisson", effort="area", coords=COORDS,
        exclude=("record_density",), folds=4, block_size=25_000.0, nested=False,
        stability=False, subsets=False, relaxed_lasso=False, mixes=(1.0,), seed=7)
    chosen = dict(zip(study.chosen.names, study.chosen.coef))
    for name, b in HABITAT.items():
        assert np.sign(chosen[name]) == np.sign(b), name
    assert sum(chosen[name] != 0 for name in NOISE) <= 1        # noise mostly dropped
    # Sizes: the unpenalised refit of the chosen terms is within 3 standard errors of the truth.
    kept = [n for n in study.chosen.names if chosen[n] != 0]
    refit = _glm(table, kept)
    for name, b in HABITAT.items():
        j = kept.index(name) + 1
        assert abs(refit.params[j] - b) < 3 * refit.bse[j], name

    doc = model_of(study)
    doc.update(model_extras(doc, table, bias_layers=(BIAS_LAYER,), area_unit="square km"))
    save_model(doc, land["root"] / "model.json")
    result = write_maps(land["root"] / "model.json", land["paths"]["layers"], land["root"] / "maps")
    with rasterio.open(result.paths["prediction"]) as ds:
        pred = ds.read(1, masked=True)
    truth = land["truth"].habitat_intensity
    mapped = ~np.ma.getmaskarray(pred)
    assert mapped.sum() == np.isfinite(truth).sum()
    assert spearmanr(pred.data[mapped], truth[mapped]).statistic > 0.95
    assert any("relative intensity" in n for n in result.notes)
    assert result.summary.loc[0, "shows"] == "relative intensity: expected records per square km"


def test_fitting_the_road_and_holding_it_recovers_habitat_better_than_ignoring_it(land):
    """Warton, Renner & Ramp (2013): observer bias as a covariate, held fixed for the map.

    Both fits are statsmodels' unpenalised Poisson GLMs on the same quadrature table.
    """
    table = land["data"].table
    habitat = list(HABITAT)
    with_bias = _glm(table, habitat + [BIAS_LAYER])
    without = _glm(table, habitat)
    true = np.array(list(HABITAT.values()))
    err_with = np.abs(with_bias.params[1:4] - true) / np.abs(true)
    err_without = np.abs(without.params[1:4] - true) / np.abs(true)
    assert err_with.sum() < 0.5 * err_without.sum()
    assert np.all(np.abs(with_bias.params[1:4] - true) < 3 * with_bias.bse[1:4])
    assert with_bias.params[4] < 0                                # records fall off with distance

    layers = {name: land["truth"].layers[name] for name in LAYERS}
    valid = np.all([np.isfinite(v) for v in layers.values()], axis=0)
    held = np.median(table[BIAS_LAYER])
    eta_with = sum(b * layers[n][valid] for n, b in zip(habitat, with_bias.params[1:4])) \
        + with_bias.params[4] * held
    eta_without = sum(b * layers[n][valid] for n, b in zip(habitat, without.params[1:4]))
    truth = land["truth"].habitat_intensity[valid]
    rank_with = spearmanr(eta_with, truth).statistic
    rank_without = spearmanr(eta_without, truth).statistic
    assert rank_with > rank_without
    assert rank_with > 0.97
