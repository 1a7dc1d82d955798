"""pathfinder: choose predictors for habitat models that you can defend.

The public API re-exports names only; each lives in its own module.
"""

from .core import PathResult, fit_path
from .errors import FitWarning, InputError, PathfinderError
from .predict import load_model, predict_table
from .study import StudyOptions, explore

__version__ = "0.1.0"

__all__ = ["FitWarning", "InputError", "PathResult", "PathfinderError", "StudyOptions", "__version__",
           "explore", "fit_path", "load_model", "predict_table"]
