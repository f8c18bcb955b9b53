"""foresight: timber supply projection for regional forest planners.

The library API a notebook calls; the ``foresight`` command is a thin shell over it.
"""

from foresight._version import __version__
from foresight.config import Scenario, load_scenario
from foresight.errors import ForesightError, ForesightWarning, InputError
from foresight.pipeline import CurvesResult, RunResult, check, compare, curves, run

__all__ = [
    "CurvesResult",
    "ForesightError",
    "ForesightWarning",
    "InputError",
    "RunResult",
    "Scenario",
    "__version__",
    "check",
    "compare",
    "curves",
    "load_scenario",
    "run",
]
