"""Fit a yield curve family to age/volume points (scipy.optimize.curve_fit).

Each family has a starting guess from the data and bounds that keep its parameters in their
domain. A fit that does not converge raises :class:`FitError` (an input error: the points do
not support the model); a converged fit with R^2 below 0.9 or a parameter at its bound comes
back with warnings the CLI prints.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy.optimize import OptimizeWarning, curve_fit

from yieldscape.errors import InputError
from yieldscape.growth import stock
from yieldscape.growth.curves import chapman_richards, gompertz_yield, logistic_yield, schumacher

POOR_R2 = 0.9


class FitError(InputError):
    """The optimiser did not converge for these points."""


@dataclass(frozen=True)
class Family:
    """A family to fit: the scenario keys of its parameters, the model volume(t, *fitted), a
    starting guess, the fitted parameters' bounds, and (where they differ from the keys) the
    fitted parameters' names and their conversion to the keys' values."""

    names: tuple[str, ...]
    fn: Callable[..., NDArray]
    guess: Callable[[NDArray, NDArray], list[float]]
    lower: tuple[float, ...]
    upper: tuple[float, ...]
    fitted: tuple[str, ...] = ()
    to_keys: Callable[[NDArray], NDArray] | None = None

    @property
    def fitted_names(self) -> tuple[str, ...]:
        return self.fitted or self.names


def _cr_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.3 * v.max(), 2.0 / t.mean(), 3.0]


def _schumacher_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.3 * v.max(), float(np.median(t))]


def _sigmoid_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.2 * v.max(), 20.0, 4.0 / t.mean()]


def _stock_guess(t: NDArray, v: NDArray) -> list[float]:
    """r, K, S0 / K: the stock's growth rate from the time it takes, K above the largest
    volume, S0 the smallest volume (at least 1% of K)."""
    k = 1.2 * v.max()
    return [4.0 / t.mean(), k, max(float(v[np.argmin(t)]) / k, 0.01)]


def _stock_model(shape: str) -> Callable[..., NDArray]:
    """volume(t, r, K, u[, q]) of a stock shape, with S0 = u K and m = q K, so that the box
    bounds 0 < u <= 1 and 0 < q < 1 keep S0 and m where the scenario allows them."""

    def fn(t: NDArray, r: float, k: float, u: float, q: float | None = None) -> NDArray:
        m = None if q is None else q * k
        return stock.Trajectory(r, k, u * k, m, points=2001, shape=shape)(t)

    return fn


def _stock_keys(p: NDArray) -> NDArray:
    """(r, K, u[, q]) -> (r, K, S0 = u K[, m = q K])."""
    return np.r_[p[:2], p[2:] * p[1]]


_STOCK_LOWER = (1e-6, 1e-6, 1e-9)
_STOCK_UPPER = (5.0, np.inf, 1.0)
_STOCK_KEYS = ("r", "capacity_m3_ha", "initial_m3_ha")
_STOCK_FITTED = ("r", "capacity_m3_ha", "initial_share_of_capacity")

FAMILIES: dict[str, Family] = {
    "chapman-richards": Family(
        ("a", "k", "c"), chapman_richards, _cr_guess, (1e-9, 1e-6, 0.05), (np.inf, 5.0, 50.0)
    ),
    "schumacher": Family(("a", "b"), schumacher, _schumacher_guess, (1e-9, 1e-6), (np.inf, 1e4)),
    "logistic": Family(
        ("a", "b", "k"), logistic_yield, _sigmoid_guess, (1e-9, 1e-9, 1e-6), (np.inf, 1e12, 5.0)
    ),
    "gompertz": Family(
        ("a", "b", "k"), gompertz_yield, _sigmoid_guess, (1e-9, 1e-9, 1e-6), (np.inf, 1e6, 5.0)
    ),
    **{
        f"stock-{shape}": Family(
            _STOCK_KEYS,
            _stock_model(shape),
            _stock_guess,
            _STOCK_LOWER,
            _STOCK_UPPER,
            _STOCK_FITTED,
            _stock_keys,
        )
        for shape in ("logistic", "depensation")
    },
    **{
        f"stock-{shape}": Family(
            (*_STOCK_KEYS, "min_viable_m3_ha"),
            _stock_model(shape),
            lambda t, v: [*_stock_guess(t, v), 0.02],
            (*_STOCK_LOWER, 1e-9),
            (*_STOCK_UPPER, 1.0 - 1e-9),
            (*_STOCK_FITTED, "min_viable_share_of_capacity"),
            _stock_keys,
        )
        for shape in ("minimum", "threshold")
    },
}


@dataclass(frozen=True)
class Fit:
    model: str
    parameters: dict[str, float]
    rmse: float
    r2: float
    n: int
    warnings: tuple[str, ...]

    def scenario_snippet(self, code: str = "SPECIES") -> str:
        """A ready-to-paste [species.<code>] table."""
        lines = [f"[species.{code}]", f'curve = "{self.model}"']
        lines += [f"{k} = {v:.6g}" for k, v in self.parameters.items()]
        lines.append(
            f"# fitted to {self.n} points: RMSE {self.rmse:.4g} m3/ha, "
            f"R2 {self.r2:.4f}; add min_harvest_age (or another rule)"
        )
        return "\n".join(lines)


def fit_curve(ages: NDArray, volumes: NDArray, model: str) -> Fit:
    """Least-squares fit of one family; see the module docstring for failures and warnings."""
    fam = FAMILIES[model]
    t = np.asarray(ages, dtype=np.float64)
    v = np.asarray(volumes, dtype=np.float64)
    if len(t) < len(fam.names) + 1:
        raise FitError(
            f"{model}: {len(t)} points cannot fit {len(fam.names)} parameters; "
            f"give at least {len(fam.names) + 1}"
        )
    try:
        with np.errstate(all="ignore"), _no_optimize_warning():
            p, _ = curve_fit(
                fam.fn, t, v, p0=fam.guess(t, v), bounds=(fam.lower, fam.upper), maxfev=20_000
            )
    except (RuntimeError, ValueError) as exc:
        raise FitError(f"{model}: the fit did not converge ({exc})") from None
    pred = fam.fn(t, *p)
    resid = v - pred
    rmse = float(np.sqrt(np.mean(resid**2)))
    ss_tot = float(np.sum((v - v.mean()) ** 2))
    r2 = 1.0 - float(np.sum(resid**2)) / ss_tot if ss_tot > 0 else float("nan")
    notes = []
    if not np.isfinite(r2) or r2 < POOR_R2:
        notes.append(f"poor fit: R2 = {r2:.3f} is below {POOR_R2}")
    for name, val, lo, hi in zip(fam.fitted_names, p, fam.lower, fam.upper, strict=True):
        if np.isclose(val, lo, rtol=1e-6) or (np.isfinite(hi) and np.isclose(val, hi, rtol=1e-6)):
            notes.append(f"parameter {name} = {val:.6g} sits at its bound; the fit is doubtful")
    keys = fam.to_keys(p) if fam.to_keys is not None else p
    return Fit(
        model,
        {k: float(x) for k, x in zip(fam.names, keys, strict=True)},
        rmse,
        r2,
        len(t),
        tuple(notes),
    )


class _no_optimize_warning:
    """curve_fit warns when it cannot estimate the covariance; we report fit quality instead."""

    def __enter__(self) -> None:
        import warnings

        self._ctx = warnings.catch_warnings()
        self._ctx.__enter__()
        warnings.simplefilter("ignore", OptimizeWarning)

    def __exit__(self, *exc: object) -> None:
        self._ctx.__exit__(*exc)
