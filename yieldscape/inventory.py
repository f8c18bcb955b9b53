"""The stand table: a checked inventory with unit-named columns and areas in hectares.

:func:`prepare_inventory` takes the layer as read (its own field names) and the scenario, runs
every check, and returns an :class:`Inventory` whose frame has the columns ``stand_id``,
``species``, ``site_index`` [m], ``age_years``, ``zone``, ``area_ha`` and the geometry, followed
by the layer's other attributes. Nothing here opens a file.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from yieldscape.config import MAX_AGE_YEARS, Scenario
from yieldscape.errors import InventoryError
from yieldscape.geometry import invalid_mask, repair

STANDARD_COLUMNS = ("stand_id", "species", "site_index", "age_years", "zone", "area_ha")
AGE_CLASS_YEARS = 20
_SHOW = 5  # offending rows quoted in a message
# A site index is a height at a base age: the tallest trees measured are about 116 m (from
# memory), and site indices above 50 to 60 m are rare even on the best sites.
MAX_SITE_INDEX_M = 150.0
USUAL_SITE_INDEX_M = 60.0
SLIVER_HA = 0.01  # smaller stands are usually slivers left by a GIS overlay (100 m2)


@dataclass(frozen=True)
class CheckReport:
    """What the checks found and did: counts, repairs, and notes for the user."""

    stands: int
    area_ha: float
    crs: str
    area_method: str
    repaired_geometries: int = 0
    notes: tuple[str, ...] = ()
    warnings: tuple[str, ...] = ()  # possible but unusual input, for the user to look at
    area_by_species_ha: dict[str, float] = field(default_factory=dict)
    area_by_age_class_ha: dict[str, float] = field(default_factory=dict)

    def summary(self) -> str:
        """A few lines for the terminal."""
        lines = [
            f"{self.stands} stands, {self.area_ha:,.1f} ha, CRS {self.crs} "
            f"(areas: {self.area_method})",
        ]
        if self.repaired_geometries:
            lines.append(f"repaired {self.repaired_geometries} invalid geometries (make_valid)")
        lines += list(self.notes)
        lines.append("area by species (ha):")
        lines += [f"  {k:<16} {v:>12,.1f}" for k, v in self.area_by_species_ha.items()]
        lines.append(f"area by age class ({AGE_CLASS_YEARS}-year classes, ha):")
        lines += [f"  {k:<16} {v:>12,.1f}" for k, v in self.area_by_age_class_ha.items()]
        return "\n".join(lines)


@dataclass(frozen=True)
class Inventory:
    """A checked stand table (GeoDataFrame) and the report of its checks."""

    stands: gpd.GeoDataFrame
    report: CheckReport


SiteFill = Callable[[np.ndarray, pyproj.CRS], np.ndarray]


def prepare_inventory(
    frame: gpd.GeoDataFrame,
    scenario: Scenario,
    where: str,
    strict: bool = False,
    site_fill: SiteFill | None = None,
) -> Inventory:
    """Check a stand layer against the scenario and build the standard stand table.

    ``where`` names the file and layer in messages. With ``strict`` an invalid geometry is an
    error; otherwise it is repaired with ``shapely.make_valid`` and counted in the report.
    ``site_fill(geoms, crs)`` gives a raster site index per stand (NaN where it has none); it
    fills missing values, or replaces all with ``inventory.raster_wins``.
    """
    fields = scenario.inventory.fields
    if len(frame) == 0:
        raise InventoryError(f"{where}: the layer is empty (no stands)")
    mapping = {
        "stand_id": fields.stand_id,
        "species": fields.species,
        "site_index": fields.site_index,
        "age": fields.age,
    }
    if fields.zone is not None:
        mapping["zone"] = fields.zone
    have = [c for c in frame.columns if c != frame.geometry.name]
    for ours, theirs in mapping.items():
        if theirs not in frame.columns:
            raise InventoryError(
                f"{where}: field {theirs!r} (inventory.fields.{ours}) is not in the layer; "
                f"its fields are: {', '.join(have)}"
            )

    row = np.arange(1, len(frame) + 1)  # 1-based feature position, as GIS viewers count
    ids = frame[fields.stand_id]
    _fail_rows(ids.isna().to_numpy(), row, None, where, f"field {fields.stand_id!r}: null id")
    dup = ids.duplicated(keep=False).to_numpy()
    _fail_rows(dup, row, ids, where, f"field {fields.stand_id!r}: duplicate id")

    crs = _crs(frame, scenario, where)
    geoms = geoms_in = frame.geometry.to_numpy()
    empty = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    _fail_rows(empty, row, ids, where, "empty or missing geometry")
    gtype = shapely.get_type_id(geoms)
    polygonal = (gtype == 3) | (gtype == 6)  # Polygon, MultiPolygon
    _fail_rows(
        ~polygonal,
        row,
        ids,
        where,
        "geometry is not a polygon",
        values=shapely.get_type_id(geoms),
        fmt=_type_name,
    )
    invalid = invalid_mask(geoms)
    repaired = int(invalid.sum())
    notes: list[str] = []
    warnings: list[str] = []
    if repaired:
        if strict:
            _fail_rows(
                invalid,
                row,
                ids,
                where,
                "invalid geometry (--strict)",
                values=shapely.is_valid_reason(geoms),
                fmt=str,
            )
        geoms = repair(geoms, invalid)
        lost = shapely.is_empty(geoms) | (shapely.area(geoms) <= 0)
        _fail_rows(lost, row, ids, where, "invalid geometry with no area left after repair")
        warnings.append(
            f"{where}: {_rows_text(invalid, row, ids, shapely.is_valid_reason(geoms_in), str)}: "
            f"{repaired} invalid geometries repaired with make_valid (their areas are those "
            "of the repaired shapes; mend them in the source, or use --strict to reject them)"
        )

    area_ha, method = _area_ha(geoms, crs)
    zero = ~(area_ha > 0)
    _fail_rows(zero, row, ids, where, "polygon has zero area")
    _fail_rows(~np.isfinite(area_ha), row, ids, where, "polygon area is not finite", values=area_ha)
    sliver = area_ha < SLIVER_HA
    if sliver.any():
        warnings.append(
            f"{where}: {_rows_text(sliver, row, ids, area_ha, lambda v: f'{v:.3g} ha')}: "
            f"{int(sliver.sum())} stands are smaller than {SLIVER_HA:g} ha (slivers of a GIS "
            "overlay?); they are kept, and cut only as whole stands"
        )

    age = _numeric(frame[fields.age], fields.age, row, ids, where)
    _fail_rows(np.isnan(age), row, ids, where, f"field {fields.age!r}: null age")
    _fail_rows(
        age < 0,
        row,
        ids,
        where,
        f"field {fields.age!r}: negative age; ages must be >= 0",
        values=age,
    )
    _fail_rows(np.isinf(age), row, ids, where, f"field {fields.age!r}: not a finite number")
    _fail_rows(
        age > MAX_AGE_YEARS,
        row,
        ids,
        where,
        f"field {fields.age!r}: age above {MAX_AGE_YEARS:g} years, older than any tree known",
        values=age,
    )
    oldest = scenario.growth.max_age_years
    old = age > oldest
    if old.any():
        warnings.append(
            f"{where}: {_rows_text(old, row, ids, age)}: {int(old.sum())} stands are older "
            f"than growth.max_age_years = {oldest:g}, the oldest age the curves are searched "
            f"to; check field {fields.age!r}, or raise growth.max_age_years if such ages are real"
        )

    species = frame[fields.species]
    _fail_rows(
        species.isna().to_numpy(), row, ids, where, f"field {fields.species!r}: null species"
    )
    species = species.astype(str)
    known = set(scenario.species)
    unknown = ~species.isin(known).to_numpy()
    if unknown.any():
        codes = sorted(set(species[unknown]))
        raise InventoryError(
            f"{where}, field {fields.species!r}: {int(unknown.sum())} stands have species not in "
            f"the scenario: {', '.join(map(repr, codes[:_SHOW]))}"
            f"{' ...' if len(codes) > _SHOW else ''} (first at row {row[unknown][0]}, stand "
            f"{_plain(ids.iloc[int(np.flatnonzero(unknown)[0])])!r}); the scenario has "
            f"[species] {', '.join(sorted(known))}"
        )

    si = _numeric(frame[fields.site_index], fields.site_index, row, ids, where)
    source = np.full(len(si), "layer", dtype=object)
    hint = ""
    if site_fill is not None:
        raster_si = site_fill(geoms, crs)
        use = np.isfinite(raster_si) & (scenario.inventory.raster_wins | np.isnan(si))
        si = np.where(use, raster_si, si)
        source[use] = "raster"
        source[np.isnan(si)] = "none"
        hint = " and no site index raster value"
        how = "raster wins" if scenario.inventory.raster_wins else "gaps filled"
        notes.append(
            f"site index from {scenario.inventory.from_raster.site_index}: "
            f"{int(use.sum())} stands ({how})"
        )
    _fail_rows(np.isnan(si), row, ids, where, f"field {fields.site_index!r}: null site index{hint}")
    _fail_rows(
        si <= 0, row, ids, where, f"field {fields.site_index!r}: site index must be > 0", values=si
    )
    _fail_rows(np.isinf(si), row, ids, where, f"field {fields.site_index!r}: not a finite number")
    _fail_rows(
        si > MAX_SITE_INDEX_M,
        row,
        ids,
        where,
        f"field {fields.site_index!r}: site index above {MAX_SITE_INDEX_M:g} m, taller than any "
        "tree; site index is in metres",
        values=si,
    )
    tall = si > USUAL_SITE_INDEX_M
    if tall.any():
        warnings.append(
            f"{where}: {_rows_text(tall, row, ids, si)}: {int(tall.sum())} stands have a site "
            f"index above {USUAL_SITE_INDEX_M:g} m, rare even on the best sites; site index "
            f"is in metres (field {fields.site_index!r} in feet?)"
        )
    for code, cfg in scenario.species.items():
        mine = (species == code).to_numpy()
        lo = -np.inf if cfg.site_index_min_m is None else cfg.site_index_min_m
        hi = np.inf if cfg.site_index_max_m is None else cfg.site_index_max_m
        out = mine & ((si < lo) | (si > hi))
        _fail_rows(
            out,
            row,
            ids,
            where,
            f"field {fields.site_index!r}: site index outside the range of the "
            f"{code!r} curve [{cfg.site_index_min_m}, {cfg.site_index_max_m}] m "
            f"(species.{code}.site_index_min_m / site_index_max_m)",
            values=si,
        )

    if fields.zone is not None:
        zone = frame[fields.zone].astype(object).where(frame[fields.zone].notna(), None)
        zone = zone.map(lambda z: None if z is None else str(z))
    else:
        zone = pd.Series([None] * len(frame), dtype=object)

    table = pd.DataFrame(
        {
            "stand_id": ids.to_numpy(),
            "species": species.to_numpy(dtype=object),
            "site_index": si,
            "age_years": age,
            "zone": zone.to_numpy(dtype=object),
            "area_ha": area_ha,
            "site_index_source": source,
        }
    )
    others = [c for c in have if c not in mapping.values()]
    for col in others:
        name = col if col not in table.columns else f"input_{col}"
        table[name] = frame[col].to_numpy()
    stands = gpd.GeoDataFrame(table, geometry=gpd.GeoSeries(geoms, crs=crs).values, crs=crs)

    by_species = stands.groupby("species")["area_ha"].sum()
    cls = (np.floor(age / AGE_CLASS_YEARS) * AGE_CLASS_YEARS).astype(int)
    by_class = pd.Series(area_ha).groupby(cls).sum().sort_index()
    report = CheckReport(
        stands=len(stands),
        area_ha=float(area_ha.sum()),
        crs=crs.to_string(),
        area_method=method,
        repaired_geometries=repaired,
        notes=tuple(notes),
        warnings=tuple(warnings),
        area_by_species_ha={str(k): float(v) for k, v in by_species.items()},
        area_by_age_class_ha={
            f"{k}-{k + AGE_CLASS_YEARS - 1}": float(v) for k, v in by_class.items()
        },
    )
    return Inventory(stands, report)


def _crs(frame: gpd.GeoDataFrame, scenario: Scenario, where: str) -> pyproj.CRS:
    stated = scenario.inventory.crs
    if frame.crs is None:
        if stated is None:
            raise InventoryError(
                f"{where}: the layer has no CRS; state it with inventory.crs (e.g. 'EPSG:32633')"
            )
        try:
            return pyproj.CRS.from_user_input(stated)
        except pyproj.exceptions.CRSError:
            raise InventoryError(
                f"{where}: inventory.crs = {stated!r} is not a CRS PROJ knows"
            ) from None
    if stated is not None and pyproj.CRS.from_user_input(stated) != frame.crs:
        raise InventoryError(
            f"{where}: the layer's CRS is {frame.crs.to_string()} but inventory.crs says "
            f"{stated!r}; inventory.crs is only for layers without one, remove it"
        )
    return pyproj.CRS.from_user_input(frame.crs)


def _area_ha(geoms: np.ndarray, crs: pyproj.CRS) -> tuple[np.ndarray, str]:
    """Areas [ha]: planar in a projected CRS, equal-area (LAEA) for a geographic one."""
    if crs.is_geographic:
        # The ellipsoidal Lambert azimuthal equal-area projection keeps areas exact on the
        # ellipsoid; centring it on the layer keeps edges close to geodesics.
        x0, y0, x1, y1 = shapely.total_bounds(geoms)
        laea = pyproj.CRS.from_proj4(
            f"+proj=laea +lat_0={(y0 + y1) / 2} +lon_0={(x0 + x1) / 2} +ellps=WGS84 +units=m"
        )
        projected = gpd.GeoSeries(geoms, crs=crs).to_crs(laea).to_numpy()
        return shapely.area(projected) / 1e4, "equal-area projection (LAEA) of a geographic CRS"
    unit = crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0
    name = crs.axis_info[0].unit_name if crs.axis_info else "metre"
    return shapely.area(geoms) * unit**2 / 1e4, f"planar, CRS unit {name}"


def _numeric(col: pd.Series, name: str, row: np.ndarray, ids: pd.Series, where: str) -> np.ndarray:
    values = pd.to_numeric(col, errors="coerce")
    bad = values.isna().to_numpy() & col.notna().to_numpy()
    _fail_rows(bad, row, ids, where, f"field {name!r}: not a number", values=col, fmt=repr)
    return values.to_numpy(dtype=np.float64)


def _plain(value: object) -> object:
    """numpy scalars as plain Python values, so messages read 12, not np.int64(12)."""
    return value.item() if isinstance(value, np.generic) else value


def _type_name(type_id: object) -> str:
    names = {
        0: "Point",
        1: "LineString",
        2: "LinearRing",
        4: "MultiPoint",
        5: "MultiLineString",
        7: "GeometryCollection",
    }
    return names.get(int(type_id), str(type_id))  # type: ignore[call-overload]


def _fail_rows(
    bad: np.ndarray,
    row: np.ndarray,
    ids: pd.Series | None,
    where: str,
    what: str,
    values: object = None,
    fmt=lambda v: f"{v:g}",
) -> None:
    """Raise an InventoryError quoting the first offending rows, if any row is bad."""
    bad = np.asarray(bad, dtype=bool)
    if not bad.any():
        return
    quoted = _rows_text(bad, row, ids, values, fmt)
    raise InventoryError(f"{where}: {what} in {int(bad.sum())} stands: {quoted}")


def _rows_text(
    bad: np.ndarray,
    row: np.ndarray,
    ids: pd.Series | None,
    values: object = None,
    fmt=lambda v: f"{v:g}",
) -> str:
    """The first offending rows, as 'row 3 (stand 12): value; ...'."""
    idx = np.flatnonzero(bad)
    quoted = []
    for i in idx[:_SHOW]:
        text = f"row {row[i]}"
        if ids is not None:
            text += f" (stand {_plain(ids.iloc[i])!r})"
        if values is not None:
            v = values.iloc[i] if isinstance(values, pd.Series) else np.asarray(values)[i]
            text += f": {fmt(v)}"
        quoted.append(text)
    more = f" and {len(idx) - _SHOW} more" if len(idx) > _SHOW else ""
    return "; ".join(quoted) + more
