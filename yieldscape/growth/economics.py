"""Economic rotations: Faustmann land expectation value and the single-rotation optimum.

Land expectation value (Faustmann 1849; Samuelson 1976, Economics of forestry in an evolving
society, Economic Inquiry 14:466-492) of bare land under an infinite series of rotations of T
years, with net price p per m3, regeneration cost C per ha at the start of each rotation,
annual cost A per ha and real discount rate r:

- continuous: LEV(T) = (p V(T) - C e^(rT)) / (e^(rT) - 1) - A / r
- annual:     LEV(T) = (p V(T) - C (1+i)^T) / ((1+i)^T - 1) - A / i

The single-rotation (Fisher) optimum maximises p V(T) e^(-rT) - C (or with (1+i)^-T), where
V'/V = r; it is longer than the Faustmann rotation for every r > 0.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import minimize_scalar

VolumeFn = Callable[[NDArray], NDArray]


def growth_factor(t: NDArray, rate: float, compounding: str) -> NDArray:
    """e^(rT) (continuous) or (1 + i)^T (annual)."""
    t = np.asarray(t, dtype=np.float64)
    if compounding == "continuous":
        return np.exp(rate * t)
    if compounding == "annual":
        return (1.0 + rate) ** t
    raise ValueError(f"compounding {compounding!r}: choose 'continuous' or 'annual'")


def lev(
    t: NDArray,
    volume: VolumeFn,
    price: float,
    regen_cost: float,
    rate: float,
    compounding: str = "continuous",
    annual_cost: float = 0.0,
) -> NDArray:
    """Land expectation value [currency/ha] for rotations ``t`` [years]."""
    t = np.asarray(t, dtype=np.float64)
    g = growth_factor(t, rate, compounding)
    return (price * volume(t) - regen_cost * g) / (g - 1.0) - annual_cost / rate


def single_rotation_npv(
    t: NDArray,
    volume: VolumeFn,
    price: float,
    regen_cost: float,
    rate: float,
    compounding: str = "continuous",
) -> NDArray:
    """Net present value [currency/ha] of one rotation of ``t`` years on bare land."""
    t = np.asarray(t, dtype=np.float64)
    return price * volume(t) / growth_factor(t, rate, compounding) - regen_cost


@dataclass(frozen=True)
class Rotation:
    """An optimal rotation [years] and the value it maximises; ``interior`` is False when the
    optimum is at the end of the search range (no interior maximum found)."""

    age_years: float
    value: float
    interior: bool


def _argmax(fn: Callable[[NDArray], NDArray], max_age: float, step: float = 0.5) -> Rotation:
    t = np.arange(step, max_age + step / 2, step)
    v = fn(t)
    i = int(np.nanargmax(v))
    if i == len(t) - 1:
        return Rotation(float(t[i]), float(v[i]), interior=False)
    lo, hi = t[max(i - 1, 0)], t[i + 1]
    res = minimize_scalar(
        lambda x: -float(fn(np.asarray([x]))[0]),
        bounds=(lo, hi),
        method="bounded",
        options={"xatol": 1e-8},
    )
    return Rotation(float(res.x), float(-res.fun), interior=True)


def faustmann_rotation(
    volume: VolumeFn,
    price: float,
    regen_cost: float,
    rate: float,
    compounding: str = "continuous",
    annual_cost: float = 0.0,
    max_age: float = 400.0,
) -> Rotation:
    """The rotation that maximises LEV (grid scan, then a bounded refinement)."""
    if rate <= 0:
        raise ValueError(f"discount rate {rate}: the Faustmann rotation needs a rate > 0")
    return _argmax(
        lambda t: lev(t, volume, price, regen_cost, rate, compounding, annual_cost), max_age
    )


def fisher_rotation(
    volume: VolumeFn,
    price: float,
    regen_cost: float,
    rate: float,
    compounding: str = "continuous",
    max_age: float = 400.0,
) -> Rotation:
    """The single-rotation optimum (maximum NPV of one rotation)."""
    if rate <= 0:
        raise ValueError(f"discount rate {rate}: the single-rotation optimum needs a rate > 0")
    return _argmax(
        lambda t: single_rotation_npv(t, volume, price, regen_cost, rate, compounding), max_age
    )
