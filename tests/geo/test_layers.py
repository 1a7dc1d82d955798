"""Layers on one grid, values at points, points from tables and files, CRS transformation."""

import numpy as np
import pandas as pd
import pyproj
import pytest
import rasterio

from pathfinder.errors import InputError
from pathfinder.geo.layers import open_layers, read_all, values_at_points
from pathfinder.geo.points import read_points
from pathfinder.mapping import layer_values

from .invented_layers import smooth, write_layer, write_layers


@pytest.fixture
def folder(tmp_path):
    rng = np.random.default_rng(5)
    temp = smooth(rng, (40, 60)) * 2 + 12
    rain = smooth(rng, (40, 60)) * 100 + 900
    rain[5:9, 10:14] = np.nan                    # no-data patch in one layer only
    return write_layers(tmp_path / "layers", {"temp": temp, "rain": rain})


def test_folder_of_layers_named_by_file(folder):
    layers = open_layers(folder)
    assert layers.names == ["rain", "temp"]
    assert (layers.grid.height, layers.grid.width) == (40, 60)


def test_values_at_points_equal_rasterio_sample(folder):
    """Reference: rasterio's own ``DatasetReader.sample`` at the same coordinates."""
    layers = open_layers(folder)
    rng = np.random.default_rng(1)
    a, _, c, _, e, f = layers.grid.transform
    x = c + rng.uniform(-300, 60 * a + 300, 400)          # some points fall outside
    y = f + rng.uniform(-300, -40 * e + 300, 400) * -1
    x = np.r_[x, c + 10 * a, c + 12 * a]                   # two points on cell edges
    y = np.r_[y, f + 6 * e, f + 7 * e]
    read = values_at_points(layers, x, y)
    for name in layers.names:
        with rasterio.open(folder / f"{name}.tif") as ds:
            inside = ((x >= ds.bounds.left) & (x < ds.bounds.right)
                      & (y > ds.bounds.bottom) & (y <= ds.bounds.top))
            sampled = np.array([v[0] for v in ds.sample(zip(x[inside], y[inside]))],
                               dtype=np.float64)
            expected = np.where(sampled == ds.nodata, np.nan, sampled)
        np.testing.assert_array_equal(read.values[name].to_numpy()[inside], expected)
        assert np.all(np.isnan(read.values[name].to_numpy()[~inside]))
    assert read.outside == int((~read.inside).sum()) > 0


def test_points_outside_and_on_nodata_are_counted_per_layer(folder):
    layers = open_layers(folder)
    x0, y0 = layers.grid.cell_centres([6, 7, 20], [11, 12, 30])    # two in the patch
    x = np.r_[x0, -1e9]
    y = np.r_[y0, 0.0]
    read = values_at_points(layers, x, y)
    assert read.outside == 1
    assert read.missing_by_layer == {"rain": 2, "temp": 0}
    assert read.usable.tolist() == [False, False, True, False]
    assert read.n_left_out == 3
    assert any("no-data cell of layer 'rain'" in line for line in read.notes())


def test_layer_values_add_columns_and_leave_out_counted_rows(folder):
    layers = open_layers(folder)
    x, y = layers.grid.cell_centres([6, 20, 30], [11, 30, 50])
    table = pd.DataFrame({"site": ["a", "b", "c"], "east": x, "north": y, "count": [1, 2, 3]})
    out, notes = layer_values(table, folder, coords=("east", "north"))
    assert out["site"].tolist() == ["b", "c"]
    grid = read_all(layers)
    assert out["temp"].tolist() == [grid[1, 20, 30], grid[1, 30, 50]]
    assert any("1 sites lie on a no-data cell of layer 'rain'" in n for n in notes)


@pytest.mark.parametrize("change, words", [
    ({"crs": "EPSG:32631"}, "coordinate system"),
    ({"transform": (100.0, 0.0, 500_050.0, 0.0, -100.0, 6_000_000.0)}, "origin or cell size"),
    ({"transform": (50.0, 0.0, 500_000.0, 0.0, -50.0, 6_000_000.0)}, "origin or cell size"),
])
def test_layers_on_another_grid_are_refused_in_one_line(folder, change, words):
    write_layer(folder / "wind.tif", np.ones((40, 60)), **change)
    with pytest.raises(InputError) as caught:
        open_layers(folder)
    message = str(caught.value)
    assert "\n" not in message
    assert "layer 'wind' (wind.tif)" in message and words in message
    assert "grid of rain.tif" in message


def test_layer_of_another_shape_is_refused(folder):
    write_layer(folder / "wind.tif", np.ones((41, 60)))
    with pytest.raises(InputError, match=r"'wind' .* 41 rows x 60 columns.* 40 x 60"):
        open_layers(folder)


def test_multiband_file_named_by_band_descriptions(tmp_path):
    values = np.stack([np.full((5, 6), 1.0), np.full((5, 6), 2.0)])
    path = write_layer(tmp_path / "climate.tif", values, descriptions=["frost", "sun"])
    layers = open_layers(path)
    assert layers.names == ["frost", "sun"]
    assert read_all(layers)[1, 0, 0] == 2.0
    bare = write_layer(tmp_path / "bare.tif", values)
    with pytest.raises(InputError, match="band 1 of the multiband file bare.tif has no description"):
        open_layers(bare)


def test_folder_without_geotiffs_and_duplicate_names_are_refused(tmp_path):
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="holds no GeoTIFF"):
        open_layers(tmp_path / "empty")
    (tmp_path / "a").mkdir()
    a = write_layer(tmp_path / "a" / "temp.tif", np.ones((3, 3)))
    b = write_layer(tmp_path / "b.tif", np.ones((2, 3, 3)), descriptions=["temp", "rain"])
    with pytest.raises(InputError, match="two layers are named 'temp'"):
        open_layers([a, b])


def test_points_in_another_crs_are_transformed_with_pyproj(folder):
    """Reference: pyproj's Transformer from EPSG:4326 to the layers' EPSG:32630."""
    layers = open_layers(folder)
    x, y = layers.grid.cell_centres([3, 30], [4, 50])
    back = pyproj.Transformer.from_crs("EPSG:32630", "EPSG:4326", always_xy=True)
    lon, lat = back.transform(x, y)
    table = pd.DataFrame({"lon": lon, "lat": lat})
    points = read_points(table, layers.grid.crs_wkt, coords=("lon", "lat"), points_crs="EPSG:4326")
    np.testing.assert_allclose(points.x, x, atol=1e-6)
    np.testing.assert_allclose(points.y, y, atol=1e-6)
    assert any("transformed from EPSG:4326" in n for n in points.notes)
    with pytest.raises(InputError, match="not a coordinate system"):
        read_points(table, layers.grid.crs_wkt, coords=("lon", "lat"), points_crs="EPSG:nonsense")


def test_points_from_a_geopackage_use_its_own_crs(folder, tmp_path):
    """The GeoPackage is written by pyogrio (GDAL); its CRS (EPSG:4326) is used unasked."""
    import pyogrio
    layers = open_layers(folder)
    x, y = layers.grid.cell_centres([3, 30, 12], [4, 50, 33])
    lon, lat = pyproj.Transformer.from_crs("EPSG:32630", "EPSG:4326", always_xy=True) \
        .transform(x, y)
    import struct
    wkb = np.array([struct.pack("<BIdd", 1, 1, a, b) for a, b in zip(lon, lat)], dtype=object)
    path = tmp_path / "records.gpkg"
    pyogrio.raw.write(path, wkb, [np.array(["p1", "p2", "p3"], dtype=object)], ["label"],
                      geometry_type="Point", crs="EPSG:4326", driver="GPKG")
    points = read_points(path, layers.grid.crs_wkt)
    np.testing.assert_allclose(points.x, x, atol=1e-6)
    np.testing.assert_allclose(points.y, y, atol=1e-6)
    assert points.frame["label"].tolist() == ["p1", "p2", "p3"]


def test_csv_without_a_crs_is_taken_in_the_layers_crs_and_said(folder, tmp_path):
    layers = open_layers(folder)
    x, y = layers.grid.cell_centres([3], [4])
    path = tmp_path / "records.csv"
    pd.DataFrame({"x": x, "y": y}).to_csv(path, index=False)
    points = read_points(path, layers.grid.crs_wkt, coords=("x", "y"))
    assert points.x.tolist() == x.tolist()
    assert any("taken to be in the layers' coordinate system (EPSG:32630)" in n
               for n in points.notes)
    with pytest.raises(InputError, match="no column 'east'"):
        read_points(path, layers.grid.crs_wkt, coords=("east", "y"))
