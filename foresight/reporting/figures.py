"""Figures (matplotlib, Agg backend): plain, print-resolution, readable in greyscale."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # files only; never a window

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from foresight.growth import YieldCurve  # noqa: E402
from foresight.growth.rules import SiteSummary  # noqa: E402

DPI = 200


def curve_figure(
    path: Path, code: str, curve: YieldCurve, summary: SiteSummary, max_age: float
) -> None:
    """Volume, MAI and CAI against age at one site, with the rotation ages marked."""
    t = np.linspace(0.5, max_age, 600)
    si = np.full(t.shape, summary.site_index)
    v = curve.volume_m3_ha(t, si)
    fig, ax = plt.subplots(figsize=(6.5, 4.0), layout="constrained")
    ax.plot(t, v, color="black", lw=1.8, label="volume (m3/ha)")
    ax.set_xlabel("age (years)")
    ax.set_ylabel("volume (m3/ha)")
    ax2 = ax.twinx()
    ax2.plot(t, v / t, color="0.35", lw=1.4, ls="--", label="MAI (m3/ha/yr)")
    ax2.plot(t, curve.cai_m3_ha_yr(t, si), color="0.55", lw=1.2, ls=":", label="CAI (m3/ha/yr)")
    ax2.set_ylabel("increment (m3/ha/yr)")
    ax2.set_ylim(bottom=0)
    marks = [
        ("MAI culmination", summary.culmination.age_years, "-"),
        ("min. harvest age", summary.min_harvest_age_years, "-."),
    ]
    if summary.faustmann is not None:
        marks.append(("Faustmann", summary.faustmann.age_years, (0, (5, 2))))
    if summary.fisher is not None:
        marks.append(("single rotation", summary.fisher.age_years, (0, (1, 1))))
    ax.set_ylim(bottom=0)
    shown = sorted((m for m in marks if np.isfinite(m[1]) and m[1] <= max_age), key=lambda m: m[1])
    for n, (label, age, style) in enumerate(shown):
        ax.axvline(age, color="0.2", lw=0.8, ls=style)
        # labels alternate sides of their lines so that close ages stay readable
        ax.text(
            age,
            ax.get_ylim()[1] * 0.02,
            f" {label} {age:.0f} y",
            rotation=90,
            fontsize=7,
            ha="right" if n % 2 == 0 else "left",
            va="bottom",
            color="0.1",
        )
    lines = ax.get_lines()[:1] + ax2.get_lines()
    fig.legend(
        lines,
        [ln.get_label() for ln in lines],
        loc="outside upper center",
        ncols=3,
        fontsize=8,
        frameon=False,
    )
    ax.set_title(f"{code}, site index {summary.site_index:g} m", fontsize=10, loc="left")
    ax.set_xlim(0, max_age)
    fig.savefig(path, dpi=DPI)
    plt.close(fig)
