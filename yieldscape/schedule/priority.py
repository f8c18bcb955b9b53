"""Priority rules: which eligible stand is cut first. Higher key first; ties by stand id.

The registry feeds the scenario check (``harvest.priority``) and the docs.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray

# key(age_at_harvest_years, min_harvest_age_years, volume_m3_ha) -> priority, higher first
PriorityKey = Callable[[NDArray, NDArray, NDArray], NDArray]

PRIORITY_RULES: dict[str, tuple[PriorityKey, str]] = {
    "oldest": (lambda age, min_age, vol: age, "oldest stand first"),
    "relative_oldest": (
        lambda age, min_age, vol: age - min_age,
        "largest age above the species' minimum harvest age first",
    ),
    "highest_volume": (lambda age, min_age, vol: vol, "highest volume per hectare first"),
}


def cut_order(
    rule: str,
    age: NDArray,
    min_age: NDArray,
    vol: NDArray,
    id_rank: NDArray,
    first: NDArray | None = None,
) -> NDArray[np.intp]:
    """Positions sorted by the rule's key, descending, ties broken by ascending stand id.

    ``first`` (0 or 1 per position) puts the 0s ahead of the 1s, the rule ordering each group.
    """
    key = PRIORITY_RULES[rule][0](age, min_age, vol)
    if first is None:
        return np.lexsort((id_rank, -key))
    return np.lexsort((id_rank, -key, first))
