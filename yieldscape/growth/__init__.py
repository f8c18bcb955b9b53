"""Growth and yield: curve families, increments, rotations and fitting (pure numpy/scipy)."""

from yieldscape.growth.curves import (
    FAMILIES,
    ChapmanRichards,
    GompertzYield,
    LogisticYield,
    Schumacher,
    SiteScaling,
    StockGrowth,
    TableYield,
    YieldCurve,
    chapman_richards,
    make_curve,
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
    "FAMILIES",
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
    "mai",
    "make_curve",
    "table_culmination",
    "yield_class",
]
