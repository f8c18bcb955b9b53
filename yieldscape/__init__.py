"""yieldscape: timber supply projection for regional forest planners.

The library API a notebook calls; the ``yieldscape`` command is a thin shell over it.
"""

from yieldscape._version import __version__
from yieldscape.commands import compare, curves
from yieldscape.config import Scenario, load_scenario
from yieldscape.errors import InputError, YieldscapeError
from yieldscape.parallel import Parallel
from yieldscape.pipeline import RunResult, check, run
from yieldscape.results import CurvesResult

__all__ = [
    "CurvesResult",
    "YieldscapeError",
    "InputError",
    "Parallel",
    "RunResult",
    "Scenario",
    "__version__",
    "check",
    "compare",
    "curves",
    "load_scenario",
    "run",
]
