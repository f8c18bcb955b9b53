"""Growth and yield: curve families and the increments derived from them (pure numpy/scipy)."""

from foresight.growth.curves import (
    ChapmanRichards,
    TableYield,
    YieldCurve,
    chapman_richards,
    curve_from_config,
)
from foresight.growth.increments import (
    Culmination,
    chapman_richards_culmination_age,
    mai,
    table_culmination,
)

__all__ = [
    "ChapmanRichards",
    "Culmination",
    "TableYield",
    "YieldCurve",
    "chapman_richards",
    "chapman_richards_culmination_age",
    "curve_from_config",
    "mai",
    "table_culmination",
]
