"""The invented Carrow bell-moss survey: a demo table with a known answer.

Everything here is invented. The Carrow uplands (a region of 200 x 150 km)
and the Carrow bell-moss do not exist; the table was drawn by ``generate.py``
from a stated model so that demonstrations and tests can check what
pathfinder finds against the truth.

The survey: 661 sites clustered around 26 survey centres, each centre in one
of six districts. At every site there are 36 numeric environmental covariates
made from a few smooth hidden fields (height drives elevation and climate,
farming drives farmland, phosphate and grazing, and so on), so many of them
are strongly correlated, and one bedrock class with five levels. Soil loggers
failed at four sites, leaving gaps in soil moisture and soil temperature.

Three responses, each drawn from its own model on the same seven columns
(July temperature as a hump, soil pH, phosphate, soil moisture, grazing and
their interaction, distance to a stream, limestone bedrock) plus a smooth
spatial residual that no covariate explains:

* ``bellmoss_found``: 1 if the moss was found in the site's plot (binomial);
* ``bellmoss_clumps``: clumps counted in a timed search (Poisson, the expected
  count proportional to ``minutes_searched``);
* ``turf_growth_mm``: season's change in length of a transplanted turf
  (Gaussian).

:func:`load_truth` returns the full record: families, links, terms and their
centring, coefficients, the offset rule, the residual field and the seed.
"""

from __future__ import annotations

import json
from importlib.resources import files

import pandas as pd

DEMO_CSV = "carrow_bellmoss.csv"
TRUTH_JSON = "carrow_bellmoss_truth.json"

DEMO_RESPONSES = {
    "binomial": "bellmoss_found",
    "poisson": "bellmoss_clumps",
    "gaussian": "turf_growth_mm",
}
EFFORT = "minutes_searched"
COORDS = ("x_km", "y_km")
GROUPS = "district"
SITE_LABELS = ("site", "survey_centre")  # identifiers, not predictors
CATEGORICAL = "bedrock"


def load_demo() -> pd.DataFrame:
    """The survey table, one row per site, as shipped with pathfinder."""
    with files(__name__).joinpath(DEMO_CSV).open("r", encoding="utf-8") as handle:
        return pd.read_csv(handle)


def load_truth() -> dict:
    """The model that generated the survey, as a plain dictionary."""
    return json.loads(files(__name__).joinpath(TRUTH_JSON).read_text(encoding="utf-8"))
