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
from yieldscape.growth.curves import chapman_richards, gompertz_yield, logistic_yield, schumacher

POOR_R2 = 0.9


class FitError(InputError):
    """The optimiser did not converge for these points."""


@dataclass(frozen=True)
class Family:
    names: tuple[str, ...]
    fn: Callable[..., NDArray]
    guess: Callable[[NDArray, NDArray], list[float]]
    lower: tuple[float, ...]
    upper: tuple[float, ...]


def _cr_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.3 * v.max(), 2.0 / t.mean(), 3.0]


def _schumacher_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.3 * v.max(), float(np.median(t))]


def _sigmoid_guess(t: NDArray, v: NDArray) -> list[float]:
    return [1.2 * v.max(), 20.0, 4.0 / t.mean()]


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
    for name, val, lo, hi in zip(fam.names, p, fam.lower, fam.upper, strict=True):
        if np.isclose(val, lo, rtol=1e-6) or (np.isfinite(hi) and np.isclose(val, hi, rtol=1e-6)):
            notes.append(f"parameter {name} = {val:.6g} sits at its bound; the fit is doubtful")
    return Fit(
        model,
        {k: float(x) for k, x in zip(fam.names, p, strict=True)},
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
