"""Growth and yield: curve families, increments, rotations and fitting (pure numpy/scipy)."""

from yieldscape.growth.curves import (
    ChapmanRichards,
    GompertzYield,
    LogisticYield,
    Schumacher,
    SiteScaling,
    StockGrowth,
    TableYield,
    YieldCurve,
    chapman_richards,
    curve_from_config,
)
from yieldscape.growth.increments import (
    Culmination,
    chapman_richards_culmination_age,
    culmination,
    mai,
    table_culmination,
    yield_class,
)

__all__ = [
    "ChapmanRichards",
    "Culmination",
    "GompertzYield",
    "LogisticYield",
    "Schumacher",
    "SiteScaling",
    "StockGrowth",
    "TableYield",
    "YieldCurve",
    "chapman_richards",
    "chapman_richards_culmination_age",
    "culmination",
    "curve_from_config",
    "mai",
    "table_culmination",
    "yield_class",
]
