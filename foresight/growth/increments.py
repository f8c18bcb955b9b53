"""Mean and current annual increment, and where MAI culminates."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import brentq


def mai(age_years: ArrayLike, volume: ArrayLike) -> NDArray[np.float64]:
    """Mean annual increment V(t) / t [volume per year]; 0 at age 0."""
    t = np.asarray(age_years, dtype=np.float64)
    v = np.asarray(volume, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(t > 0, v / np.where(t > 0, t, 1.0), 0.0)


@dataclass(frozen=True)
class Culmination:
    """Age and value of maximum MAI; ``culminated`` is False if MAI still rises at the last age."""

    age_years: float
    mai: float
    culminated: bool


def table_culmination(ages: ArrayLike, volumes: ArrayLike) -> Culmination:
    """Maximum MAI over the ages of a yield table, as a yield table is read by hand.

    The earliest age wins a tie. If the maximum is at the last age, MAI has not been shown
    to culminate within the table.
    """
    t = np.asarray(ages, dtype=np.float64)
    m = mai(t, volumes)
    i = int(np.argmax(m))
    return Culmination(float(t[i]), float(m[i]), culminated=i < len(t) - 1)


def chapman_richards_culmination_age(k: float, c: float) -> float:
    """Age [years] of maximum MAI of V = a (1 - exp(-k t))^c, for c > 1.

    Setting d(V/t)/dt = 0 gives c x = e^x - 1 with x = k t, independent of a; the positive
    root is found by Brent's method. For c <= 1, MAI falls from age 0 and there is no
    interior maximum (ValueError).
    """
    if c <= 1:
        raise ValueError(f"c = {c}: MAI of a Chapman-Richards curve culminates only for c > 1")
    # f(x) = e^x - 1 - c x is negative just above 0 and positive for x large enough.
    hi = 1.0
    while np.expm1(hi) - c * hi <= 0:
        hi *= 2
    x = brentq(lambda x: np.expm1(x) - c * x, 1e-9, hi, xtol=1e-14, rtol=1e-14)
    return float(x / k)
