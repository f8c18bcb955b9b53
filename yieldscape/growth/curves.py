"""Yield curve families: volume per hectare as a vectorised function of age and site index.

Every curve answers ``volume_m3_ha(age_years, site_index_m)`` and
``cai_m3_ha_yr(age_years, site_index_m)`` for scalars or arrays, gives 0 for ages < 0 (a stand
inside its regeneration delay carries a negative age) and never a negative volume.

Site dependence of the parametric families is one scheme for all of them: with a reference site
index SI_ref, ``V(t, SI) = rho_a V_ref(rho_k t)`` where ``rho_a = (SI/SI_ref)^site_exponent_a``
and ``rho_k = (SI/SI_ref)^site_exponent_k``. For Chapman-Richards this is the familiar
``a rho_a (1 - exp(-k rho_k t))^c``: the asymptote scales with rho_a, the rate with rho_k.
Table curves carry site through site classes instead (one table per class).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import PchipInterpolator

from yieldscape.growth import stock


class YieldCurve(Protocol):
    """A yield curve: standing volume per hectare by age and site."""

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike) -> NDArray[np.float64]:
        """Volume [m3/ha] at ``age_years`` [years] on sites ``site_index_m`` [m]."""
        ...

    def cai_m3_ha_yr(self, age_years: ArrayLike, site_index_m: ArrayLike) -> NDArray[np.float64]:
        """Current annual increment dV/dt [m3/ha/yr]."""
        ...


# ----------------------------------------------------------------------------- plain formulas
def chapman_richards(age_years: ArrayLike, a: ArrayLike, k: ArrayLike, c: ArrayLike) -> NDArray:
    """Chapman-Richards yield V = a (1 - exp(-k t))^c (Richards 1959; Chapman 1961).

    age_years : [years]; a : asymptote [m3/ha]; k : rate [1/year]; c : shape [-].
    Ages below zero give 0.

    >>> float(chapman_richards(0.0, 500.0, 0.03, 3.0))
    0.0
    >>> round(float(chapman_richards(1e6, 500.0, 0.03, 3.0)), 6)
    500.0
    """
    t = np.maximum(np.asarray(age_years, dtype=np.float64), 0.0)
    return np.asarray(a) * (-np.expm1(-np.asarray(k) * t)) ** np.asarray(c)


def schumacher(age_years: ArrayLike, a: float, b: float) -> NDArray:
    """Schumacher yield V = a exp(-b / t) (Schumacher 1939); 0 at t <= 0.

    >>> round(float(schumacher(10.0, 300.0, 10.0)), 4)  # a / e at t = b
    110.3638
    """
    t = np.asarray(age_years, dtype=np.float64)
    safe = np.where(t > 0, t, 1.0)
    return np.where(t > 0, a * np.exp(-b / safe), 0.0)


def logistic_yield(age_years: ArrayLike, a: float, b: float, k: float) -> NDArray:
    """Logistic (Verhulst) sigmoid yield V = a / (1 + b exp(-k t))."""
    t = np.asarray(age_years, dtype=np.float64)
    return np.where(t >= 0, a / (1.0 + b * np.exp(-k * np.maximum(t, 0.0))), 0.0)


def gompertz_yield(age_years: ArrayLike, a: float, b: float, k: float) -> NDArray:
    """Gompertz sigmoid yield V = a exp(-b exp(-k t)) (Gompertz 1825)."""
    t = np.asarray(age_years, dtype=np.float64)
    return np.where(t >= 0, a * np.exp(-b * np.exp(-k * np.maximum(t, 0.0))), 0.0)


# ----------------------------------------------------------------------------- site scaling
@dataclass(frozen=True)
class SiteScaling:
    """rho_a and rho_k of the site scheme in the module docstring (1, 1 without SI_ref)."""

    site_index_ref_m: float | None = None
    site_exponent_a: float = 1.0
    site_exponent_k: float = 0.0

    def factors(self, site_index_m: ArrayLike) -> tuple[NDArray, NDArray]:
        si = np.asarray(site_index_m, dtype=np.float64)
        if self.site_index_ref_m is None:
            one = np.ones(si.shape)
            return one, one
        ratio = si / self.site_index_ref_m
        return ratio**self.site_exponent_a, ratio**self.site_exponent_k


class _Parametric:
    """A reference curve V_ref(t) with derivative, scaled by site as in the module docstring."""

    site: SiteScaling

    def reference(self, t: NDArray) -> NDArray:  # pragma: no cover - interface
        raise NotImplementedError

    def reference_cai(self, t: NDArray) -> NDArray:  # pragma: no cover - interface
        raise NotImplementedError

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike = 0.0) -> NDArray:
        t = np.asarray(age_years, dtype=np.float64)
        ra, rk = self.site.factors(np.broadcast_to(site_index_m, t.shape))
        return np.where(t < 0, 0.0, ra * self.reference(np.maximum(t, 0.0) * rk))

    def cai_m3_ha_yr(self, age_years: ArrayLike, site_index_m: ArrayLike = 0.0) -> NDArray:
        t = np.asarray(age_years, dtype=np.float64)
        ra, rk = self.site.factors(np.broadcast_to(site_index_m, t.shape))
        return np.where(t < 0, 0.0, ra * rk * self.reference_cai(np.maximum(t, 0.0) * rk))


@dataclass(frozen=True)
class ChapmanRichards(_Parametric):
    """V = a (1 - exp(-k t))^c; a [m3/ha], k [1/year], c [-]."""

    a: float
    k: float
    c: float
    site: SiteScaling = field(default_factory=SiteScaling)

    def reference(self, t: NDArray) -> NDArray:
        return chapman_richards(t, self.a, self.k, self.c)

    def reference_cai(self, t: NDArray) -> NDArray:
        e = np.exp(-self.k * t)
        with np.errstate(divide="ignore", invalid="ignore"):
            base = (1.0 - e) ** (self.c - 1.0)
        return self.a * self.c * self.k * e * np.where(np.isfinite(base), base, 0.0)


@dataclass(frozen=True)
class Schumacher(_Parametric):
    """V = a exp(-b / t); a [m3/ha], b [years] (MAI peaks at t = b, CAI at t = b/2)."""

    a: float
    b: float
    site: SiteScaling = field(default_factory=SiteScaling)

    def reference(self, t: NDArray) -> NDArray:
        return schumacher(t, self.a, self.b)

    def reference_cai(self, t: NDArray) -> NDArray:
        safe = np.where(t > 0, t, 1.0)
        return np.where(t > 0, schumacher(t, self.a, self.b) * self.b / safe**2, 0.0)


@dataclass(frozen=True)
class LogisticYield(_Parametric):
    """V = a / (1 + b exp(-k t)); a [m3/ha], b [-], k [1/year]."""

    a: float
    b: float
    k: float
    site: SiteScaling = field(default_factory=SiteScaling)

    def reference(self, t: NDArray) -> NDArray:
        return logistic_yield(t, self.a, self.b, self.k)

    def reference_cai(self, t: NDArray) -> NDArray:
        v = self.reference(t)
        return self.k * v * (1.0 - v / self.a)


@dataclass(frozen=True)
class GompertzYield(_Parametric):
    """V = a exp(-b exp(-k t)); a [m3/ha], b [-], k [1/year]."""

    a: float
    b: float
    k: float
    site: SiteScaling = field(default_factory=SiteScaling)

    def reference(self, t: NDArray) -> NDArray:
        return gompertz_yield(t, self.a, self.b, self.k)

    def reference_cai(self, t: NDArray) -> NDArray:
        return self.reference(t) * self.b * self.k * np.exp(-self.k * t)


@dataclass(frozen=True)
class StockGrowth(_Parametric):
    """Standing volume as a stock S(t) growing by g(S) from S(0) = initial_m3_ha.

    ``shape`` (:data:`yieldscape.growth.stock.SHAPES`; default: ``logistic``, or ``threshold``
    where ``min_viable_m3_ha`` is given): logistic g(S) = r S (1 - S/K); ``minimum`` g(S) =
    r (S - m)(1 - S/K); ``threshold`` g(S) = r S (S/m - 1)(1 - S/K); ``depensation`` g(S) =
    r (S/K) S (1 - S/K). With a minimum viable stock m a stock starting below it collapses
    towards 0 (:attr:`collapses`). Integrated exactly (see :mod:`yieldscape.growth.stock`).
    Under the site scheme K, m and S(0) all scale with rho_a and time with rho_k: rho_a rho_k
    g(S/rho_a) is the same shape with K and m times rho_a, so one reference trajectory serves
    every site.
    """

    r: float
    capacity_m3_ha: float
    initial_m3_ha: float
    min_viable_m3_ha: float | None = None
    site: SiteScaling = field(default_factory=SiteScaling)
    shape: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "shape", stock.shape_of(self.min_viable_m3_ha, self.shape))
        traj = stock.Trajectory(
            self.r,
            self.capacity_m3_ha,
            self.initial_m3_ha,
            self.min_viable_m3_ha,
            shape=self.shape,
        )
        object.__setattr__(self, "_trajectory", traj)

    @property
    def collapses(self) -> bool:
        return stock.collapses(self.initial_m3_ha, self.min_viable_m3_ha, self.shape)

    def growth(self, s: NDArray) -> NDArray:
        return stock.growth(s, self.r, self.capacity_m3_ha, self.min_viable_m3_ha, self.shape)

    def equilibria(self) -> tuple[stock.Equilibrium, ...]:
        """The equilibria at the reference site, with their stability."""
        return stock.equilibria_with_stability(
            self.capacity_m3_ha, self.min_viable_m3_ha, self.shape
        )

    def reference(self, t: NDArray) -> NDArray:
        return self._trajectory(t)  # type: ignore[attr-defined]

    def reference_cai(self, t: NDArray) -> NDArray:
        return self.growth(self.reference(t))

    def msy(self, site_index_m: ArrayLike = 0.0) -> tuple[NDArray, NDArray]:
        """(MSY stock [m3/ha], MSY growth [m3/ha/yr]) at each site."""
        s, g = stock.msy(self.r, self.capacity_m3_ha, self.min_viable_m3_ha, self.shape)
        ra, rk = self.site.factors(site_index_m)
        return ra * s, ra * rk * g


@dataclass(frozen=True)
class TableYield:
    """Volume from age/volume tables, one per site class, interpolated monotonically.

    Along age, interpolation is piecewise cubic Hermite (PCHIP; Fritsch & Carlson 1980), which
    keeps monotone stretches monotone and never overshoots between two points. Below the first
    age the curve runs from (0, 0) unless the table starts at 0; past the last age the volume is
    held at the last value. With several classes (``site_classes_m``, increasing), the volume at
    an intermediate site index is linear between the two neighbouring classes; outside the
    class range the nearest class is used (the inventory check rejects such stands when the
    species' site range is the class range, the default).
    """

    ages: tuple[float, ...]
    volumes_m3_ha: tuple[tuple[float, ...], ...]  # one row per class
    site_classes_m: tuple[float, ...] = (0.0,)

    def __post_init__(self) -> None:
        ages = np.asarray(self.ages, dtype=np.float64)
        vols = np.atleast_2d(np.asarray(self.volumes_m3_ha, dtype=np.float64))
        if ages[0] > 0:
            ages = np.r_[0.0, ages]
            vols = np.c_[np.zeros(len(vols)), vols]
        interp = PchipInterpolator(ages, vols, axis=1, extrapolate=False)
        object.__setattr__(self, "_interp", interp)
        object.__setattr__(self, "_deriv", interp.derivative())
        object.__setattr__(self, "_range", (float(ages[0]), float(ages[-1])))
        object.__setattr__(self, "_last", vols[:, -1])

    @classmethod
    def single(cls, ages: tuple[float, ...], volumes: tuple[float, ...]) -> TableYield:
        return cls(tuple(ages), (tuple(volumes),))

    def _blend(self, values: NDArray, site_index_m: ArrayLike) -> NDArray:
        """values: (classes, n) -> (n,), linear between neighbouring classes."""
        classes = np.asarray(self.site_classes_m, dtype=np.float64)
        if len(classes) == 1:
            return values[0]
        si = np.clip(np.asarray(site_index_m, dtype=np.float64), classes[0], classes[-1])
        hi = np.clip(np.searchsorted(classes, si, side="right"), 1, len(classes) - 1)
        w = (si - classes[hi - 1]) / (classes[hi] - classes[hi - 1])
        cols = np.arange(values.shape[1])
        return (1 - w) * values[hi - 1, cols] + w * values[hi, cols]

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike = 0.0) -> NDArray:
        t = np.asarray(age_years, dtype=np.float64)
        flat = t.ravel()
        first, last = self._range  # type: ignore[attr-defined]
        v = self._interp(np.clip(flat, first, last))  # type: ignore[attr-defined]
        v = np.where(flat[None, :] >= last, self._last[:, None], v)  # type: ignore[attr-defined]
        out = self._blend(v, np.broadcast_to(site_index_m, t.shape).ravel())
        return np.where(flat < 0, 0.0, np.maximum(out, 0.0)).reshape(t.shape)

    def cai_m3_ha_yr(self, age_years: ArrayLike, site_index_m: ArrayLike = 0.0) -> NDArray:
        t = np.asarray(age_years, dtype=np.float64)
        flat = t.ravel()
        first, last = self._range  # type: ignore[attr-defined]
        d = self._deriv(np.clip(flat, first, last))  # type: ignore[attr-defined]
        d = np.where((flat[None, :] >= last) | (flat[None, :] < 0), 0.0, d)
        return self._blend(d, np.broadcast_to(site_index_m, t.shape).ravel()).reshape(t.shape)

    @property
    def site_range(self) -> tuple[float, float]:
        return float(min(self.site_classes_m)), float(max(self.site_classes_m))


@dataclass(frozen=True)
class Family:
    """A curve family of the registry: the parameters a scenario gives it, and how a curve is
    built from them (with the site scheme, which table curves do not use)."""

    parameters: tuple[str, ...]
    build: Callable[[Mapping[str, Any], SiteScaling], YieldCurve]


def _stock(shape: str) -> Callable[[Mapping[str, Any], SiteScaling], StockGrowth]:
    def build(p: Mapping[str, Any], site: SiteScaling) -> StockGrowth:
        m = p.get("min_viable_m3_ha") if shape in stock.WITH_MINIMUM else None
        return StockGrowth(p["r"], p["capacity_m3_ha"], p["initial_m3_ha"], m, site, shape)

    return build


_STOCK = ("r", "capacity_m3_ha", "initial_m3_ha")


# The one registry of curve families: the scenario's choices (species.<CODE>.curve), the keys
# each needs, and the curve built. A new family is a class above and one entry here.
FAMILIES: dict[str, Family] = {
    "chapman-richards": Family(
        ("a", "k", "c"), lambda p, site: ChapmanRichards(p["a"], p["k"], p["c"], site)
    ),
    "schumacher": Family(("a", "b"), lambda p, site: Schumacher(p["a"], p["b"], site)),
    "logistic": Family(
        ("a", "b", "k"), lambda p, site: LogisticYield(p["a"], p["b"], p["k"], site)
    ),
    "gompertz": Family(
        ("a", "b", "k"), lambda p, site: GompertzYield(p["a"], p["b"], p["k"], site)
    ),
    "stock-logistic": Family(_STOCK, _stock("logistic")),
    "stock-minimum": Family((*_STOCK, "min_viable_m3_ha"), _stock("minimum")),
    "stock-threshold": Family((*_STOCK, "min_viable_m3_ha"), _stock("threshold")),
    "stock-depensation": Family(_STOCK, _stock("depensation")),
    "table": Family(
        (),
        lambda p, site: TableYield(p["ages"], p["volumes_m3_ha"], p["site_classes_m"] or (0.0,)),
    ),
}


def make_curve(family: str, parameters: Mapping[str, Any], site: SiteScaling) -> YieldCurve:
    """The curve of ``family`` (a key of :data:`FAMILIES`) with these parameters."""
    return FAMILIES[family].build(parameters, site)
