"""Figures (matplotlib, Agg backend): plain, print-resolution, readable in greyscale.

Every figure is drawn at a fixed size (:data:`SIZES`, inches at :data:`DPI`), so its pixel size
is known in advance (docs/outputs.md lists them). Lines differ by grey level *and* dash
pattern; the map uses a colour scale whose lightness rises steadily (viridis), so it reads in
greyscale too.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # files only; never a window

import math  # noqa: E402

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pyproj  # noqa: E402
from matplotlib.colors import BoundaryNorm, ListedColormap  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.offsetbox import AnchoredOffsetbox, DrawingArea  # noqa: E402
from matplotlib.patches import Polygon  # noqa: E402
from matplotlib.text import Text  # noqa: E402
from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar  # noqa: E402

from yieldscape.growth import StockGrowth, YieldCurve, stock  # noqa: E402
from yieldscape.growth.rules import SiteSummary  # noqa: E402

DPI = 200
SIZES = {  # inches; at DPI 200: 1400 x 800, 1400 x 1000 and 1400 x 1200 pixels
    "chart": (7.0, 4.0),
    "panels": (7.0, 5.0),
    "map": (7.0, 6.0),
}


def save(fig, path: Path) -> None:  # noqa: ANN001
    fig.savefig(path, dpi=DPI)
    plt.close(fig)


def finish_time_chart(fig, ax, path: Path, ylabel: str, title: str, ncols: int = 1) -> None:  # noqa: ANN001
    """Axes over calendar years from 0 up, thousands separated, legend, title; saved."""
    ax.set_xlabel("year")
    ax.set_ylabel(ylabel)
    ax.set_ylim(bottom=0)
    ax.yaxis.set_major_formatter(lambda v, _: f"{v:,.0f}")
    ax.legend(frameon=False, fontsize=7 if ncols > 1 else 8, loc="lower left", ncols=ncols)
    ax.set_title(title, fontsize=10, loc="left")
    save(fig, path)


def period_steps(wood_flow: pd.DataFrame, column: str) -> tuple[np.ndarray, np.ndarray]:
    """x (years) and y for a step line holding each period's value over the period."""
    x = np.r_[wood_flow["start_year"].to_numpy(), wood_flow["end_year"].iloc[-1] + 1]
    y = wood_flow[column].to_numpy()
    return x, np.r_[y, y[-1]]


def harvest_figure(
    path: Path,
    wood_flow: pd.DataFrame,
    ltsy: dict[str, float],
    show_range: bool = False,
    failing_period: int | None = None,
) -> None:
    """Harvest per year by period, with the long-term sustained yield, the LP's harvest when
    there is one and, with ``show_range``, the range the flow policy allowed each period
    (from ``policy_required_m3`` up to ``policy_target_m3``: an even flow's band)."""
    fig, ax = plt.subplots(figsize=SIZES["chart"], layout="constrained")
    x, y = period_steps(wood_flow, "harvest_m3_per_year")
    ax.step(x, y, where="post", color="black", lw=2.0, label="harvest")
    if wood_flow["lp_bound_m3"].notna().all():
        lp = wood_flow.assign(lp=wood_flow["lp_bound_m3"] / (x[1] - x[0]))
        ax.step(
            *period_steps(lp, "lp"),
            where="post",
            color="0.5",
            lw=1.2,
            ls="-.",
            label="harvest LP (bounds the total)",
        )
    if show_range:
        per_year = wood_flow.assign(
            lo=wood_flow["policy_required_m3"] / (x[1] - x[0]),
            hi=wood_flow["policy_target_m3"] / (x[1] - x[0]),
        )
        ax.fill_between(
            x,
            period_steps(per_year, "lo")[1],
            period_steps(per_year, "hi")[1],
            step="post",
            color="0.88",
            zorder=0,
            label="range the flow band allows",
        )
    styles = {"at_culmination": ("0.3", "--"), "at_min_harvest_age": ("0.55", ":")}
    labels = {
        "at_culmination": "long-term sustained yield, MAI culmination",
        "at_min_harvest_age": "long-term sustained yield, minimum harvest ages",
    }
    for key, value in ltsy.items():
        colour, ls = styles[key]
        ax.axhline(value, color=colour, ls=ls, lw=1.3, label=f"{labels[key]} ({value:,.0f})")
    if failing_period is not None:
        row = wood_flow.iloc[failing_period - 1]
        ax.plot(
            row["start_year"] + (x[1] - x[0]) / 2,
            row["harvest_m3_per_year"],
            marker="v",
            color="black",
            ms=9,
            ls="none",
            label=f"first failing period ({failing_period})",
        )
    ax.set_xlim(x[0], x[-1])
    finish_time_chart(fig, ax, path, "harvest (m3/year)", "Harvest forecast", ncols=2)


def growing_stock_figure(
    path: Path, wood_flow: pd.DataFrame, regulated_hlb_m3: float | None = None
) -> None:
    """Growing stock on the whole forest and on the harvestable land base at period
    boundaries, with the stock of a regulated forest on the harvestable land."""
    years = np.r_[wood_flow["start_year"].to_numpy(), wood_flow["end_year"].iloc[-1] + 1]
    total = np.r_[
        wood_flow["growing_stock_start_m3"].to_numpy(), wood_flow["growing_stock_end_m3"].iloc[-1]
    ]
    hlb = np.r_[
        wood_flow["hlb_growing_stock_start_m3"].to_numpy(),
        wood_flow["hlb_growing_stock_end_m3"].iloc[-1],
    ]
    fig, ax = plt.subplots(figsize=SIZES["chart"], layout="constrained")
    ax.plot(years, total, color="black", lw=2.0, marker="o", ms=3, label="whole forest")
    ax.plot(
        years,
        hlb,
        color="0.45",
        lw=1.6,
        ls="--",
        marker="s",
        ms=3,
        label="harvestable land base",
    )
    if regulated_hlb_m3:
        ax.axhline(
            regulated_hlb_m3,
            color="0.3",
            ls=":",
            lw=1.3,
            label="regulated forest on the harvestable land base",
        )
    finish_time_chart(fig, ax, path, "growing stock (m3)", "Growing stock")


def _grid(n: int) -> tuple[int, int]:
    cols = min(n, 3)
    return -(-n // cols), cols


def age_class_figure(path: Path, age_classes: pd.DataFrame) -> None:
    """Area by age class at each report year, one panel a year (the same axes): harvestable
    area dark, the rest light, stacked."""
    years = list(dict.fromkeys(age_classes["year"]))
    per = (
        age_classes.groupby(["year", "age_from_years"], sort=True)[["area_ha", "harvestable_ha"]]
        .sum()
        .reset_index()
    )
    width = float(age_classes["age_to_years"].iloc[0] - age_classes["age_from_years"].iloc[0])
    rows, cols = _grid(len(years))
    fig, axes = plt.subplots(
        rows,
        cols,
        figsize=SIZES["panels"],
        layout="constrained",
        sharex=True,
        sharey=True,
        squeeze=False,
    )
    for ax, year in zip(axes.ravel(), years, strict=False):
        g = per[per["year"] == year]
        x = g["age_from_years"].to_numpy() + width / 2
        ax.bar(x, g["harvestable_ha"], width=width * 0.9, color="0.25", label="harvestable")
        ax.bar(
            x,
            g["area_ha"] - g["harvestable_ha"],
            width=width * 0.9,
            bottom=g["harvestable_ha"],
            color="0.75",
            label="other forest",
        )
        ax.set_title(str(year), fontsize=9, loc="left")
        ax.tick_params(labelsize=7)
    for ax in axes.ravel()[len(years) :]:
        ax.set_visible(False)
    for ax in axes[-1]:
        ax.set_xlabel("age (years)", fontsize=8)
    for ax in axes[:, 0]:
        ax.set_ylabel("area (ha)", fontsize=8)
    axes[0, 0].legend(frameon=False, fontsize=7)
    fig.suptitle("Age-class distribution", fontsize=10, x=0.01, ha="left")
    save(fig, path)


def cover_figure(path: Path, cover: pd.DataFrame, period_start_years: np.ndarray) -> None:
    """Each cover target's share by period against its target, one panel a target."""
    groups = list(cover.groupby(["zone", "rule"], sort=False))
    rows, cols = _grid(len(groups))
    fig, axes = plt.subplots(
        rows, cols, figsize=SIZES["panels"], layout="constrained", sharex=True, squeeze=False
    )
    for ax, ((zone, rule), g) in zip(axes.ravel(), groups, strict=False):
        years = period_start_years[g["period"].to_numpy() - 1]
        ax.plot(years, 100 * g["share"], color="black", lw=1.8, marker="o", ms=3, label="share")
        ax.axhline(100 * g["target"].iloc[0], color="0.4", ls="--", lw=1.3, label="target")
        missed = g[~g["met"].astype(bool)]
        if len(missed):
            ax.plot(
                period_start_years[missed["period"].to_numpy() - 1],
                100 * missed["share"],
                ls="none",
                marker="x",
                color="black",
                ms=7,
                label="missed",
            )
        where = "all zones" if zone == "*" else f"zone {zone}"  # '*': the zones together
        ax.set_title(f"{where}: {rule}", fontsize=8, loc="left")
        ax.set_ylim(0, max(100 * g["share"].max(), 100 * g["target"].iloc[0]) * 1.15 + 1)
        ax.tick_params(labelsize=7)
        ax.set_ylabel("share of area (%)", fontsize=8)
    for ax in axes.ravel()[len(groups) :]:
        ax.set_visible(False)
    axes[0, 0].legend(frameon=False, fontsize=7)
    fig.suptitle("Cover targets", fontsize=10, x=0.01, ha="left")
    save(fig, path)


UNIT_SYMBOLS = {"metre": "m", "kilometre": "km", "foot": "ft", "US survey foot": "US ft"}


def round_length_m(span_m: float) -> float:
    """A round length for a scale bar: 1, 2 or 5 x 10^k metres, the largest not above a
    fifth of ``span_m`` [m]."""
    target = span_m / 5
    step = 10.0 ** math.floor(math.log10(target))
    return next(m * step for m in (5, 2, 1) if m * step <= target)


def length_label(metres: float) -> str:
    return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"


def map_frame(crs: pyproj.CRS, extent: tuple[float, float, float, float]) -> tuple[float, float]:
    """At the centre of a map in a projected ``crs``: map units per metre on the ground along
    the x axis (the projection's scale factor over the unit's length), and the direction of
    true north in degrees clockwise from the map's up (the meridian convergence), both from
    pyproj's geodesics and transformations."""
    x0, x1, y0, y1 = extent
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    to_geo = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon, lat = to_geo.transform(cx, cy)
    dx = (x1 - x0) / 100
    lon2, lat2 = to_geo.transform(cx + dx, cy)
    ground_m = crs.get_geod().inv(lon, lat, lon2, lat2)[2]
    to_map = pyproj.Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    nx, ny = to_map.transform(lon, lat + 1e-3)
    return dx / ground_m, math.degrees(math.atan2(nx - cx, ny - cy))


def scale_bar_and_north(ax, crs: pyproj.CRS, extent: tuple[float, float, float, float]) -> str:  # noqa: ANN001
    """A scale bar (a round length in m or km, lower left) and a north arrow (upper right) on a
    map in ``crs``; returns a note for the caption where there can be no true scale bar."""
    north = 0.0
    note = ""
    if crs.is_geographic:
        # a degree of longitude shrinks with latitude: no one length holds across the map
        note = "No scale bar: the layer's CRS is geographic (degrees)."
    else:
        per_m, north = map_frame(crs, extent)
        length_m = round_length_m((extent[1] - extent[0]) / per_m)
        ax.add_artist(
            AnchoredSizeBar(
                ax.transData,
                length_m * per_m,
                length_label(length_m),
                "lower left",
                pad=0.4,
                borderpad=0.8,
                sep=3,
                frameon=True,
                size_vertical=0,
                fontproperties={"size": 7},
            )
        )
    ax.add_artist(north_arrow(north))
    return note


def north_arrow(north_deg: float) -> AnchoredOffsetbox:
    """A north arrow in a small box for the upper right corner: a shaft (``gid``
    'north_arrow', from tail to tip), its head and an N beyond the tip, turned
    ``north_deg`` clockwise from up. Drawn in points, so it keeps its shape on any map."""
    along = np.array([math.sin(math.radians(north_deg)), math.cos(math.radians(north_deg))])
    across = np.array([along[1], -along[0]])
    centre = np.array([12.0, 17.0])
    tail, tip = centre - 12 * along, centre + 12 * along
    area = DrawingArea(24, 42)
    area.add_artist(Line2D(*zip(tail, tip, strict=True), color="black", lw=1.2, gid="north_arrow"))
    head = [tip + 1.5 * along, tip - 5 * along + 3 * across, tip - 5 * along - 3 * across]
    area.add_artist(Polygon(head, closed=True, color="black"))
    area.add_artist(
        Text(*(tip + 9 * along), "N", ha="center", va="center", fontsize=8, fontweight="bold")
    )
    box = AnchoredOffsetbox("upper right", child=area, pad=0.2, borderpad=0.6, frameon=True)
    box.patch.set(alpha=0.9, edgecolor="none")
    return box


def map_axis_labels(crs: pyproj.CRS | None) -> tuple[str, str]:
    """Axis labels naming easting and northing (or longitude and latitude) with the unit and
    the CRS."""
    if crs is None:
        return "easting", "northing"
    unit = crs.axis_info[0].unit_name if crs.axis_info else ""
    if crs.is_geographic:
        return f"longitude (degrees), {crs.name}", "latitude (degrees)"
    symbol = UNIT_SYMBOLS.get(unit, unit)
    return f"easting ({symbol}), {crs.name}", f"northing ({symbol})"


def harvest_map_figure(
    path: Path,
    labels: np.ndarray,
    extent: tuple[float, float, float, float],
    first_period: np.ndarray,
    periods: int,
    start_years: np.ndarray,
    crs: pyproj.CRS | None = None,
) -> str:
    """Map of the first harvest period of each stand from a label raster (1 + stand index per
    cell, 0 outside): periods on a lightness scale, stands never cut light grey, with a scale
    bar and a north arrow when ``crs`` is known. Returns a note for the caption (why there is
    no scale bar), empty when there is none to make."""
    colours = plt.get_cmap("viridis")(np.linspace(0.0, 1.0, periods))
    # per label: white outside the stands, light grey never cut, else the period's colour
    table = np.vstack([[1.0, 1.0, 1.0, 1.0], np.empty((len(first_period), 4))])
    table[1:] = [0.85, 0.85, 0.85, 1.0]
    cut = first_period > 0
    table[1:][cut] = colours[first_period[cut] - 1]
    # colours as bytes, converted as matplotlib converts float RGBA (x * 255, truncated), so
    # the cells come out the same at an eighth of the memory (46 MB -> 6 MB at 1M stands)
    rgba = (table * 255).astype(np.uint8)
    fig, ax = plt.subplots(figsize=SIZES["map"], layout="constrained")
    ax.imshow(rgba[labels], extent=extent, interpolation="nearest")
    cmap = ListedColormap(colours)
    norm = BoundaryNorm(np.arange(0.5, periods + 1.5), cmap.N)
    bar = fig.colorbar(
        plt.cm.ScalarMappable(norm=norm, cmap=cmap), ax=ax, shrink=0.8, label="first harvest period"
    )
    ticks = np.arange(1, periods + 1, -(-periods // 10))
    bar.set_ticks(ticks, labels=[f"{t} ({start_years[t - 1]})" for t in ticks], fontsize=7)
    ax.set_aspect("equal")
    ax.ticklabel_format(useOffset=False, style="plain")
    xlabel, ylabel = map_axis_labels(crs)
    ax.set_xlabel(xlabel, fontsize=8)
    ax.set_ylabel(ylabel, fontsize=8)
    ax.tick_params(labelsize=7)
    note = (
        scale_bar_and_north(ax, crs, extent)
        if crs is not None
        else "No scale bar: the layer has no CRS."
    )
    ax.set_title(
        "First harvest period of each stand (light grey: not cut in the horizon)",
        fontsize=9,
        loc="left",
    )
    save(fig, path)
    return note


def monte_carlo_figure(path: Path, monte_carlo: pd.DataFrame, wood_flow: pd.DataFrame) -> None:
    """Fan charts over the disturbance replicates, one panel each for harvest and growing
    stock: the 10th-90th percentile band, the median, and the expected-value schedule's
    target (harvest) or stock. Where every replicate met every target the harvest band is a
    line and the spread shows in the stock panel, which is why both are drawn."""
    L = float(wood_flow["end_year"].iloc[0] - wood_flow["start_year"].iloc[0] + 1)
    mc = monte_carlo.assign(
        start_year=wood_flow["start_year"].to_numpy(),
        end_year=wood_flow["end_year"].to_numpy(),
        expected_stock_m3=wood_flow["growing_stock_end_m3"].to_numpy(),
    )
    for col in ("p10_m3", "p50_m3", "p90_m3", "target_m3"):
        mc[col + "_y"] = mc[col] / L
    fig, (top, bottom) = plt.subplots(
        2, 1, sharex=True, figsize=SIZES["panels"], layout="constrained"
    )
    panels = (
        (
            top,
            ("p10_m3_y", "p50_m3_y", "p90_m3_y", "target_m3_y"),
            "harvest (m3/year)",
            "target (expected-value schedule)",
        ),
        (
            bottom,
            (
                "growing_stock_p10_m3",
                "growing_stock_p50_m3",
                "growing_stock_p90_m3",
                "expected_stock_m3",
            ),
            "growing stock, end of period (m3)",
            "expected-value schedule",
        ),
    )
    for ax, (p10, p50, p90, ref), ylabel, ref_label in panels:
        x, lo = period_steps(mc, p10)
        _, hi = period_steps(mc, p90)
        ax.fill_between(x, lo, hi, step="post", color="0.8", label="10th to 90th percentile")
        ax.step(*period_steps(mc, p50), where="post", color="black", lw=1.8, label="median")
        ax.step(*period_steps(mc, ref), where="post", color="0.4", ls="--", lw=1.3, label=ref_label)
        ax.set_ylabel(ylabel)
        top_y = float(np.nanmax([hi.max(), period_steps(mc, ref)[1].max()]))
        ax.set_ylim(0, top_y * 1.25 if top_y > 0 else 1.0)  # room above the lines for the legend
        ax.yaxis.set_major_formatter(lambda v, _: f"{v:,.0f}")
        ax.legend(frameon=False, fontsize=7, loc="upper left", ncols=3)
    bottom.set_xlabel("year")
    top.set_title("Harvest and growing stock under random disturbance", fontsize=10, loc="left")
    save(fig, path)


def curve_figure(
    path: Path, code: str, curve: YieldCurve, summary: SiteSummary, max_age: float
) -> None:
    """Volume, MAI and CAI against age at one site, with the rotation ages marked."""
    t = np.linspace(0.5, max_age, 600)
    si = np.full(t.shape, summary.site_index)
    v = curve.volume_m3_ha(t, si)
    fig, ax = plt.subplots(figsize=SIZES["chart"], layout="constrained")
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
        # labels alternate sides of their lines, and every second pair sits higher up, so
        # that close ages stay readable
        ax.text(
            age,
            ax.get_ylim()[1] * (0.02 if (n // 2) % 2 == 0 else 0.5),
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
    save(fig, path)


STOCK_TITLES = {
    "logistic": "logistic: g = r S (1 - S/K)",
    "minimum": "minimum viable stock: g = r (S - m)(1 - S/K)",
    "threshold": "critical depensation: g = r S (S/m - 1)(1 - S/K)",
    "depensation": "depensation: g = r (S/K) S (1 - S/K)",
}
_STYLES = ("-", "--", "-.", ":")


def stock_shapes_figure(path: Path, curves: dict[str, StockGrowth]) -> None:
    """Growth g(S) against stock S of each stock-growth species, one panel per shape of
    :data:`yieldscape.growth.stock.SHAPES` (all four, side by side), at the reference site,
    with the MSY (a cross) and the equilibria (filled: stable; open: unstable) marked. A shape
    no species follows is drawn faintly with K = 1, r = 1, m = 0.25 (no unit), so the four
    can be told apart."""
    fig, axes = plt.subplots(2, 2, figsize=SIZES["panels"], layout="constrained")
    for ax, shape in zip(axes.ravel(), stock.SHAPES, strict=True):
        mine = {c: cv for c, cv in curves.items() if cv.shape == shape}
        if not mine:
            m = 0.25 if shape in stock.WITH_MINIMUM else None
            s = np.linspace(0.0, 1.05, 400)
            ax.plot(s, stock.growth(s, 1.0, 1.0, m, shape), color="0.7", lw=1.2, ls="--")
            ax.set_xlabel("stock S / K")
            ax.set_ylabel("g(S) / (r K)")
            ax.text(0.02, 0.04, "no species follows it", transform=ax.transAxes, fontsize=7)
        for n, (code, cv) in enumerate(mine.items()):
            k = cv.capacity_m3_ha
            s = np.linspace(0.0, 1.05 * k, 600)
            style = _STYLES[n % len(_STYLES)]
            ax.plot(s, cv.growth(s), color="black", lw=1.4, ls=style, label=code)
            s_msy, g_msy = cv.msy()
            ax.plot([float(s_msy)], [float(g_msy)], "x", color="black", ms=6)
            ax.annotate(
                f"MSY {float(g_msy):,.1f} at {float(s_msy):,.0f}",
                (float(s_msy), float(g_msy)),
                fontsize=6,
                xytext=(3, 3),
                textcoords="offset points",
            )
            for e in cv.equilibria():
                face = "black" if e.stable else "white"
                ax.plot([e.stock], [0.0], "o", ms=5, mfc=face, mec="black")
            ax.set_xlabel("stock S (m3/ha)")
            ax.set_ylabel("growth g(S) (m3/ha/yr)")
        if mine:
            ax.legend(frameon=False, fontsize=7, loc="lower left")
        ax.axhline(0.0, color="0.5", lw=0.6)
        ax.margins(y=0.15)  # room for the MSY label above the peak
        ax.set_title(STOCK_TITLES[shape], fontsize=8, loc="left")
    fig.suptitle(
        "Stock growth by shape: MSY (x), stable (filled) and unstable (open) equilibria",
        fontsize=9,
    )
    save(fig, path)
