"""Mean and current annual increment, where MAI culminates, and the yield class."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import brentq

VolumeFn = Callable[[NDArray], NDArray]  # age [years] -> volume [m3/ha], vectorised


def mai(age_years: ArrayLike, volume: ArrayLike) -> NDArray[np.float64]:
    """Mean annual increment V(t) / t [volume per year]; 0 at age 0.

    >>> mai([0, 50, 100], [0.0, 250.0, 400.0]).tolist()
    [0.0, 5.0, 4.0]
    """
    t = np.asarray(age_years, dtype=np.float64)
    v = np.asarray(volume, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(t > 0, v / np.where(t > 0, t, 1.0), 0.0)


@dataclass(frozen=True)
class Culmination:
    """Age and value of maximum MAI; ``culminated`` is False if MAI still rises at the last age.

    When not culminated, ``age_years`` and ``mai`` are those of the last age examined.
    """

    age_years: float
    mai: float
    culminated: bool


def table_culmination(ages: ArrayLike, volumes: ArrayLike) -> Culmination:
    """Maximum MAI over the ages of a yield table, as a yield table is read by hand.

    The earliest age wins a tie. If the maximum is at the last age, MAI has not been shown
    to culminate within the table.

    >>> table_culmination([20, 40, 60, 80, 100], [40, 140, 228, 278, 296])
    Culmination(age_years=60.0, mai=3.8, culminated=True)
    >>> table_culmination([20, 40, 60], [40, 140, 228]).culminated  # still rising at 60
    False
    """
    t = np.asarray(ages, dtype=np.float64)
    m = mai(t, volumes)
    i = int(np.argmax(m))
    return Culmination(float(t[i]), float(m[i]), culminated=i < len(t) - 1)


def culmination(
    volume: VolumeFn, cai: VolumeFn, max_age_years: float, step_years: float = 0.5
) -> Culmination:
    """Age of maximum MAI of any curve: a root of CAI(t) - MAI(t) = 0 where it turns negative.

    CAI - MAI is scanned on a grid up to ``max_age_years``; every crossing from + to - is an
    MAI maximum, refined with Brent's method, and the one with the largest MAI wins. Curves
    with volume at age 0 (a logistic yield) have MAI falling from age 0 before their interior
    maximum; that early fall is not a culmination. If MAI still rises at ``max_age_years``, or
    never has an interior maximum, the result says it has not culminated.
    """
    t = np.arange(step_years, max_age_years + step_years / 2, step_years)
    m = mai(t, volume(t))
    d = cai(t) - m
    crossings = np.flatnonzero((d[:-1] > 0) & (d[1:] <= 0))
    if not len(crossings):
        return Culmination(float(t[-1]), float(m[-1]), culminated=False)

    def f(x: float) -> float:
        x_arr = np.asarray([x])
        return float(cai(x_arr)[0] - mai(x_arr, volume(x_arr))[0])

    best: tuple[float, float] | None = None
    for j in crossings[:8]:  # a handful at most for any sensible curve
        lo, hi = float(t[j]), float(t[j + 1])
        x = brentq(f, lo, hi, xtol=1e-10, rtol=1e-12) if f(hi) < 0 else hi
        value = float(mai(np.asarray([x]), volume(np.asarray([x])))[0])
        if best is None or value > best[1]:
            best = (x, value)
    assert best is not None
    if best[1] < m[-1] and d[-1] > 0:  # rising again at the end and higher there
        return Culmination(float(t[-1]), float(m[-1]), culminated=False)
    return Culmination(best[0], best[1], culminated=True)


def chapman_richards_culmination_age(k: float, c: float) -> float:
    """Age [years] of maximum MAI of V = a (1 - exp(-k t))^c, for c > 1.

    Setting d(V/t)/dt = 0 gives c x = e^x - 1 with x = k t, independent of a; the positive
    root is found by Brent's method. For c <= 1, MAI falls from age 0 and there is no
    interior maximum (ValueError).

    >>> round(chapman_richards_culmination_age(0.03, 3.0), 2)  # x = 1.9038: 3 x = e^x - 1
    63.46
    >>> round(chapman_richards_culmination_age(0.06, 3.0), 2)  # twice the rate, half the age
    31.73
    """
    if c <= 1:
        raise ValueError(f"c = {c}: MAI of a Chapman-Richards curve culminates only for c > 1")
    hi = 1.0
    while np.expm1(hi) - c * hi <= 0:  # f(x) = e^x - 1 - c x is < 0 just above 0
        hi *= 2
    x = brentq(lambda x: np.expm1(x) - c * x, 1e-9, hi, xtol=1e-14, rtol=1e-14)
    return float(x / k)


def yield_class(max_mai: float, step: float = 2.0) -> float:
    """Maximum MAI rounded to the nearest multiple of ``step`` [m3/ha/yr], halves rounded up.

    British usage (Forestry Commission): yield class is the maximum MAI in steps of 2.

    >>> yield_class(13.0), yield_class(12.99)  # 13 is half a step: up
    (14.0, 12.0)
    """
    return float(step * math.floor(max_mai / step + 0.5))


def first_age_reaching(values: NDArray, ages: NDArray, threshold: float) -> float | None:
    """The first age on the grid at which ``values`` reach ``threshold`` (None if never)."""
    hit = np.flatnonzero(values >= threshold)
    return float(ages[hit[0]]) if len(hit) else None
