"""Yield curve families: volume per hectare as a vectorised function of age and site index.

Every curve answers ``volume_m3_ha(age_years, site_index_m)`` for scalars or arrays, returns 0
for ages <= 0 (a stand inside its regeneration delay carries a negative age) and never a
negative volume.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import PchipInterpolator

from foresight.config import SpeciesConfig


class YieldCurve(Protocol):
    """A yield curve: standing volume per hectare by age and site."""

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike) -> NDArray[np.float64]:
        """Volume [m3/ha] at ``age_years`` [years] on sites ``site_index_m`` [m]."""
        ...


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


@dataclass(frozen=True)
class ChapmanRichards:
    """Chapman-Richards curve with an optional power-law site dependence.

    With a reference site index SI_ref, the asymptote and rate at site SI are
    ``a (SI/SI_ref)^site_exponent_a`` and ``k (SI/SI_ref)^site_exponent_k``; with no reference
    the curve ignores site. The default exponents (1, 0) scale the volume with site index and
    keep the culmination age fixed, as for a constant-shape family of curves.
    """

    a: float
    k: float
    c: float
    site_index_ref_m: float | None = None
    site_exponent_a: float = 1.0
    site_exponent_k: float = 0.0

    def parameters(self, site_index_m: ArrayLike) -> tuple[NDArray, NDArray]:
        """(a, k) at each site index."""
        if self.site_index_ref_m is None:
            si = np.asarray(site_index_m, dtype=np.float64)
            return np.full(si.shape, self.a), np.full(si.shape, self.k)
        ratio = np.asarray(site_index_m, dtype=np.float64) / self.site_index_ref_m
        return self.a * ratio**self.site_exponent_a, self.k * ratio**self.site_exponent_k

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike) -> NDArray[np.float64]:
        a, k = self.parameters(site_index_m)
        return chapman_richards(age_years, a, k, self.c)


@dataclass(frozen=True)
class TableYield:
    """Volume from an age/volume table, interpolated monotonically between the points.

    Interpolation is piecewise cubic Hermite (PCHIP; Fritsch & Carlson 1980), which keeps
    the table's monotone stretches monotone and never overshoots between two points. Below
    the first age the curve runs from (0, 0) to the first point unless the table starts at 0;
    past the last age the volume is held at the last value. Site index is ignored.
    """

    ages: tuple[float, ...]
    volumes_m3_ha: tuple[float, ...]

    def __post_init__(self) -> None:
        ages = np.asarray(self.ages, dtype=np.float64)
        vols = np.asarray(self.volumes_m3_ha, dtype=np.float64)
        if ages[0] > 0:
            ages, vols = np.r_[0.0, ages], np.r_[0.0, vols]
        object.__setattr__(self, "_interp", PchipInterpolator(ages, vols, extrapolate=False))
        object.__setattr__(self, "_first", float(ages[0]))
        object.__setattr__(self, "_last", float(ages[-1]))
        object.__setattr__(self, "_last_volume", float(vols[-1]))

    def volume_m3_ha(self, age_years: ArrayLike, site_index_m: ArrayLike = 0.0) -> NDArray:
        t = np.asarray(age_years, dtype=np.float64)
        inside = np.clip(t, self._first, self._last)
        v = self._interp(inside)
        v = np.where(t >= self._last, self._last_volume, v)
        return np.where(t <= 0.0, 0.0, np.maximum(v, 0.0))


def curve_from_config(cfg: SpeciesConfig) -> YieldCurve:
    """Build the yield curve a species table of the scenario describes."""
    if cfg.curve == "chapman-richards":
        assert cfg.a is not None and cfg.k is not None and cfg.c is not None
        return ChapmanRichards(
            cfg.a, cfg.k, cfg.c, cfg.site_index_ref_m, cfg.site_exponent_a, cfg.site_exponent_k
        )
    assert cfg.ages is not None and cfg.volumes_m3_ha is not None
    return TableYield(cfg.ages, cfg.volumes_m3_ha)
