"""The fitting core: penalised GLM paths (imports nothing from the stages above it)."""

from .families import FAMILIES, get_family
from .path import PathResult, fit_path

__all__ = ["FAMILIES", "PathResult", "fit_path", "get_family"]
