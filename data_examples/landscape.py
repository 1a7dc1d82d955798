"""An invented landscape of the Carrow uplands and invented presence-only records.

Everything here is invented for demonstrations and tests: the Carrow uplands
do not exist, and neither do their layers, roads or records. The landscape
covers the survey region (200 x 150 km) in 1 km cells, on an invented
transverse Mercator grid in metres (x and y in metres are the survey's
``x_km`` and ``y_km`` times 1000), with a strip of sea along the south-west
coast that has no value in any layer.

Six layers, made from smooth hidden fields (height, wetness, grazing) and a
few straight roads along the valleys:

* ``july_temp_c``        warmer in the valleys, cooler on the heights;
* ``annual_rain_mm``     wetter to the west and on the heights;
* ``heather_cover_pct``  on wet, lightly grazed heights;
* ``slope_deg``          a field of its own;
* ``wind_speed_m_s``     stronger on the heights and near the coast;
* ``distance_to_road_km`` from the nearest road; roads follow the warm valleys.

Records of the (invented) Carrow bell-moss follow an inhomogeneous Poisson
process whose log-intensity per square km is linear in temperature, rain and
heather (the ``HABITAT`` coefficients); slope and wind have no effect. The
records were then thinned by observers who seldom walk far from a road: a
record is kept with chance ``exp(ROAD_EFFECT * distance_to_road_km)``, so a
model that ignores the roads confuses access with habitat. Records lie
uniformly at random within their cells.

The layers are written as small GeoTIFFs at run time (``write_landscape``),
never shipped: about 0.7 MB for all six, uncompressed.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

LANDSCAPE_SEED = 2611
REGION_KM = (200.0, 150.0)
CELL_KM = 1.0
NODATA = -9999.0
CRS_PROJ = ("+proj=tmerc +lat_0=56.5 +lon_0=-30 +k=1 +x_0=0 +y_0=0 +ellps=GRS80 +units=m "
            "+no_defs")
LAYERS = ("july_temp_c", "annual_rain_mm", "heather_cover_pct", "slope_deg", "wind_speed_m_s",
          "distance_to_road_km")
HABITAT = {"july_temp_c": -0.45, "annual_rain_mm": 0.0018, "heather_cover_pct": 0.035}
NOISE = ("slope_deg", "wind_speed_m_s")
BIAS_LAYER = "distance_to_road_km"
ROAD_EFFECT = -0.06          # log chance of keeping a record, per km from a road
EXPECTED_RECORDS = 1500.0    # before thinning by observers


@dataclass(frozen=True)
class Landscape:
    """The layers (rows north to south), the true intensities and the records."""

    layers: dict                 # name -> (rows, cols) float64, NaN at sea
    transform: tuple             # affine (a, b, c, d, e, f)
    intercept: float             # of the habitat log-intensity, per square km
    habitat_intensity: np.ndarray   # expected records per square km before thinning
    observed_intensity: np.ndarray  # after thinning by distance to a road
    records: pd.DataFrame        # x_m, y_m of the records kept
    unthinned: pd.DataFrame      # x_m, y_m of every record before thinning


def _smooth_field(rng, shape, scale_cells):
    """A smooth random field (white noise blurred by a Gaussian, via FFT), mean 0, SD 1."""
    noise = rng.standard_normal(shape)
    ky = np.fft.fftfreq(shape[0])[:, None]
    kx = np.fft.fftfreq(shape[1])[None, :]
    kernel = np.exp(-2.0 * (np.pi * scale_cells) ** 2 * (kx ** 2 + ky ** 2))
    field = np.real(np.fft.ifft2(np.fft.fft2(noise) * kernel))
    return (field - field.mean()) / field.std()


def _distance_to_segments(xc, yc, segments):
    best = np.full(xc.shape, np.inf)
    for (x0, y0), (x1, y1) in segments:
        dx, dy = x1 - x0, y1 - y0
        t = np.clip(((xc - x0) * dx + (yc - y0) * dy) / (dx * dx + dy * dy), 0.0, 1.0)
        best = np.minimum(best, np.hypot(xc - (x0 + t * dx), yc - (y0 + t * dy)))
    return best


def make_landscape(seed: int = LANDSCAPE_SEED) -> Landscape:
    """The invented landscape and records, drawn from ``seed`` (numpy Generator)."""
    rng = np.random.default_rng(seed)
    cols, rows = int(REGION_KM[0] / CELL_KM), int(REGION_KM[1] / CELL_KM)
    transform = (CELL_KM, 0.0, 0.0, 0.0, -CELL_KM, REGION_KM[1])
    xc = (np.arange(cols) + 0.5) * CELL_KM
    yc = REGION_KM[1] - (np.arange(rows) + 0.5) * CELL_KM
    X, Y = np.meshgrid(xc, yc)

    height = _smooth_field(rng, (rows, cols), 14.0) + 0.6 * (Y / REGION_KM[1] - 0.5)
    wetness = _smooth_field(rng, (rows, cols), 10.0)
    grazing = _smooth_field(rng, (rows, cols), 8.0)
    roughness = _smooth_field(rng, (rows, cols), 5.0)
    sea = (X / REGION_KM[0] + Y / REGION_KM[1]) < 0.18

    # Roads: straight segments joining the warmest (lowest) cells of a few bands.
    segments, previous = [], None
    for band in range(6):
        c0, c1 = band * cols // 6, (band + 1) * cols // 6
        part = np.where(sea[:, c0:c1], np.inf, height[:, c0:c1])
        r, c = np.unravel_index(np.argmin(part), part.shape)
        point = (xc[c0 + c], yc[r])
        if previous is not None:
            segments.append((previous, point))
        previous = point
    for band in range(3):   # three side roads up the valleys from the main road
        r0, r1 = band * rows // 3, (band + 1) * rows // 3
        part = np.where(sea[r0:r1], np.inf, height[r0:r1])
        r, c = np.unravel_index(np.argmin(part), part.shape)
        segments.append(((xc[c], yc[r0 + r]), (xc[c] + 25.0, yc[r0 + r] + 30.0)))

    layers = {
        "july_temp_c": 14.5 - 2.2 * height + 0.3 * rng.standard_normal((rows, cols)),
        "annual_rain_mm": 1300 + 220 * height + 160 * wetness - 250 * (X / REGION_KM[0] - 0.5),
        "heather_cover_pct": np.clip(30 + 12 * height + 8 * wetness - 10 * grazing, 0, 95),
        "slope_deg": np.clip(9 + 4 * roughness, 0, 45),
        "wind_speed_m_s": 6 + 1.2 * height + 0.5 * _smooth_field(rng, (rows, cols), 6.0)
        + 1.5 * np.exp(-(X + Y) / 60.0),
        "distance_to_road_km": _distance_to_segments(X, Y, segments),
    }
    for name in layers:
        layers[name] = np.round(np.where(sea, np.nan, layers[name]), 3)

    eta = sum(b * layers[name] for name, b in HABITAT.items())
    area = CELL_KM ** 2
    intercept = float(np.log(EXPECTED_RECORDS / np.nansum(np.exp(eta) * area)))
    habitat = np.exp(intercept + eta)
    kept = np.exp(ROAD_EFFECT * layers[BIAS_LAYER])
    counts = rng.poisson(np.nan_to_num(habitat) * area)
    r, c = np.nonzero(counts)
    r, c = np.repeat(r, counts[r, c]), np.repeat(c, counts[r, c])
    x = (c + rng.random(c.size)) * CELL_KM
    y = REGION_KM[1] - (r + rng.random(r.size)) * CELL_KM
    keep = rng.random(r.size) < kept[r, c]
    unthinned = pd.DataFrame({"x_m": np.round(x * 1000.0, 1), "y_m": np.round(y * 1000.0, 1)})
    records = unthinned.loc[keep].reset_index(drop=True)
    return Landscape(layers, transform, intercept, habitat, habitat * kept, records, unthinned)


def write_landscape(folder, seed: int = LANDSCAPE_SEED) -> dict:
    """Write the layers (one GeoTIFF each), the records CSV and the truth JSON into ``folder``.

    Returns the paths: ``layers`` (the folder of GeoTIFFs), ``records`` and
    ``truth``. The GeoTIFFs are float32 with nodata -9999 at sea.
    """
    import rasterio

    folder = Path(folder)
    land = make_landscape(seed)
    layer_dir = folder / "layers"
    layer_dir.mkdir(parents=True, exist_ok=True)
    rows, cols = land.layers[LAYERS[0]].shape
    profile = {"driver": "GTiff", "width": cols, "height": rows, "count": 1, "dtype": "float32",
               "crs": rasterio.crs.CRS.from_proj4(CRS_PROJ),
               "transform": rasterio.Affine(*(v * 1000.0 if i in (0, 2, 4, 5) else v
                                              for i, v in enumerate(land.transform))),
               "nodata": NODATA}
    for name in LAYERS:
        with rasterio.open(layer_dir / f"{name}.tif", "w", **profile) as out:
            out.write(np.where(np.isnan(land.layers[name]), NODATA, land.layers[name])
                      .astype(np.float32), 1)
    records = folder / "bellmoss_records.csv"
    land.records.to_csv(records, index=False)
    truth = folder / "landscape_truth.json"
    truth.write_text(json.dumps({
        "what": "invented Carrow bell-moss records: an inhomogeneous Poisson process on the "
                "invented layers, thinned by distance to a road",
        "log_intensity_per_square_km": {"intercept": land.intercept, **HABITAT},
        "no_effect": list(NOISE),
        "observer_bias": {"layer": BIAS_LAYER, "log_chance_kept_per_km": ROAD_EFFECT},
        "seed": seed, "records": int(len(land.records)),
    }, indent=2) + "\n", encoding="utf-8")
    return {"layers": layer_dir, "records": records, "truth": truth}
