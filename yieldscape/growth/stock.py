"""Stock-growth models of renewable-resource economics, and their exact trajectories.

Logistic growth g(S) = r S (1 - S/K) (Verhulst 1838), with maximum sustainable yield
rK/4 at S = K/2 (Clark 1990, Mathematical Bioeconomics, 2nd ed., Ch. 1). Minimum-viable-stock
(critical depensation) growth g(S) = r S (S/m - 1)(1 - S/K), 0 < m < K (Clark 1990, Ch. 1):
equilibria 0 and K are stable, m is not; g < 0 on (0, m), so a stock below m collapses. Its MSY
stock is the larger root of 3 S^2 - 2 (K + m) S + m K = 0 (where g'(S) = 0).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray


def growth(s: ArrayLike, r: float, capacity: float, min_viable: float | None = None) -> NDArray:
    """g(S) [m3/ha/yr] of the logistic or, with ``min_viable``, the threshold model."""
    s = np.asarray(s, dtype=np.float64)
    g = r * s * (1.0 - s / capacity)
    if min_viable is not None:
        g = g * (s / min_viable - 1.0)
    return g


def equilibria(capacity: float, min_viable: float | None = None) -> tuple[float, ...]:
    """Stocks where g(S) = 0, ascending."""
    return (0.0, capacity) if min_viable is None else (0.0, min_viable, capacity)


def msy(r: float, capacity: float, min_viable: float | None = None) -> tuple[float, float]:
    """(S_MSY, g(S_MSY)): the stock of greatest growth and that growth, in closed form."""
    if min_viable is None:
        return capacity / 2.0, r * capacity / 4.0
    k, m = capacity, min_viable
    s = (2.0 * (k + m) + math.sqrt(4.0 * (k + m) ** 2 - 12.0 * m * k)) / 6.0
    return s, float(growth(s, r, k, m))


def logistic_stock(t: ArrayLike, r: float, capacity: float, initial: float) -> NDArray:
    """Closed-form logistic trajectory S(t) = K / (1 + ((K - S0)/S0) e^(-r t))."""
    t = np.asarray(t, dtype=np.float64)
    if initial <= 0:
        return np.zeros(t.shape)
    return capacity / (1.0 + (capacity - initial) / initial * np.exp(-r * t))


class Trajectory:
    """S(t) from S(0) = initial, exact for both models, vectorised over t.

    For the threshold model the time to reach S is known in closed form by partial fractions,
    t(S) = (F(S) - F(S0)) / r with F(S) = -ln S + K/(K-m) ln|S - m| - m/(K-m) ln|K - S|; S(t)
    is monotone between equilibria, so it is the inverse of t(S), tabulated once densely
    towards the limit the stock approaches and read back by linear interpolation.
    """

    def __init__(
        self,
        r: float,
        capacity: float,
        initial: float,
        min_viable: float | None = None,
        points: int = 20001,
    ):
        self.r, self.k, self.s0, self.m = r, capacity, initial, min_viable
        if min_viable is None or initial in (0.0, min_viable, capacity):
            self._table = None
            return
        k, m = capacity, min_viable
        limit = k if initial > m else 0.0
        # fractions of the distance still to go, from 1 (start) to 1e-12 (at the limit)
        u = np.unique(
            np.r_[np.linspace(1.0, 1e-2, points), np.geomspace(1e-2, 1e-12, points // 4)]
        )[::-1]
        s = limit + (initial - limit) * u

        def big_f(x: NDArray) -> NDArray:
            return (
                -np.log(x)
                + k / (k - m) * np.log(np.abs(x - m))
                - m / (k - m) * np.log(np.abs(k - x))
            )

        t = (big_f(s) - big_f(np.asarray(initial))) / r
        t[0] = 0.0
        self._table = (t, s, limit)

    def __call__(self, t: ArrayLike) -> NDArray:
        t = np.asarray(t, dtype=np.float64)
        if self.m is None:
            return logistic_stock(t, self.r, self.k, self.s0)
        if self._table is None:  # starting at an equilibrium
            return np.full(t.shape, self.s0)
        times, stocks, limit = self._table
        return np.interp(t, times, stocks, right=limit)
