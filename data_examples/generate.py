"""Generate the invented Carrow uplands bell-moss survey and its truth file.

Everything here is invented for demonstrations and tests: the Carrow uplands,
their districts and the Carrow bell-moss do not exist. The survey is built so
that the questions pathfinder answers have known answers:

* sites are clustered around survey centres, and each centre belongs to one
  district, so grouped and spatial-block cross-validation have something to do;
* the environmental covariates come from a few smooth hidden fields (height,
  farming intensity, bedrock, wetness, woodland, distance from the coast), so
  many of them move together, as field covariates do;
* three responses (found / not found, clumps counted in a timed search, growth
  of a transplanted turf) each follow a stated model on seven of the columns,
  with a squared term, an interaction and one bedrock class, plus a smooth
  spatial residual that no covariate explains;
* the soil loggers failed at a few sites, leaving gaps in two columns.

The generator uses numpy and pandas only and a numpy ``Generator`` built from
an explicit seed. Covariates are rounded to the decimals shipped in the CSV
*before* the responses are drawn, so the truth file describes the shipped
table exactly and refitting the true model to the CSV recovers its
coefficients up to sampling error.

Run ``python generate.py`` to rewrite the CSV and truth JSON beside this file;
import it and call :func:`make_survey` for the same table without any file
being written.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

DEFAULT_SEED = 4127
DEMO_CSV = "carrow_bellmoss.csv"
TRUTH_JSON = "carrow_bellmoss_truth.json"

REGION_KM = (200.0, 150.0)  # west-east, south-north extent
N_CENTRES = 26
SITE_SPREAD_KM = 4.5  # standard deviation of a site around its survey centre

DISTRICTS = ("Wrenfold", "Ashmere", "Tollbeck", "Corvel", "Stannick", "Merrin")
BEDROCK_CLASSES = ("granite", "sandstone", "shale", "limestone", "glacial clay")

# The model behind all three responses. Squared and interaction terms are
# built from centred columns so that the linear coefficients stay readable:
# july_temp_c enters as (july_temp_c - 14.5) and (july_temp_c - 14.5)^2, and the
# interaction is (soil_moisture_pct - 40) * (grazing_livestock_per_ha - 0.8).
TEMP_CENTRE = 14.5
MOISTURE_CENTRE = 40.0
GRAZING_CENTRE = 0.8

TERMS = (
    "july_temp_c - 14.5",
    "(july_temp_c - 14.5)^2",
    "soil_ph",
    "soil_phosphate_mg_l",
    "soil_moisture_pct",
    "grazing_livestock_per_ha",
    "(soil_moisture_pct - 40) * (grazing_livestock_per_ha - 0.8)",
    "distance_to_stream_m",
    "bedrock == limestone",
)
TRUE_PREDICTORS = (
    "july_temp_c",
    "soil_ph",
    "soil_phosphate_mg_l",
    "soil_moisture_pct",
    "grazing_livestock_per_ha",
    "distance_to_stream_m",
    "bedrock",
)

# Coefficients, chosen by hand (one per term, in the order of TERMS).
COEFFICIENTS = {
    "bellmoss_found": {
        "intercept": -5.9,
        "july_temp_c - 14.5": 0.4,
        "(july_temp_c - 14.5)^2": -0.6,
        "soil_ph": 1.2,
        "soil_phosphate_mg_l": -0.06,
        "soil_moisture_pct": 0.07,
        "grazing_livestock_per_ha": -1.4,
        "(soil_moisture_pct - 40) * (grazing_livestock_per_ha - 0.8)": -0.08,
        "distance_to_stream_m": -0.002,
        "bedrock == limestone": 1.3,
    },
    "bellmoss_clumps": {
        "intercept": -4.8,
        "july_temp_c - 14.5": 0.2,
        "(july_temp_c - 14.5)^2": -0.35,
        "soil_ph": 0.5,
        "soil_phosphate_mg_l": -0.03,
        "soil_moisture_pct": 0.03,
        "grazing_livestock_per_ha": -0.6,
        "(soil_moisture_pct - 40) * (grazing_livestock_per_ha - 0.8)": -0.03,
        "distance_to_stream_m": -0.001,
        "bedrock == limestone": 0.6,
    },
    "turf_growth_mm": {
        "intercept": 14.0,
        "july_temp_c - 14.5": 1.2,
        "(july_temp_c - 14.5)^2": -0.9,
        "soil_ph": 2.0,
        "soil_phosphate_mg_l": -0.08,
        "soil_moisture_pct": 0.15,
        "grazing_livestock_per_ha": -3.0,
        "(soil_moisture_pct - 40) * (grazing_livestock_per_ha - 0.8)": -0.1,
        "distance_to_stream_m": -0.004,
        "bedrock == limestone": 3.0,
    },
}
# How strongly the hidden spatial residual (standard deviation 1 over the
# region) enters each response, on the scale of the linear predictor.
RESIDUAL_FIELD_SCALE = {"bellmoss_found": 0.8, "bellmoss_clumps": 0.6, "turf_growth_mm": 3.0}
GROWTH_NOISE_SD = 3.0
RESIDUAL_FIELD_BUMPS = 40
RESIDUAL_FIELD_LENGTH_KM = 20.0
N_LOGGER_FAILURES = 4


# --------------------------------------------------------------------------
# Smooth fields over the region
# --------------------------------------------------------------------------

def _grid(step_km: float = 5.0) -> tuple[np.ndarray, np.ndarray]:
    """A regular grid over the region, used to standardise fields."""
    gx, gy = np.meshgrid(
        np.arange(0.0, REGION_KM[0] + step_km, step_km),
        np.arange(0.0, REGION_KM[1] + step_km, step_km),
    )
    return gx.ravel(), gy.ravel()


def bump_field(centres: np.ndarray, weights: np.ndarray, length_km: float,
               x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Sum of Gaussian bumps: sum_k w_k exp(-d_k^2 / (2 length^2)) at (x, y).

    ``centres`` is (K, 2) in km, ``weights`` (K,). Public so that a test can
    rebuild the spatial residual from the truth file and the site coordinates.
    """
    x = np.asarray(x, dtype=float)[:, None]
    y = np.asarray(y, dtype=float)[:, None]
    d2 = (x - centres[None, :, 0]) ** 2 + (y - centres[None, :, 1]) ** 2
    return np.exp(-d2 / (2.0 * length_km**2)) @ weights


def residual_field(spec: dict, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """The hidden spatial residual at (x, y) from its stored description.

    ``spec`` holds ``centres_km`` (K, 2), ``weights`` (K,), ``length_km`` and
    ``shift``, as in the truth file under ``residual_field``.
    """
    centres = np.asarray(spec["centres_km"], dtype=float)
    weights = np.asarray(spec["weights"], dtype=float)
    return bump_field(centres, weights, float(spec["length_km"]), x, y) - float(spec["shift"])


def _random_field(rng: np.random.Generator, n_bumps: int, length_km: float,
                  x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """A smooth random field at the sites, scaled to mean 0, SD 1 over the region."""
    pad = length_km
    centres = np.column_stack([
        rng.uniform(-pad, REGION_KM[0] + pad, n_bumps),
        rng.uniform(-pad, REGION_KM[1] + pad, n_bumps),
    ])
    weights = rng.normal(0.0, 1.0, n_bumps)
    gx, gy = _grid()
    on_grid = bump_field(centres, weights, length_km, gx, gy)
    return (bump_field(centres, weights, length_km, x, y) - on_grid.mean()) / on_grid.std()


def _residual_field_spec(rng: np.random.Generator) -> dict:
    """The hidden spatial residual: bump centres and weights, rounded as stored.

    Weights are scaled so the field has SD about 1 over the region and a
    shift is subtracted so its mean there is about 0; both are rounded and the
    rounded numbers are the ones used, so the truth file rebuilds the field
    exactly (see :func:`residual_field`).
    """
    length = RESIDUAL_FIELD_LENGTH_KM
    centres = np.round(np.column_stack([
        rng.uniform(-length, REGION_KM[0] + length, RESIDUAL_FIELD_BUMPS),
        rng.uniform(-length, REGION_KM[1] + length, RESIDUAL_FIELD_BUMPS),
    ]), 1)
    weights = rng.normal(0.0, 1.0, RESIDUAL_FIELD_BUMPS)
    gx, gy = _grid()
    on_grid = bump_field(centres, weights, length, gx, gy)
    weights = np.round(weights / on_grid.std(), 4)
    shift = round(float(on_grid.mean() / on_grid.std()), 4)
    return {"centres_km": centres, "weights": weights, "length_km": length, "shift": shift}


# --------------------------------------------------------------------------
# Sites
# --------------------------------------------------------------------------

def _survey_centres(rng: np.random.Generator) -> np.ndarray:
    """Survey centres spread over the region, at least 18 km apart."""
    centres: list[tuple[float, float]] = []
    while len(centres) < N_CENTRES:
        c = (rng.uniform(12.0, REGION_KM[0] - 12.0), rng.uniform(12.0, REGION_KM[1] - 12.0))
        if all((c[0] - a) ** 2 + (c[1] - b) ** 2 >= 18.0**2 for a, b in centres):
            centres.append(c)
    return np.array(centres)


def _district_of(cx: np.ndarray, cy: np.ndarray) -> np.ndarray:
    """District of a survey centre: a 3 x 2 split of the region."""
    col = np.digitize(cx, [70.0, 135.0])
    row = np.digitize(cy, [75.0])
    return np.array(DISTRICTS)[row * 3 + col]


def _sites(rng: np.random.Generator) -> pd.DataFrame:
    """Site labels, district, coordinates and search time, clustered by survey centre."""
    centres = _survey_centres(rng)
    per_centre = 12 + rng.poisson(13.0, N_CENTRES)
    centre_index = np.repeat(np.arange(N_CENTRES), per_centre)
    n = centre_index.size
    x = centres[centre_index, 0] + rng.normal(0.0, SITE_SPREAD_KM, n)
    y = centres[centre_index, 1] + rng.normal(0.0, SITE_SPREAD_KM, n)
    x = np.round(np.clip(x, 0.0, REGION_KM[0]), 3)
    y = np.round(np.clip(y, 0.0, REGION_KM[1]), 3)
    district = _district_of(centres[centre_index, 0], centres[centre_index, 1])
    # Search time: teams differ, and times are written to the nearest 5 minutes.
    team_pace = rng.normal(0.0, 0.25, N_CENTRES)[centre_index]
    minutes = np.exp(np.log(28.0) + team_pace + rng.normal(0.0, 0.3, n))
    minutes = np.clip(5 * np.round(minutes / 5), 10, 60).astype(int)
    return pd.DataFrame({
        "site": [f"C{i + 1:03d}" for i in range(n)],
        "district": district,
        "survey_centre": [f"centre {c + 1:02d}" for c in centre_index],
        "x_km": x,
        "y_km": y,
        "minutes_searched": minutes,
    })


# --------------------------------------------------------------------------
# Covariates
# --------------------------------------------------------------------------

def _sigmoid(z: np.ndarray) -> np.ndarray:
    return 1.0 / (1.0 + np.exp(-z))


def _covariates(rng: np.random.Generator, x: np.ndarray, y: np.ndarray) -> pd.DataFrame:
    """36 numeric covariates and one bedrock class from six hidden fields."""
    n = x.size

    def noise(sd: float) -> np.ndarray:
        return rng.normal(0.0, sd, n)

    # Hidden fields, each a mix of smooth random fields (mean 0, SD 1 over the region).
    uplift = 1.2 * (0.6 * (1 - x / REGION_KM[0]) + 0.4 * (y / REGION_KM[1]) - 0.5)
    height = uplift + _random_field(rng, 60, 30.0, x, y) + 0.4 * _random_field(rng, 150, 10.0, x, y)
    farming = -0.5 * height + _random_field(rng, 60, 30.0, x, y)
    geology = _random_field(rng, 50, 28.0, x, y)
    wetness = _random_field(rng, 80, 18.0, x, y)
    woods = _random_field(rng, 80, 15.0, x, y)
    coast = 1.5 * (x / REGION_KM[0] - 0.5) + 0.5 * _random_field(rng, 30, 40.0, x, y)  # east is milder

    # Terrain and climate track height.
    elevation = np.clip(360 + 200 * height, 15, 1050)
    slope = np.clip(np.abs(noise(1.0)) * (2.5 + 0.012 * elevation) + 0.5, 0, 45)
    northness = np.cos(rng.uniform(0, 2 * np.pi, n))
    wetness_index = np.clip(9.5 - 0.18 * slope + 1.2 * wetness + noise(1.2), 2, 19)
    july = 17.4 - 0.0062 * elevation + 0.35 * coast + noise(0.3)
    january = 4.2 - 0.0052 * elevation + 0.7 * coast + noise(0.4)
    frost = np.clip(32 + 0.085 * elevation - 6 * coast + noise(5), 2, None)
    season = 280 - 0.16 * elevation + 6 * coast + noise(8)
    rain = 820 + 1.25 * elevation - 160 * coast + 60 * wetness + noise(70)
    snow = np.clip(-6 + 0.045 * elevation + noise(4), 0, None)
    wind = 4.1 + 0.0045 * elevation - 0.3 * woods + noise(0.8)
    soil_temp = july - 3.4 - 0.04 * slope * northness + noise(0.5)

    # Bedrock: limestone where the geology field is high; granite on high ground.
    score = np.column_stack([
        0.004 * (elevation - 360) - 0.8 * geology,      # granite
        0.3 + noise(0.8),                                # sandstone
        -0.2 - 0.3 * geology + noise(0.6),               # shale
        -0.2 + 1.6 * geology,                            # limestone
        -0.006 * (elevation - 150) + noise(0.5),         # glacial clay
    ]) + rng.gumbel(0.0, 0.6, (n, 5))
    bedrock_index = score.argmax(axis=1)
    bedrock = np.array(BEDROCK_CLASSES)[bedrock_index]
    limestone = (bedrock == "limestone").astype(float)
    clay_rock = (bedrock == "glacial clay").astype(float)

    # Farming and nutrients.
    farm_z = 1.7 * farming + noise(0.45)
    farmland = 100 * _sigmoid(farm_z - 0.3)
    improved = np.clip(0.6 * farmland + noise(9), 0, None)
    improved = np.minimum(improved, farmland)
    phosphate = np.clip(np.exp(2.7 + 0.3 * farm_z + noise(0.2)), 2, 150)
    grazing = np.clip(0.85 + 0.3 * farming + noise(0.35), 0.0, 2.6)
    n_deposition = 13 + 0.006 * rain + 2.5 * farming + noise(1.5)

    # Soils.
    ph = np.clip(4.9 + 0.45 * geology + 1.1 * limestone - 0.0011 * (elevation - 360)
                 + 0.25 * farming + noise(0.3), 3.6, 8.2)
    calcium = np.exp(6.4 + 0.95 * (ph - 5.5) + noise(0.28))
    moisture = np.clip(33 + 8 * wetness + 0.012 * (rain - 1270) - 0.25 * slope + noise(4), 8, 78)
    water_table = np.clip(150 - 2.1 * moisture + noise(10), 2, 200)
    organic = np.clip(np.exp(2.4 + 0.35 * wetness + 0.0018 * (elevation - 360)
                             - 0.12 * farming + noise(0.3)), 2, 95)
    clay = np.clip(16 + 4 * geology + 14 * clay_rock + noise(5), 2, 60)
    nitrogen = 1.6 + 0.045 * organic + 0.5 * farming + noise(0.4)
    depth = np.clip(75 - 0.05 * elevation - 1.3 * slope + 10 * clay_rock + noise(12), 5, 160)

    # Vegetation.
    woodland = 100 * _sigmoid(1.6 * woods - 1.6 - 0.4 * farming)
    canopy = np.clip(0.8 * woodland + noise(8), 0, 100)
    shrub = np.clip(8 + 0.15 * woodland - 4 * farming + noise(6), 0, 100)
    heather = np.clip(15 + 12 * height - 6 * farming - 8 * (ph - 5) + noise(10), 0, 100)
    sward = np.clip(np.exp(3.0 - 0.45 * grazing + 0.15 * farming + noise(0.3)), 2, None)
    bare = np.clip(3 + 4 * grazing + 0.25 * slope + noise(2.5), 0, 100)
    ndvi = np.clip(0.58 + 0.035 * farming - 0.03 * height + 0.001 * woodland + noise(0.05), 0.1, 0.95)

    # Distances.
    stream = np.clip(rng.exponential(220, n) * np.exp(-0.12 * (wetness_index - 9.5)) + 10, 10, 2500)
    road = np.clip(rng.exponential(700, n) * np.exp(-0.6 * farming) + 20, 20, 8000)
    settlement = np.clip(np.exp(1.3 - 0.5 * farming + 0.2 * height + noise(0.35)), 0.2, None)
    wood_edge = np.clip(rng.exponential(300, n) * np.exp(-0.9 * woods) * (woodland < 60) + 5, 5, 6000)

    table = {
        "elevation_m": (elevation, 0),
        "slope_deg": (slope, 1),
        "northness": (northness, 2),
        "wetness_index": (wetness_index, 1),
        "july_temp_c": (july, 1),
        "january_temp_c": (january, 1),
        "frost_days": (frost, 0),
        "growing_season_days": (season, 0),
        "annual_rain_mm": (rain, 0),
        "snow_days": (snow, 0),
        "wind_speed_m_s": (wind, 1),
        "soil_temperature_c": (soil_temp, 1),
        "farmland_pct": (farmland, 1),
        "improved_grassland_pct": (improved, 1),
        "soil_phosphate_mg_l": (phosphate, 1),
        "grazing_livestock_per_ha": (grazing, 2),
        "nitrogen_deposition_kg_ha": (n_deposition, 1),
        "soil_ph": (ph, 2),
        "soil_calcium_mg_kg": (calcium, 0),
        "soil_moisture_pct": (moisture, 1),
        "water_table_depth_cm": (water_table, 0),
        "soil_organic_matter_pct": (organic, 1),
        "soil_clay_pct": (clay, 1),
        "soil_nitrogen_g_kg": (nitrogen, 2),
        "soil_depth_cm": (depth, 0),
        "woodland_pct": (woodland, 1),
        "canopy_cover_pct": (canopy, 1),
        "shrub_cover_pct": (shrub, 1),
        "heather_cover_pct": (heather, 1),
        "sward_height_cm": (sward, 1),
        "bare_ground_pct": (bare, 1),
        "greenness_ndvi": (ndvi, 3),
        "distance_to_stream_m": (stream, 0),
        "distance_to_road_m": (road, 0),
        "distance_to_village_km": (settlement, 2),
        "distance_to_woodland_m": (wood_edge, 0),
    }
    frame = pd.DataFrame({name: np.round(values, digits) for name, (values, digits) in table.items()})
    for name, (_, digits) in table.items():
        if digits == 0:
            frame[name] = frame[name].astype(int)
    frame["bedrock"] = bedrock
    return frame


# --------------------------------------------------------------------------
# Responses
# --------------------------------------------------------------------------

def term_columns(frame: pd.DataFrame) -> pd.DataFrame:
    """The columns of the true model, in the order of TERMS, from a survey table.

    Public so that the tests build the true design from the shipped CSV in
    exactly the way the generator does.
    """
    temp = frame["july_temp_c"].to_numpy(float) - TEMP_CENTRE
    moisture = frame["soil_moisture_pct"].to_numpy(float)
    grazing = frame["grazing_livestock_per_ha"].to_numpy(float)
    return pd.DataFrame({
        TERMS[0]: temp,
        TERMS[1]: temp**2,
        TERMS[2]: frame["soil_ph"].to_numpy(float),
        TERMS[3]: frame["soil_phosphate_mg_l"].to_numpy(float),
        TERMS[4]: moisture,
        TERMS[5]: grazing,
        TERMS[6]: (moisture - MOISTURE_CENTRE) * (grazing - GRAZING_CENTRE),
        TERMS[7]: frame["distance_to_stream_m"].to_numpy(float),
        TERMS[8]: (frame["bedrock"] == "limestone").to_numpy(float),
    }, index=frame.index)


def linear_predictor(frame: pd.DataFrame, response: str) -> np.ndarray:
    """Intercept plus the true terms for one response (no residual field, no offset)."""
    coef = COEFFICIENTS[response]
    terms = term_columns(frame)
    return coef["intercept"] + terms.to_numpy() @ np.array([coef[t] for t in TERMS])


def _responses(rng: np.random.Generator, frame: pd.DataFrame, residual: np.ndarray) -> pd.DataFrame:
    eta_found = linear_predictor(frame, "bellmoss_found") + RESIDUAL_FIELD_SCALE["bellmoss_found"] * residual
    found = rng.binomial(1, _sigmoid(eta_found))
    eta_clumps = (linear_predictor(frame, "bellmoss_clumps")
                  + RESIDUAL_FIELD_SCALE["bellmoss_clumps"] * residual
                  + np.log(frame["minutes_searched"].to_numpy(float)))
    clumps = rng.poisson(np.exp(eta_clumps))
    growth = (linear_predictor(frame, "turf_growth_mm")
              + RESIDUAL_FIELD_SCALE["turf_growth_mm"] * residual
              + rng.normal(0.0, GROWTH_NOISE_SD, len(frame)))
    return pd.DataFrame({
        "bellmoss_found": found.astype(int),
        "bellmoss_clumps": clumps.astype(int),
        "turf_growth_mm": np.round(growth, 2),
    }, index=frame.index)


# --------------------------------------------------------------------------
# The survey and its truth
# --------------------------------------------------------------------------

def make_survey(seed: int = DEFAULT_SEED) -> tuple[pd.DataFrame, dict]:
    """Build the invented survey table and its truth record. Writes nothing.

    The turf growth is kept to 2 decimals after it is drawn; this rounding
    (at most 0.005 mm) is the only difference between the stated model and
    the shipped numbers.
    """
    rng = np.random.default_rng(seed)
    sites = _sites(rng)
    x = sites["x_km"].to_numpy()
    y = sites["y_km"].to_numpy()
    covariates = _covariates(rng, x, y)
    field = _residual_field_spec(rng)
    residual = residual_field(field, x, y)
    frame = pd.concat([sites, covariates], axis=1)
    responses = _responses(rng, frame, residual)

    # The soil loggers failed at a few sites: their readings were never taken.
    # The responses above used the true soil state, as nature did.
    failed = np.sort(rng.choice(len(frame), N_LOGGER_FAILURES, replace=False))
    frame.loc[failed, ["soil_moisture_pct", "soil_temperature_c"]] = np.nan

    survey = pd.concat([frame[list(sites.columns)], responses, frame[list(covariates.columns)]], axis=1)
    truth = _truth(seed, field, survey.loc[failed, "site"].tolist())
    return survey, truth


def _truth(seed: int, field: dict, failed_sites: list[str]) -> dict:
    families = {
        "bellmoss_found": ("binomial", "logit", "none"),
        "bellmoss_clumps": ("poisson", "log",
                            "log(minutes_searched): the expected count is proportional to search time"),
        "turf_growth_mm": ("gaussian", "identity", "none"),
    }
    meaning = {
        "bellmoss_found": "1 if Carrow bell-moss was found in the 20 x 20 m plot at the site, else 0",
        "bellmoss_clumps": "clumps of Carrow bell-moss counted in a timed search around the site",
        "turf_growth_mm": "change in length over one season of a standard bell-moss turf transplanted to "
                          "every site, mm (negative where the turf died back)",
    }
    responses = {}
    for name, (family, link, offset) in families.items():
        entry = {
            "meaning": meaning[name],
            "family": family,
            "link": link,
            "offset": offset,
            "coefficients": dict(COEFFICIENTS[name]),
            "residual_field_scale": RESIDUAL_FIELD_SCALE[name],
            "best_july_temp_c": round(TEMP_CENTRE - COEFFICIENTS[name][TERMS[0]]
                                      / (2 * COEFFICIENTS[name][TERMS[1]]), 2),
        }
        if family == "gaussian":
            entry["noise_sd"] = GROWTH_NOISE_SD
            entry["rounding"] = "values rounded to 2 decimals after drawing"
        responses[name] = entry
    return {
        "scenario": "Invented survey of the invented Carrow bell-moss in the invented Carrow uplands "
                    "(200 x 150 km). For demonstrations and tests only.",
        "seed": seed,
        "true_predictors": list(TRUE_PREDICTORS),
        "terms": list(TERMS),
        "centring": {
            "squared_term": f"july_temp_c is centred at {TEMP_CENTRE}: the model uses "
                            f"(july_temp_c - {TEMP_CENTRE}) and (july_temp_c - {TEMP_CENTRE})^2",
            "interaction": f"(soil_moisture_pct - {MOISTURE_CENTRE}) * "
                           f"(grazing_livestock_per_ha - {GRAZING_CENTRE}); the main effects are uncentred",
            "other_terms": "used as recorded, in their own units",
        },
        "linear_predictor": "intercept + sum(coefficient * term) + residual_field_scale * "
                            "residual_field(x_km, y_km) + offset",
        "responses": responses,
        "independence": "the three responses are drawn independently, each from its own model; "
                        "they share covariates and the residual field but need not agree site by site",
        "residual_field": {
            "formula": "sum_k weight_k * exp(-((x_km - cx_k)^2 + (y_km - cy_k)^2) / (2 * length_km^2)) - shift",
            "about": "a smooth spatial residual no covariate explains, SD about 1 over the region, "
                     "so nearby sites share unexplained ups and downs and spatial-block "
                     "cross-validation matters",
            "length_km": field["length_km"],
            "centres_km": field["centres_km"].tolist(),
            "weights": field["weights"].tolist(),
            "shift": field["shift"],
        },
        "latent_structure": {
            "height": "regional uplift (high in the north-west) plus smooth fields at 30 km and 10 km; "
                      "drives elevation, temperatures, frost, growing season, snow, wind, rain, slope",
            "coast": "east-west gradient plus a 40 km field; milder winters and fewer frost days in the east",
            "farming": "-0.5 * height plus a 30 km field; drives farmland, improved grassland, "
                       "phosphate, grazing, nitrogen, distances to roads and villages",
            "geology": "28 km field; drives bedrock class (limestone where high), soil pH, calcium, clay",
            "wetness": "18 km field; drives soil moisture, water table, organic matter, wetness index",
            "woods": "15 km field; drives woodland, canopy, shrub cover, distance to woodland",
            "noise": "each covariate adds its own independent noise",
        },
        "sites": {
            "layout": f"{N_CENTRES} survey centres at least 18 km apart; sites scattered around each "
                      f"centre with SD {SITE_SPREAD_KM} km",
            "groups": "district: each survey centre lies wholly in one of six districts (3 x 2 split "
                      "of the region)",
            "effort": "minutes_searched, 10 to 60, to the nearest 5 minutes; varies between teams and sites",
        },
        "missing_values": {
            "columns": ["soil_moisture_pct", "soil_temperature_c"],
            "sites": failed_sites,
            "why": "the soil loggers failed at these sites; the responses used the true, unrecorded values",
        },
    }


def write_files(folder: Path, seed: int = DEFAULT_SEED) -> tuple[Path, Path]:
    """Write the survey CSV and the truth JSON into ``folder``."""
    survey, truth = make_survey(seed)
    folder = Path(folder)
    csv_path = folder / DEMO_CSV
    json_path = folder / TRUTH_JSON
    survey.to_csv(csv_path, index=False, lineterminator="\n")
    json_path.write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    return csv_path, json_path


if __name__ == "__main__":
    for written in write_files(Path(__file__).resolve().parent):
        print(f"wrote {written.name}")
