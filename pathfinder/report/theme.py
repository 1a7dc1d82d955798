"""The look of pathfinder's charts and report: our palette, our type, one Altair theme.

Palette
-------
Seven data colours named after upland things, one neutral for "everything
else", and page tones for text, background and grid. They were chosen so that any two data colours
(and the neutral) stay far apart for viewers with the common colour-vision
deficiencies, not only for typical vision:

* every colour is simulated as seen with full deuteranopia, protanopia and
  tritanopia, using the severity-1.0 matrices of Machado, Oliveira & Fernandes
  (2009, IEEE TVCG 15:1291-1298) applied to linear RGB;
* the simulated colours are compared in CIELAB (D65), CIE76 distance;
* the smallest distance between any two of the eight (seven data colours
  plus the neutral) is 24 with deuteranopia, 25 with protanopia or
  tritanopia and 33 with typical vision.
  :func:`smallest_distance` computes it; the tests require at least
  :data:`MIN_DISTANCE` for each kind of vision.

Pairs that carry meaning (more against less, negative against positive)
always run along the blue-to-ochre axis, which all three dichromacies keep,
never red against green.

Type
----
No web fonts: the report must open offline, so text uses a humanist sans
stack that ends in faces every desktop has. Numbers in tables use tabular
figures so columns line up.
"""

from __future__ import annotations

import itertools

import altair as alt
import numpy as np

# ---- colours -------------------------------------------------------------------

LOCH = "#235668"       # deep blue-teal: the main data colour
OCHRE = "#D9892B"      # warm counterpart of loch
HEATHER = "#6A43A5"    # violet
HAREBELL = "#88A5E5"   # light blue
PEAT = "#653627"       # dark brown
LICHEN = "#928651"     # olive
RUST = "#9A3A06"       # deep orange-brown
STONE = "#C4C2BA"      # neutral: other, inactive, not selected

INK = "#24272A"        # text and axis lines
MUTED = "#5E615F"      # secondary text
PAPER = "#FBFAF6"      # background
GRID = "#E6E2D8"       # grid lines and rules between table rows

#: Categorical colours in the order they are handed out.
CATEGORICAL = (LOCH, OCHRE, HEATHER, HAREBELL, PEAT, LICHEN, RUST)

#: Diverging ramp for signed quantities (correlations, residuals): blue for
#: negative, ochre-brown for positive, a pale paper tone at zero.
DIVERGING = ("#1B4756", "#88A5E5", "#F3F0E8", "#E0A55C", "#8A4A16")

#: Sequential ramp for 0..1 quantities (frequencies, weights).
SEQUENTIAL = ("#F3F0E8", "#B9C9EA", "#6D8FCB", "#235668", "#14303B")

# ---- type ----------------------------------------------------------------------

FONT = ('"Source Sans 3", "Segoe UI", "Noto Sans", "Helvetica Neue", '
        '"Liberation Sans", "DejaVu Sans", Arial, sans-serif')
MONO = '"DejaVu Sans Mono", "Liberation Mono", Consolas, monospace'

THEME_NAME = "pathfinder"

# ---- the colour-vision check ----------------------------------------------------

#: Machado, Oliveira & Fernandes (2009), severity 1.0 (their Table 1 /
#: supplementary matrices); applied to linear RGB.
DICHROMACY = {
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}

#: The smallest CIE76 distance we accept between two categorical colours, for
#: typical vision and for each simulated dichromacy (our own bar: colours this
#: far apart are told apart at a glance in small marks).
MIN_DISTANCE = 20.0


def hex_to_rgb(colour: str) -> np.ndarray:
    """'#RRGGBB' -> sRGB in [0, 1]."""
    colour = colour.lstrip("#")
    return np.array([int(colour[i:i + 2], 16) / 255.0 for i in (0, 2, 4)])


def _to_linear(rgb):
    rgb = np.asarray(rgb, dtype=float)
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def _linear_to_lab(linear):
    """Linear sRGB -> CIELAB under D65 (the sRGB white)."""
    to_xyz = np.array([[0.4124564, 0.3575761, 0.1804375],
                       [0.2126729, 0.7151522, 0.0721750],
                       [0.0193339, 0.1191920, 0.9503041]])
    xyz = to_xyz @ linear / np.array([0.95047, 1.0, 1.08883])
    f = np.where(xyz > 216 / 24389, np.cbrt(xyz), (24389 / 27 * xyz + 16) / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def as_seen(colour: str, vision: str = "typical") -> np.ndarray:
    """CIELAB coordinates of ``colour`` as seen with ``vision`` ("typical" or a dichromacy)."""
    linear = _to_linear(hex_to_rgb(colour))
    if vision != "typical":
        linear = np.clip(DICHROMACY[vision] @ linear, 0.0, 1.0)
    return _linear_to_lab(linear)


def smallest_distance(colours, vision: str = "typical") -> float:
    """Smallest CIE76 distance between any two of ``colours`` as seen with ``vision``."""
    seen = [as_seen(c, vision) for c in colours]
    return min(float(np.linalg.norm(a - b)) for a, b in itertools.combinations(seen, 2))


# ---- for the charts ---------------------------------------------------------------

def cycle(n: int) -> list:
    """``n`` categorical colours, repeating the seven when more are needed."""
    return [CATEGORICAL[i % len(CATEGORICAL)] for i in range(n)]


# ---- the Altair theme -----------------------------------------------------------

def config() -> dict:
    """The Vega-Lite ``config`` block of our look (also used for static figures)."""
    axis = {
        "labelFont": FONT, "titleFont": FONT, "labelFontSize": 11, "titleFontSize": 12,
        "titleFontWeight": 600, "labelColor": INK, "titleColor": INK,
        "domainColor": MUTED, "tickColor": MUTED, "gridColor": GRID, "gridWidth": 0.8,
        "titlePadding": 8, "labelLimit": 260,
    }
    return {
        "background": PAPER,
        "font": FONT,
        "padding": 8,
        "view": {"stroke": None, "continuousWidth": 420, "continuousHeight": 260},
        "title": {"font": FONT, "fontSize": 14, "fontWeight": 700, "color": INK, "anchor": "start",
                  "subtitleFont": FONT, "subtitleFontSize": 11.5, "subtitleColor": MUTED,
                  "offset": 10},
        "axis": axis,
        "axisBand": {"grid": False},
        "header": {"labelFont": FONT, "titleFont": FONT, "labelFontSize": 12, "titleFontSize": 12,
                   "labelColor": INK, "titleColor": INK},
        "legend": {"labelFont": FONT, "titleFont": FONT, "labelFontSize": 11, "titleFontSize": 11.5,
                   "titleFontWeight": 600, "labelColor": INK, "titleColor": INK, "orient": "right",
                   "symbolStrokeWidth": 2, "labelLimit": 240},
        "range": {"category": list(CATEGORICAL), "diverging": list(DIVERGING),
                  "heatmap": list(SEQUENTIAL), "ramp": list(SEQUENTIAL), "ordinal": list(SEQUENTIAL[1:])},
        "mark": {"color": LOCH},
        "line": {"strokeWidth": 1.8},
        "point": {"filled": True, "size": 40},
        "bar": {"color": LOCH},
        "rule": {"color": INK},
        "text": {"font": FONT, "fontSize": 11, "color": INK},
        "tick": {"color": INK},
        "concat": {"spacing": 28},
    }


def theme() -> alt.theme.ThemeConfig:
    """Our look as an Altair theme (registered as ``"pathfinder"``; enable it with
    ``altair.theme.enable("pathfinder")`` to use it for your own charts)."""
    return alt.theme.ThemeConfig(config=config())


if THEME_NAME not in alt.theme.names():
    alt.theme.register(THEME_NAME, enable=False)(theme)


def with_look(spec: dict) -> dict:
    """A Vega-Lite spec dictionary with our config underneath any config it carries."""
    merged = dict(spec)
    own = spec.get("config", {})
    base = config()
    for key, value in own.items():
        if isinstance(value, dict) and isinstance(base.get(key), dict):
            base[key] = {**base[key], **value}
        else:
            base[key] = value
    merged["config"] = base
    return merged
