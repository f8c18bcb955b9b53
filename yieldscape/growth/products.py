"""Product split: shares of harvested volume by product class as a function of age.

Shares are given at ages, interpolated linearly between them and held at the first and last
values outside; at every age they add up to 1, so no volume is lost or made.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

UNSPLIT = "unsplit"  # the product name of volume from a species without a product split


@dataclass(frozen=True)
class ProductSplit:
    """Shares of harvested volume by product at given ages (linear between, flat outside)."""

    ages: tuple[float, ...]
    shares: Mapping[str, tuple[float, ...]]


def product_shares(split: ProductSplit | None, age_years: ArrayLike) -> dict[str, NDArray]:
    """Product -> share of volume at each age; a species without a split is all ``unsplit``."""
    t = np.asarray(age_years, dtype=np.float64)
    if split is None:
        return {UNSPLIT: np.ones(t.shape)}
    ages = np.asarray(split.ages, dtype=np.float64)
    return {name: np.interp(t, ages, np.asarray(s)) for name, s in split.shares.items()}
