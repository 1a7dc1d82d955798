"""pathfinder: choose predictors for habitat models that you can defend.

The public API re-exports names only; each lives in its own module.
"""

from .core import PathResult, fit_path
from .errors import FitWarning, InputError, PathfinderError
from .predict import load_model, predict_table

__version__ = "0.1.0"

__all__ = ["FitWarning", "InputError", "PathResult", "PathfinderError", "__version__", "fit_path",
           "load_model", "predict_table"]
