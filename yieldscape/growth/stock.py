"""Stock-growth models of renewable-resource economics, and their exact trajectories.

Four shapes of growth g(S) of a stock S (Clark 1990, *Mathematical Bioeconomics*, 2nd ed.,
ch. 1; Conrad & Clark 1987, *Natural Resource Economics*, ch. 2), with r the intrinsic rate,
K the carrying capacity and m a minimum viable stock (0 < m < K):

``logistic``     g = r S (1 - S/K) (Verhulst 1838): concave, g >= 0 on [0, K]; equilibria 0
                 (unstable) and K (stable); MSY rK/4 at S = K/2.
``minimum``      g = r (S - m)(1 - S/K): concave throughout, negative below m (a minimum
                 viable stock without depensation); equilibria m (unstable) and K (stable);
                 g'(S) = r [(1 - S/K) - (S - m)/K] = 0 at S = (K + m)/2, where
                 g = r (K - m)/2 * (K - m)/(2K) = r (K - m)^2 / (4K).
``threshold``    g = r S (S/m - 1)(1 - S/K) (critical depensation): convex then concave,
                 negative on (0, m); equilibria 0 and K stable, m unstable; MSY stock the
                 larger root of 3 S^2 - 2 (K + m) S + m K = 0 (where g'(S) = 0).
``depensation``  g = r (S/K) S (1 - S/K) (depensation without a threshold): convex at low
                 stock, then concave, never negative on [0, K]; g' = (r/K)(2S - 3S^2/K) = 0 at
                 S = 2K/3, where g = (r/K)(4K^2/9)(1/3) = 4rK/27; equilibria 0 (growth
                 vanishes there to second order: any stock above it grows, none returns to
                 it, so it is unstable) and K (stable).

A stock that starts below an unstable equilibrium other than 0 (``minimum`` and
``threshold``: below m) collapses (:func:`collapses`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

SHAPES = ("logistic", "minimum", "threshold", "depensation")
WITH_MINIMUM = ("minimum", "threshold")  # the shapes with a minimum viable stock m


def shape_of(min_viable: float | None, shape: str | None = None) -> str:
    """The shape named, or the one the parameters imply (m given: threshold)."""
    if shape is not None:
        if shape not in SHAPES:
            raise ValueError(f"unknown stock shape {shape!r}")
        return shape
    return "logistic" if min_viable is None else "threshold"


def growth(
    s: ArrayLike,
    r: float,
    capacity: float,
    min_viable: float | None = None,
    shape: str | None = None,
) -> NDArray:
    """g(S) [m3/ha/yr] of the shape (default: logistic, or threshold with ``min_viable``)."""
    s = np.asarray(s, dtype=np.float64)
    k, m, form = capacity, min_viable, shape_of(min_viable, shape)
    if form == "logistic":
        return r * s * (1.0 - s / k)
    if form == "threshold":
        return r * s * (s / m - 1.0) * (1.0 - s / k)
    if form == "minimum":
        return r * (s - m) * (1.0 - s / k)
    return r * (s / k) * s * (1.0 - s / k)


@dataclass(frozen=True)
class Equilibrium:
    stock: float
    stable: bool


def equilibria(
    capacity: float, min_viable: float | None = None, shape: str | None = None
) -> tuple[float, ...]:
    """Stocks where g(S) = 0, ascending."""
    return tuple(e.stock for e in equilibria_with_stability(capacity, min_viable, shape))


def equilibria_with_stability(
    capacity: float, min_viable: float | None = None, shape: str | None = None
) -> tuple[Equilibrium, ...]:
    """Each equilibrium with its stability (a small deviation returns to it), ascending."""
    form = shape_of(min_viable, shape)
    if form == "minimum":
        return (Equilibrium(float(min_viable), False), Equilibrium(capacity, True))
    if form == "threshold":
        return (
            Equilibrium(0.0, True),
            Equilibrium(float(min_viable), False),
            Equilibrium(capacity, True),
        )
    return (Equilibrium(0.0, False), Equilibrium(capacity, True))


def msy(
    r: float, capacity: float, min_viable: float | None = None, shape: str | None = None
) -> tuple[float, float]:
    """(S_MSY, g(S_MSY)): the stock of greatest growth and that growth, in closed form."""
    k, m, form = capacity, min_viable, shape_of(min_viable, shape)
    if form == "logistic":
        return k / 2.0, r * k / 4.0
    if form == "minimum":
        return (k + m) / 2.0, r * (k - m) ** 2 / (4.0 * k)
    if form == "depensation":
        return 2.0 * k / 3.0, 4.0 * r * k / 27.0
    s = (2.0 * (k + m) + math.sqrt(4.0 * (k + m) ** 2 - 12.0 * m * k)) / 6.0
    return s, float(growth(s, r, k, m, form))


def collapses(initial: float, min_viable: float | None = None, shape: str | None = None) -> bool:
    """Whether a stock starting at ``initial`` falls towards 0: below the unstable minimum
    viable stock m of the minimum and threshold shapes."""
    return shape_of(min_viable, shape) in WITH_MINIMUM and initial < float(min_viable)


def logistic_stock(t: ArrayLike, r: float, capacity: float, initial: float) -> NDArray:
    """Closed-form logistic trajectory S(t) = K / (1 + ((K - S0)/S0) e^(-r t))."""
    t = np.asarray(t, dtype=np.float64)
    if initial <= 0:
        return np.zeros(t.shape)
    return capacity / (1.0 + (capacity - initial) / initial * np.exp(-r * t))


def minimum_stock(t: ArrayLike, r: float, capacity: float, initial: float, m: float) -> NDArray:
    """Closed-form trajectory of g = r (S - m)(1 - S/K) = (r/K)(S - m)(K - S).

    By partial fractions dS / ((S - m)(K - S)) = dS/(K - m) (1/(S - m) + 1/(K - S)), so
    ln|(S - m)/(K - S)| = a t + const with a = r (K - m)/K, and with C = (S0 - m)/(K - S0):
    S(t) = (m + K C e^(a t)) / (1 + C e^(a t)). Below m (C < 0) the stock falls and reaches 0
    in finite time, at C e^(a t) = -m/K; it stays at 0 (the stock is gone)."""
    t = np.asarray(t, dtype=np.float64)
    k = capacity
    if initial == k:
        return np.full(t.shape, k)
    a = r * (k - m) / k
    c = (initial - m) / (k - initial)
    e = c * np.exp(np.minimum(a * t, 700.0))
    with np.errstate(over="ignore", invalid="ignore"):
        s = (m + k * e) / (1.0 + e)
    s = np.where(np.isinf(e), k, s)
    if initial < m:  # collapse: S = 0 from the moment it is reached
        gone = math.log(m / (k * -c)) / a if c < 0 else math.inf
        s = np.where(t >= gone, 0.0, s)
    return np.maximum(s, 0.0)


def _time_to(shape: str, k: float, m: float | None, r: float):  # noqa: ANN202 - S -> t
    """t(S) - t(S0) up to the constant: r t = F(S) - F(S0) by partial fractions.

    threshold: r dt = dS / (S (S/m - 1)(1 - S/K)) gives
      F(S) = -ln S + K/(K - m) ln|S - m| - m/(K - m) ln|K - S|;
    depensation: r dt = K dS / (S^2 (1 - S/K)) = K^2 dS / (S^2 (K - S)), and
      K^2 / (S^2 (K - S)) = 1/S + K/S^2 + 1/(K - S) (times S^2 (K - S):
      S (K - S) + K (K - S) + S^2 = K^2), so F(S) = ln S - K/S - ln|K - S|.
    """
    if shape == "threshold":

        def big_f(x: NDArray) -> NDArray:
            return (
                -np.log(x)
                + k / (k - m) * np.log(np.abs(x - m))
                - m / (k - m) * np.log(np.abs(k - x))
            )

        return big_f

    def dep_f(x: NDArray) -> NDArray:
        return np.log(x) - k / x - np.log(np.abs(k - x))

    return dep_f


class Trajectory:
    """S(t) from S(0) = initial, exact for every shape, vectorised over t.

    logistic and minimum: closed forms (:func:`logistic_stock`, :func:`minimum_stock`).
    threshold and depensation: the time to reach S is known in closed form by partial
    fractions (:func:`_time_to`); S(t) is monotone between equilibria, so it is the inverse of
    t(S), tabulated once densely towards the limit the stock approaches and read back by
    linear interpolation.
    """

    def __init__(
        self,
        r: float,
        capacity: float,
        initial: float,
        min_viable: float | None = None,
        points: int = 20001,
        shape: str | None = None,
    ):
        self.r, self.k, self.s0, self.m = r, capacity, initial, min_viable
        self.shape = shape_of(min_viable, shape)
        self._table = None
        if self.shape in ("logistic", "minimum"):
            return
        k, m = capacity, min_viable
        at_rest = (0.0, capacity) + ((min_viable,) if self.shape == "threshold" else ())
        if initial in at_rest:
            return
        limit = 0.0 if collapses(initial, m, self.shape) else k
        # fractions of the distance still to go, from 1 (start) to 1e-12 (at the limit)
        u = np.unique(
            np.r_[np.linspace(1.0, 1e-2, points), np.geomspace(1e-2, 1e-12, points // 4)]
        )[::-1]
        s = limit + (initial - limit) * u
        big_f = _time_to(self.shape, k, m, r)
        t = (big_f(s) - big_f(np.asarray(initial))) / r
        t[0] = 0.0
        self._table = (t, s, limit)

    def __call__(self, t: ArrayLike) -> NDArray:
        t = np.asarray(t, dtype=np.float64)
        if self.shape == "logistic":
            return logistic_stock(t, self.r, self.k, self.s0)
        if self.shape == "minimum":
            return minimum_stock(t, self.r, self.k, self.s0, float(self.m))
        if self._table is None:  # starting at an equilibrium
            return np.full(t.shape, self.s0)
        times, stocks, limit = self._table
        return np.interp(t, times, stocks, right=limit)
