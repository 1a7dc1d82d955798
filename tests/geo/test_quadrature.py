"""Presence-only records as a point process: quadrature, weights, and the fits they give."""

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import minimize

import pathfinder
from pathfinder.errors import InputError
from pathfinder.geo.layers import open_layers, read_all, values_at_points
from pathfinder.geo.quadrature import (AREA, DENSITY, RECORD, berman_turner_weights, cell_areas,
                                       lay_tiles, presence_only_table, valid_cells)

from .invented_layers import smooth, write_layers

TRUE = np.array([0.8, -0.6])      # invented log-intensity slopes on the two layers


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    """Two invented layers (30 x 40 cells of 100 m) and records from a known intensity."""
    rng = np.random.default_rng(11)
    shape = (30, 40)
    temp, rain = smooth(rng, shape, 4.0), smooth(rng, shape, 4.0)
    temp[:3, :5] = np.nan                       # a corner without data
    folder = write_layers(tmp_path_factory.mktemp("scene") / "layers",
                          {"a_temp": temp, "b_rain": rain})
    layers = open_layers(folder)
    cells = read_all(layers)                    # the float32 values as stored
    eta = -1.0 + TRUE[0] * cells[0] + TRUE[1] * cells[1]
    area = cell_areas(layers.grid).by_row[0]
    counts = rng.poisson(np.nan_to_num(np.exp(eta)) * area * 25.0)
    r, c = np.nonzero(counts)
    r, c = np.repeat(r, counts[r, c]), np.repeat(c, counts[r, c])
    a, _, x0, _, e, y0 = layers.grid.transform
    x = x0 + (c + rng.random(c.size)) * a
    y = y0 + (r + rng.random(r.size)) * e
    return layers, cells, x, y


def _design(layers, x, y, step):
    """Records plus the extra points of one grid: X, record, area."""
    at = values_at_points(layers, x, y)
    keep = at.usable
    tiles = lay_tiles(valid_cells(layers), cell_areas(layers.grid), step)
    extra_w, record_w = berman_turner_weights(tiles, at.rows[keep], at.cols[keep])
    cx, cy = layers.grid.cell_centres(tiles.point_row, tiles.point_col)
    extra = values_at_points(layers, cx, cy).values.to_numpy()
    X = np.vstack([at.values.to_numpy()[keep], extra])
    record = np.r_[np.ones(int(keep.sum())), np.zeros(len(extra))]
    return X, record, np.r_[record_w, extra_w]


def _raster_mle(cells, layers, x, y):
    """The point-process maximum-likelihood fit on the raster, by scipy's BFGS.

    log L = sum over records of eta(cell of record) - sum over cells of area * exp(eta):
    exact for covariates constant within cells. Written here from the formula, not
    from the package's code.
    """
    at = values_at_points(layers, x, y)
    Xr = at.values.to_numpy()[at.usable]
    valid = np.all(np.isfinite(cells), axis=0)
    Xc = cells[:, valid].T
    area = cell_areas(layers.grid).by_row[0]

    def minus_ll(beta):
        eta_c = beta[0] + Xc @ beta[1:]
        return -(np.sum(beta[0] + Xr @ beta[1:]) - area * np.sum(np.exp(eta_c)))

    def grad(beta):
        mu = area * np.exp(beta[0] + Xc @ beta[1:])
        return -np.r_[len(Xr) - mu.sum(), Xr.sum(0) - Xc.T @ mu]

    fit = minimize(minus_ll, np.zeros(3), jac=grad, method="BFGS", options={"gtol": 1e-10})
    return fit.x


def test_weights_add_up_to_the_valid_area_and_share_tiles(scene):
    layers, cells, x, y = scene
    valid = valid_cells(layers)
    assert valid.sum() == np.all(np.isfinite(cells), axis=0).sum()
    area = cell_areas(layers.grid)
    for step in (1, 3, 7):
        X, record, w = _design(layers, x, y, step)
        np.testing.assert_allclose(w.sum(), valid.sum() * area.by_row[0], rtol=1e-12)
    # Berman & Turner's counting weights: a tile's records and its extra point share its area.
    tiles = lay_tiles(valid, area, 3)
    at = values_at_points(layers, x, y)
    where = tiles.of_cells(at.rows[at.usable], at.cols[at.usable])
    extra_w, record_w = berman_turner_weights(tiles, at.rows[at.usable], at.cols[at.usable])
    t = where[0]
    assert record_w[0] == pytest.approx(tiles.area[t] / (1 + np.sum(where == t)))
    assert extra_w[t] == record_w[0]


def test_down_weighted_poisson_equals_statsmodels_weighted_glm(scene):
    """Reference: statsmodels GLM, Poisson family, response z = y / w with var_weights w
    (Warton & Shepherd 2010, section 2; Renner et al. 2015, eq. 4), to 1e-6."""
    layers, _, x, y = scene
    X, record, w = _design(layers, x, y, 3)
    z = record / w
    ref = sm.GLM(z, sm.add_constant(X), family=sm.families.Poisson(), var_weights=w).fit(
        tol=1e-14)
    ours = pathfinder.fit_path(X, z, family="poisson", weights=w, penalties=[0.0], tol=1e-12)
    np.testing.assert_allclose(ours.coef[0], ref.params[1:], rtol=1e-6, atol=1e-8)
    assert ours.intercept[0] == pytest.approx(ref.params[0], rel=1e-6)
    # The same likelihood as a Poisson GLM of the 0/1 records with offset log(w).
    as_effort = pathfinder.fit_path(X, record, family="poisson", offset=np.log(w),
                                    penalties=[0.0], tol=1e-12)
    np.testing.assert_allclose(as_effort.coef[0], ref.params[1:], rtol=1e-6, atol=1e-8)


def test_penalised_fits_of_the_two_forms_agree_at_matched_penalties(scene):
    """Same objective up to the scale of the weights: penalty l with weights summing to W
    equals penalty l * W / n with the offset form (design conventions, DESIGN.md)."""
    layers, _, x, y = scene
    X, record, w = _design(layers, x, y, 2)
    lam = np.array([0.02, 0.005])
    a = pathfinder.fit_path(X, record / w, family="poisson", weights=w, penalties=lam,
                            standardize=False, tol=1e-12)
    b = pathfinder.fit_path(X, record, family="poisson", offset=np.log(w),
                            penalties=lam * w.sum() / len(w), standardize=False, tol=1e-12)
    np.testing.assert_allclose(a.coef, b.coef, rtol=1e-5, atol=1e-7)


def test_slopes_approach_the_point_process_mle_as_the_quadrature_grows(scene):
    """Warton & Shepherd (2010) and Renner et al. (2015): the quadrature fit tends to the
    point-process MLE as the quadrature points grow; on a raster, one point per cell is exact."""
    layers, cells, x, y = scene
    mle = _raster_mle(cells, layers, x, y)
    errors = []
    for step in (8, 4, 2, 1):
        X, record, w = _design(layers, x, y, step)
        fit = pathfinder.fit_path(X, record, family="poisson", offset=np.log(w),
                                  penalties=[0.0], tol=1e-12)
        errors.append(np.max(np.abs(fit.coef[0] - mle[1:])))
    assert errors[-1] < 1e-6
    assert errors[2] < errors[0] and errors[1] < errors[0]
    assert np.all(np.abs(mle[1:] - TRUE) < 0.25)          # the invented truth, sampling error


def test_table_is_ready_for_a_poisson_fit_and_says_the_intensity_is_relative(scene):
    layers, _, x, y = scene
    result = presence_only_table(layers, x, y, coords=("east", "north"))
    table = result.table
    assert list(table.columns) == layers.names + ["east", "north", RECORD, AREA, DENSITY]
    assert table[RECORD].sum() == result.n_records
    assert np.all(table[AREA] > 0) and np.all(np.isfinite(table.to_numpy()))
    np.testing.assert_array_equal(table[DENSITY], table[RECORD] / table[AREA])
    assert any("relative intensity" in n for n in result.notes)
    assert any("per square km" in n for n in result.notes)
    steps = result.settling.table
    assert steps["step_cells"].is_monotonic_decreasing
    last = steps.iloc[-1]
    assert result.settling.settled == (abs(last["change"]) <= 0.5)
    assert result.settling.note() in result.notes


def test_quadrature_that_cannot_grow_says_it_did_not_settle(scene):
    layers, _, x, y = scene
    result = presence_only_table(layers, x, y, start_points=20, change=1e-9, max_points=200)
    assert not result.settling.settled
    assert any("did not settle" in n for n in result.notes)


def test_bias_layer_must_be_a_layer_and_records_must_fall_on_the_layers(scene):
    layers, _, x, y = scene
    with pytest.raises(InputError, match="bias layer 'roads' is not one of the layers"):
        presence_only_table(layers, x, y, bias_layers=("roads",))
    with pytest.raises(InputError, match="none of the .* records lies on a cell"):
        presence_only_table(layers, x + 1e7, y)
