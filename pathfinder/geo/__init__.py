"""Raster layers in, presence-only records as a point process, maps out.

``layers``      GeoTIFF layers on one grid; values at points.
``points``      records or sites from a table or a file of points, in the layers' CRS.
``quadrature``  quadrature points and Berman-Turner weights for presence-only records.
``maps``        a model mapped over the layers in windows, with MESS and novelty maps.
"""

from .layers import Grid, Layer, Layers, PointValues, open_layers, values_at_points
from .maps import Combinations, MapModel, combination_summary
from .points import Points, read_points
from .quadrature import AREA, DENSITY, RECORD, PresenceOnly, presence_only_table

__all__ = ["AREA", "Combinations", "DENSITY", "Grid", "Layer", "Layers", "MapModel",
           "PointValues", "Points", "PresenceOnly", "RECORD", "combination_summary", "open_layers",
           "presence_only_table", "read_points", "values_at_points"]
