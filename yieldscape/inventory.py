"""The stand table: a checked inventory with unit-named columns and areas in hectares.

:func:`prepare_inventory` takes the layer as read (its own field names) and the scenario, runs
every check, and returns an :class:`Inventory` whose frame has the columns ``stand_id``,
``species``, ``site_index`` [m], ``age_years``, ``zone``, ``unit`` (the management unit),
``area_ha`` and the geometry, followed
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
from yieldscape.expressions import evaluate_where
from yieldscape.geometry import invalid_mask, repair

STANDARD_COLUMNS = (
    "stand_id",
    "species",
    "analysis_unit",
    "site_index",
    "age_years",
    "zone",
    "unit",
    "area_ha",
)
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


@dataclass
class _Rows:
    """The rows of the layer being checked, for messages: 1-based feature positions (as GIS
    viewers count), stand ids, the file and layer; and the warnings found so far."""

    row: np.ndarray
    ids: pd.Series | None
    where: str
    warnings: list[str] = field(default_factory=list)

    def fail(self, bad: np.ndarray, what: str, values: object = None, fmt=lambda v: f"{v:g}"):
        _fail_rows(bad, self.row, self.ids, self.where, what, values, fmt)

    def warn(self, odd: np.ndarray, values: object, text: str, fmt=lambda v: f"{v:g}") -> None:
        """A warning quoting the first rows of ``odd`` with their values, then ``text``."""
        if odd.any():
            quoted = _rows_text(odd, self.row, self.ids, values, fmt)
            self.warnings.append(f"{self.where}: {quoted}: {int(odd.sum())} {text}")


def prepare_inventory(
    frame: gpd.GeoDataFrame,
    scenario: Scenario,
    where: str,
    strict: bool = False,
    site_fill: SiteFill | None = None,
) -> Inventory:
    """Check a stand layer against the scenario and build the standard stand table.

    ``where`` names the file and layer in messages. With ``strict`` an invalid geometry is an
    error; otherwise it is repaired with ``shapely.make_valid`` and a warning names it.
    ``site_fill(geoms, crs)`` gives a raster site index per stand (NaN where it has none); it
    fills missing values, or replaces all with ``inventory.raster_wins``.
    """
    fields = scenario.inventory.fields
    if len(frame) == 0:
        raise InventoryError(f"{where}: the layer is empty (no stands)")
    mapping = _mapped_fields(frame, fields, where)
    rows = _Rows(np.arange(1, len(frame) + 1), None, where)
    ids = frame[fields.stand_id]
    rows.fail(ids.isna().to_numpy(), f"field {fields.stand_id!r}: null id")
    rows.ids = ids
    rows.fail(ids.duplicated(keep=False).to_numpy(), f"field {fields.stand_id!r}: duplicate id")
    crs = _crs(frame, scenario, where)
    geoms, repaired = _geometries(frame.geometry.to_numpy(), rows, strict)
    area_ha, method = _areas(geoms, crs, rows)
    age = _ages(frame[fields.age], fields.age, rows, scenario.growth.max_age_years)
    rows.fail(frame[fields.species].isna().to_numpy(), f"field {fields.species!r}: null species")
    species = frame[fields.species].astype(str)
    if fields.unit is not None:
        rows.fail(frame[fields.unit].isna().to_numpy(), f"field {fields.unit!r}: null unit")
    unit = _analysis_units(frame, mapping, species, age, scenario, where)
    _known_codes(unit, fields.species, rows, scenario)
    notes: list[str] = []
    fill = None if site_fill is None else site_fill(geoms, crs)
    si, source = _site_index(frame[fields.site_index], fields.site_index, rows, fill, scenario)
    if fill is not None:
        how = "raster wins" if scenario.inventory.raster_wins else "gaps filled"
        notes.append(
            f"site index from {scenario.inventory.from_raster.site_index}: "
            f"{int((source == 'raster').sum())} stands ({how})"
        )
    _site_ranges(si, unit, fields.site_index, rows, scenario)
    table = pd.DataFrame(
        {
            "stand_id": ids.to_numpy(),
            "species": species.to_numpy(dtype=object),
            "analysis_unit": unit.to_numpy(dtype=object),
            "site_index": si,
            "age_years": age,
            "zone": _zones(frame, fields.zone),
            "unit": _zones(frame, fields.unit),
            "area_ha": area_ha,
            "site_index_source": source,
        }
    )
    ours = {c.lower() for c in table.columns} | {"geometry"}
    for col in [c for c in frame.columns if c != frame.geometry.name]:
        if col not in mapping.values():  # the layer's other attributes follow ours
            # a GeoPackage's field names ignore case: UNIT would clash with our unit
            name = col if col.lower() not in ours else f"input_{col}"
            table[name] = frame[col].to_numpy()
    stands = gpd.GeoDataFrame(table, geometry=gpd.GeoSeries(geoms, crs=crs).values, crs=crs)
    report = _report(stands, crs, method, repaired, notes, rows.warnings)
    return Inventory(stands, report)


def _mapped_fields(frame: gpd.GeoDataFrame, fields, where: str) -> dict[str, str]:  # noqa: ANN001
    """Our names -> the layer's, every one present in the layer."""
    mapping = {
        "stand_id": fields.stand_id,
        "species": fields.species,
        "site_index": fields.site_index,
        "age": fields.age,
    }
    if fields.zone is not None:
        mapping["zone"] = fields.zone
    if fields.unit is not None:
        mapping["unit"] = fields.unit
    have = [c for c in frame.columns if c != frame.geometry.name]
    for ours, theirs in mapping.items():
        if theirs not in frame.columns:
            raise InventoryError(
                f"{where}: field {theirs!r} (inventory.fields.{ours}) is not in the layer; "
                f"its fields are: {', '.join(have)}"
            )
    return mapping


def _geometries(geoms: np.ndarray, rows: _Rows, strict: bool) -> tuple[np.ndarray, int]:
    """Present, polygonal and valid geometries (invalid ones repaired, or an error with
    ``strict``), and how many were repaired."""
    empty = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    rows.fail(empty, "empty or missing geometry")
    gtype = shapely.get_type_id(geoms)
    polygonal = (gtype == 3) | (gtype == 6)  # Polygon, MultiPolygon
    rows.fail(~polygonal, "geometry is not a polygon", values=gtype, fmt=_type_name)
    invalid = invalid_mask(geoms)
    repaired = int(invalid.sum())
    if not repaired:
        return geoms, 0
    reasons = shapely.is_valid_reason(geoms)
    if strict:
        rows.fail(invalid, "invalid geometry (--strict)", values=reasons, fmt=str)
    fixed = repair(geoms, invalid)
    lost = shapely.is_empty(fixed) | (shapely.area(fixed) <= 0)
    rows.fail(lost, "invalid geometry with no area left after repair")
    rows.warn(
        invalid,
        reasons,
        "invalid geometries repaired with make_valid (their areas are those of the repaired "
        "shapes; mend them in the source, or use --strict to reject them)",
        fmt=str,
    )
    return fixed, repaired


def _areas(geoms: np.ndarray, crs: pyproj.CRS, rows: _Rows) -> tuple[np.ndarray, str]:
    area_ha, method = _area_ha(geoms, crs)
    rows.fail(~(area_ha > 0), "polygon has zero area")
    rows.fail(~np.isfinite(area_ha), "polygon area is not finite", values=area_ha)
    rows.warn(
        area_ha < SLIVER_HA,
        area_ha,
        f"stands are smaller than {SLIVER_HA:g} ha (slivers of a GIS overlay?); they are kept, "
        "and cut only as whole stands",
        fmt=lambda v: f"{v:.3g} ha",
    )
    return area_ha, method


def _ages(col: pd.Series, name: str, rows: _Rows, max_age_years: float) -> np.ndarray:
    """Ages: numbers, present, finite, >= 0 and no older than any tree; a warning beyond the
    ages the curves are searched to."""
    age = _numeric(col, name, rows.row, rows.ids, rows.where)
    rows.fail(np.isnan(age), f"field {name!r}: null age")
    rows.fail(age < 0, f"field {name!r}: negative age; ages must be >= 0", values=age)
    rows.fail(np.isinf(age), f"field {name!r}: not a finite number")
    rows.fail(
        age > MAX_AGE_YEARS,
        f"field {name!r}: age above {MAX_AGE_YEARS:g} years, older than any tree known",
        values=age,
    )
    rows.warn(
        age > max_age_years,
        age,
        f"stands are older than growth.max_age_years = {max_age_years:g}, the oldest age the "
        f"curves are searched to; check field {name!r}, or raise growth.max_age_years if such "
        "ages are real",
    )
    return age


def _analysis_units(
    frame: gpd.GeoDataFrame,
    mapping: dict[str, str],
    species: pd.Series,
    age: np.ndarray,
    scenario: Scenario,
    where: str,
) -> pd.Series:
    """The code each stand grows as: that of the first ``[[inventory.analysis_units]]`` rule
    it matches, else its species field's. Rules see the layer's fields and the standard names
    (``species`` as text, ``age_years``)."""
    units = scenario.inventory.analysis_units
    code = species.copy()
    if not units:
        return code
    fields = {c: frame[c] for c in frame.columns if c != frame.geometry.name}
    fields |= {"species": species, "age_years": pd.Series(age, index=frame.index)}
    for ours, theirs in mapping.items():
        fields.setdefault(ours, frame[theirs])
    taken = np.zeros(len(frame), dtype=bool)
    for n, u in enumerate(units, start=1):  # in order: the first match wins
        hit = evaluate_where(u.where, fields, f"{where}: [[inventory.analysis_units]] #{n}")
        code[hit & ~taken] = u.species
        taken |= hit
    return code


def _known_codes(code: pd.Series, name: str, rows: _Rows, scenario: Scenario) -> None:
    """Every stand's code (its analysis unit, else its species) has a [species.<CODE>] table."""
    known = set(scenario.species)
    unknown = ~code.isin(known).to_numpy()
    if unknown.any():
        codes = sorted(set(code[unknown]))
        first = int(np.flatnonzero(unknown)[0])
        assert rows.ids is not None
        raise InventoryError(
            f"{rows.where}, field {name!r}: {int(unknown.sum())} stands have species not in "
            f"the scenario: {', '.join(map(repr, codes[:_SHOW]))}"
            f"{' ...' if len(codes) > _SHOW else ''} (first at row {rows.row[first]}, stand "
            f"{_plain(rows.ids.iloc[first])!r}); the scenario has "
            f"[species] {', '.join(sorted(known))}"
        )


def _site_index(
    col: pd.Series, name: str, rows: _Rows, fill: np.ndarray | None, scenario: Scenario
) -> tuple[np.ndarray, np.ndarray]:
    """Site indices (the layer's, filled or replaced from a raster's ``fill``) and where each
    came from: present, finite, > 0 and no taller than any tree; a warning above the usual."""
    si = _numeric(col, name, rows.row, rows.ids, rows.where)
    source = np.full(len(si), "layer", dtype=object)
    hint = ""
    if fill is not None:
        use = np.isfinite(fill) & (scenario.inventory.raster_wins | np.isnan(si))
        si = np.where(use, fill, si)
        source[use] = "raster"
        source[np.isnan(si)] = "none"
        hint = " and no site index raster value"
    rows.fail(np.isnan(si), f"field {name!r}: null site index{hint}")
    rows.fail(si <= 0, f"field {name!r}: site index must be > 0", values=si)
    rows.fail(np.isinf(si), f"field {name!r}: not a finite number")
    rows.fail(
        si > MAX_SITE_INDEX_M,
        f"field {name!r}: site index above {MAX_SITE_INDEX_M:g} m, taller than any tree; site "
        "index is in metres",
        values=si,
    )
    rows.warn(
        si > USUAL_SITE_INDEX_M,
        si,
        f"stands have a site index above {USUAL_SITE_INDEX_M:g} m, rare even on the best "
        f"sites; site index is in metres (field {name!r} in feet?)",
    )
    return si, source


def _site_ranges(
    si: np.ndarray, code: pd.Series, name: str, rows: _Rows, scenario: Scenario
) -> None:
    """Each stand's site index inside its code's curve range, where one is given."""
    for c, cfg in scenario.species.items():  # per code
        mine = (code == c).to_numpy()
        lo = -np.inf if cfg.site_index_min_m is None else cfg.site_index_min_m
        hi = np.inf if cfg.site_index_max_m is None else cfg.site_index_max_m
        rows.fail(
            mine & ((si < lo) | (si > hi)),
            f"field {name!r}: site index outside the range of the "
            f"{c!r} curve [{cfg.site_index_min_m}, {cfg.site_index_max_m}] m "
            f"(species.{c}.site_index_min_m / site_index_max_m)",
            values=si,
        )


def _zones(frame: gpd.GeoDataFrame, field_name: str | None) -> np.ndarray:
    """Zone (or unit) names as text (None where missing, or without the field)."""
    if field_name is None:
        return np.array([None] * len(frame), dtype=object)
    # each distinct value made text once (a str() per stand took 0.6 s at 1M), missing: None
    codes, uniques = pd.factorize(frame[field_name], use_na_sentinel=True)
    texts = [str(z) for z in pd.Series(uniques, dtype=object)] + [None]
    return np.array(texts, dtype=object)[codes]


def _report(
    stands: gpd.GeoDataFrame,
    crs: pyproj.CRS,
    method: str,
    repaired: int,
    notes: list[str],
    warnings: list[str],
) -> CheckReport:
    area_ha = stands["area_ha"].to_numpy()
    by_species = stands.groupby("species")["area_ha"].sum()
    age = stands["age_years"].to_numpy()
    cls = (np.floor(age / AGE_CLASS_YEARS) * AGE_CLASS_YEARS).astype(int)
    by_class = pd.Series(area_ha).groupby(cls).sum().sort_index()
    return CheckReport(
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
