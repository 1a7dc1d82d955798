"""pathfinder: choose predictors for habitat models that you can defend.

The public API re-exports names only; each lives in its own module.
"""


def _compile_cache_or_none() -> None:
    """Let the compiled loops run where numba cannot keep its cache.

    The loops are compiled with ``cache=True``; numba stores them beside the
    source or in the user's cache folder, and stops at import when neither can
    be written (a read-only install, a home folder that is not writable). Then
    the cache goes to a private temporary folder, deleted at exit: the loops
    are compiled afresh in each run, which is slower to start but gives the
    same results. Where even that is impossible, caching is switched off.
    """
    import atexit
    import shutil
    import tempfile

    from numba.core import config, dispatcher
    from numba.core.caching import FunctionCache

    try:
        FunctionCache(_compile_cache_or_none)   # numba's own search for a writable place
        return
    except RuntimeError:
        pass
    try:
        folder = tempfile.mkdtemp(prefix="pathfinder-compiled-")
    except OSError:
        dispatcher.Dispatcher.enable_caching = lambda self: None  # type: ignore[method-assign]
        return
    atexit.register(shutil.rmtree, folder, ignore_errors=True)
    config.CACHE_DIR = folder  # type: ignore[attr-defined]


_compile_cache_or_none()

from .core import PathResult, fit_path
from .errors import FitWarning, InputError, PathfinderError
from .estimators import PenalisedPathClassifier, PenalisedPathRegressor
from .predict import load_model, predict_table
from .study import Study, StudyOptions, explore

from .report.notebook import path_html as _path_html

# Notebooks show a path through _repr_html_. The HTML is built in report/, and
# core imports nothing from report (imports only go down), so the method is
# attached here, at the top of the package, which sits above every room.
PathResult._repr_html_ = _path_html  # type: ignore[attr-defined]

__version__ = "0.1.0"

__all__ = ["FitWarning", "InputError", "PathResult", "PathfinderError", "PenalisedPathClassifier",
           "PenalisedPathRegressor", "Study", "StudyOptions", "__version__", "explore", "fit_path", "load_model",
           "predict_table"]
