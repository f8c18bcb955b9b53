"""Reading a scenario: TOML in (with ``--set`` overrides), every key checked against its
spec, the sections built, cross-key rules applied, unusual values kept as warnings."""

from __future__ import annotations

import copy
import csv
import difflib
import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from contextvars import ContextVar
from dataclasses import replace
from pathlib import Path
from typing import Any

from yieldscape.config.keys import KeySpec
from yieldscape.config.model import (
    _ALL_PARAMETERS,
    _SITE_KEYS,
    _TABLE_KEYS,
    CURVE_PARAMETERS,
    FLOW_POLICIES,
    KEYS,
    MAX_AGE_YEARS,
    MAX_HORIZON_YEARS,
    SECTIONS,
    STEP_KINDS,
    AnalysisUnit,
    BufferBy,
    CoverTarget,
    DisturbanceConfig,
    EconomicsConfig,
    FieldMap,
    FlowConfig,
    GrowthConfig,
    HarvestConfig,
    InventoryConfig,
    LandbaseConfig,
    NetdownStep,
    OutputConfig,
    PartitionConfig,
    RasterFill,
    Regeneration,
    ReportConfig,
    Scenario,
    ScenarioInfo,
    SpeciesConfig,
    Thinning,
    UnitConfig,
)
from yieldscape.errors import ScenarioError
from yieldscape.growth.products import ProductSplit


def load_scenario(path: str | Path, overrides: Sequence[str] = ()) -> Scenario:
    """Read a scenario TOML file, apply ``section.key=value`` overrides, and check every key."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise ScenarioError(f"{path}: scenario file not found") from None
    except OSError as exc:
        raise ScenarioError(f"{path}: cannot read the scenario file ({exc.strerror})") from None
    except ValueError:  # the file system takes no NUL byte in a path
        raise ScenarioError(f"{str(path)!r}: the scenario file's path holds a NUL byte") from None
    try:
        text = data.decode("utf-8-sig")  # TOML is UTF-8; some editors put a byte-order mark first
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        utf16 = data[:2] in (b"\xff\xfe", b"\xfe\xff")
        raise ScenarioError(
            f"{path}: not UTF-8 text: byte 0x{data[exc.start]:02x} at position {exc.start} "
            f"(line {line}){' (the file is UTF-16)' if utf16 else ''}; save it as UTF-8"
        ) from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{path}: not valid TOML: {exc}") from None
    for item in overrides:
        apply_override(raw, item)
    where = _Where(str(path))
    where.overrides = {item.partition("=")[0].strip(): item for item in overrides}
    found: list[tuple[str, Any]] = [("", raw)]
    while found:  # a NUL byte in any text; in a path it would reach the file system
        key, value = found.pop()
        if isinstance(value, dict):
            found += [(f"{key}.{k}" if key else str(k), v) for k, v in value.items()]
        elif isinstance(value, list):
            found += [(f"{key}[{i}]", v) for i, v in enumerate(value)]
        elif isinstance(value, str):
            fault = "holds a NUL byte, which no path or name may hold" if "\0" in value else ""
            try:
                value.encode("utf-8")
            except UnicodeEncodeError:  # bytes of another encoding in a --set argument
                fault = "is not UTF-8 text"
            if fault:
                sect, _, name = key.rpartition(".")
                at = where.at(sect, name).replace("\0", "\\x00")  # a --set item holds it too
                raise ScenarioError(f"{at}: {key} = {value!r}: {fault}")
    return parse_scenario(
        raw,
        base_dir=path.resolve().parent,
        where=where,
        source=path.resolve(),
        overrides=tuple(overrides),
    )


class _Where(str):
    """The scenario file's name in messages, knowing which keys came from --set."""

    overrides: dict[str, str] = {}

    def at(self, sect: str, key: str) -> str:
        item = getattr(self, "overrides", {}).get(f"{sect}.{key}")
        return f"--set {item}" if item else str(self)


def apply_override(raw: dict[str, Any], item: str) -> None:
    """Set one dotted key in the raw TOML tables: ``flow.band=0.1``, ``species.pine.k=0.03``.

    The value is read as a TOML value (numbers, booleans, quoted strings, arrays); anything
    that is not valid TOML is taken as a bare string.
    """
    key, sep, text = item.partition("=")
    key = key.strip()
    if not sep or not key:
        raise ScenarioError(f"--set {item!r}: expected KEY=VALUE, e.g. flow.band=0.1")
    try:
        value = tomllib.loads(f"v = {text.strip()}")["v"]
    except tomllib.TOMLDecodeError:
        value = text.strip()
    parts = key.split(".")
    if parts in (["cover"], ["units"], ["partitions"], ["sensitivity"]) and isinstance(value, list):
        raw[parts[0]] = value  # an array of tables as a whole (sensitivity=[]: no cases)
        return
    if len(parts) < 2 or parts[0] not in SECTIONS:
        raise ScenarioError(
            f"--set {item!r}: {key!r} is not a scenario key; keys look like section.key with "
            f"a section among: {', '.join(SECTIONS)}"
        )
    table = raw
    for depth, part in enumerate(parts[:-1]):
        nxt = table.setdefault(part, {})
        if not isinstance(nxt, dict):
            raise ScenarioError(
                f"--set {item!r}: {'.'.join(parts[: depth + 1])} is a value, not a table"
            )
        table = nxt
    table[parts[-1]] = value


def parse_scenario(
    raw: Mapping[str, Any],
    base_dir: Path = Path("."),
    where: str = "scenario",
    source: Path | None = None,
    overrides: tuple[str, ...] = (),
) -> Scenario:
    """Check a scenario given as nested dicts (as tomllib returns) and build the config.

    Values that are possible but unusual are kept in ``Scenario.warnings``."""
    notes: list[str] = []
    token = _NOTES.set(notes)
    try:
        scenario = _parse(raw, base_dir, where, source, overrides)
    finally:
        _NOTES.reset(token)
    return replace(scenario, warnings=tuple(notes))


def _parse(
    raw: Mapping[str, Any],
    base_dir: Path,
    where: str,
    source: Path | None,
    overrides: tuple[str, ...],
) -> Scenario:
    _reject_unknown(raw, SECTIONS, where, "")
    for name in ("scenario", "inventory", "species"):
        if name not in raw:
            raise ScenarioError(f"{where}: missing section [{name}]")
    info = ScenarioInfo(**_take(raw["scenario"], "scenario", where))
    _check_horizon(info, where)
    inventory = _inventory(_table(raw["inventory"], "inventory", where), base_dir, where)
    species_raw = _table(raw["species"], "species", where)
    if not species_raw:
        raise ScenarioError(f"{where}: [species] lists no species; add a [species.<CODE>] table")
    harvest = _harvest(raw.get("harvest", {}), info, where)
    flow = _flow(raw.get("flow", {}), info, where)
    economics = EconomicsConfig(**_take(raw.get("economics", {}), "economics", where))
    growth = GrowthConfig(**_take(raw.get("growth", {}), "growth", where))
    species = {
        str(code): _species(code, tbl, base_dir, where, economics, growth.max_age_years)
        for code, tbl in species_raw.items()
    }
    _check_codes(species, inventory.analysis_units, where)
    _check_npv(flow, economics, species, where)
    disturbance = DisturbanceConfig(**_take(raw.get("disturbance", {}), "disturbance", where))
    if disturbance.replicates and disturbance.annual_rate <= 0:
        raise ScenarioError(
            f"{where}: [disturbance] replicates = {disturbance.replicates} needs annual_rate > 0"
        )
    return Scenario(
        info,
        inventory,
        species,
        harvest,
        flow,
        economics,
        growth,
        _landbase(raw.get("landbase", {}), base_dir, where),
        _cover(raw.get("cover", []), where),
        _units(raw.get("units", []), flow, inventory, info.periods, where),
        _partitions(raw.get("partitions", []), where),
        disturbance,
        _report(raw.get("report", {}), info, where),
        OutputConfig(**_take(raw.get("output", {}), "output", where)),
        source,
        overrides,
        _sensitivity(raw, base_dir, where, source),
    )


def _inventory(inv_raw: dict[str, Any], base_dir: Path, where: str) -> InventoryConfig:
    """``[inventory]`` with its ``fields`` and ``from_raster`` tables; paths resolved."""
    tables = ("fields", "from_raster", "analysis_units")
    vals = _take({k: v for k, v in inv_raw.items() if k not in tables}, "inventory", where)
    if "fields" not in inv_raw:
        raise ScenarioError(f"{where}: missing table [inventory.fields]")
    fields = FieldMap(**_take(inv_raw["fields"], "inventory.fields", where))
    rasters = _take(inv_raw.get("from_raster", {}), "inventory.from_raster", where)
    site = rasters["site_index"]
    fill = RasterFill((base_dir / site).resolve() if site else None, rasters["band"])
    path = (base_dir / vals["path"]).resolve()
    units_raw = inv_raw.get("analysis_units", [])
    if not isinstance(units_raw, list):
        raise ScenarioError(
            f"{where}: analysis units are an array of tables: [[inventory.analysis_units]]"
        )
    units = tuple(
        AnalysisUnit(
            **_take(t, "inventory.analysis_units", where, f"inventory.analysis_units #{n}")
        )
        for n, t in enumerate(units_raw, start=1)
    )
    return InventoryConfig(
        **{**vals, "path": path, "fields": fields, "from_raster": fill, "analysis_units": units}
    )


def _harvest(raw: Any, info: ScenarioInfo, where: str) -> HarvestConfig:
    harvest = HarvestConfig(**_take(raw, "harvest", where))
    if harvest.max_opening_ha is not None and harvest.greenup_years <= 0:
        note(
            f"{where}: [harvest] max_opening_ha = {harvest.max_opening_ha:g} has no effect: "
            "greenup_years = 0 switches the spatial rules off (give greenup_years > 0, the "
            "window in which cut area counts as open, to keep them)"
        )
    horizon = info.periods * info.period_years
    if harvest.greenup_years > horizon:
        raise ScenarioError(
            f"{where}: [harvest] greenup_years = {harvest.greenup_years:g} is "
            f"longer than the horizon ({horizon} years)"
        )
    return harvest


def _flow(raw: Any, info: ScenarioInfo, where: str) -> FlowConfig:
    flow = FlowConfig(**_take(raw, "flow", where))
    if flow.policy == "targets":
        if flow.targets_m3 is None:
            raise ScenarioError(
                f"{where}: [flow] policy = 'targets' needs targets_m3 (one value per period)"
            )
        if len(flow.targets_m3) != info.periods:
            raise ScenarioError(
                f"{where}: [flow] targets_m3 has {len(flow.targets_m3)} values "
                f"for scenario.periods = {info.periods}"
            )
    elif flow.targets_m3 is not None:
        raise ScenarioError(f"{where}: [flow] targets_m3 applies to policy = 'targets' only")
    if flow.method == "optimize" and not FLOW_POLICIES[flow.policy].in_lp:
        modelled = [p.name for p in FLOW_POLICIES.values() if p.in_lp]
        raise ScenarioError(
            f"{where}: [flow] method = 'optimize' takes policy "
            f"{' or '.join(repr(m) for m in modelled)}, not {flow.policy!r}"
        )
    if flow.long_term_periods is not None and flow.long_term_periods > info.periods:
        raise ScenarioError(
            f"{where}: [flow] long_term_periods = {flow.long_term_periods} is "
            f"longer than the horizon ({info.periods} periods)"
        )
    return flow


def _check_npv(
    flow: FlowConfig, economics: EconomicsConfig, species: Mapping[str, SpeciesConfig], where: str
) -> None:
    if flow.objective != "max-npv":
        return
    if economics.discount_rate is None:
        raise ScenarioError(
            f"{where}: [flow] objective = 'max-npv' needs [economics] discount_rate"
        )
    unpriced = sorted(c for c, sp in species.items() if sp.price_per_m3 is None)
    if unpriced:
        raise ScenarioError(
            f"{where}: [flow] objective = 'max-npv' needs price_per_m3 for "
            f"every species; missing for: {', '.join(unpriced)}"
        )


def _check_horizon(info: ScenarioInfo, where: str) -> None:
    """The horizon is a span of calendar years a planner can use."""
    horizon = info.periods * info.period_years
    if horizon > MAX_HORIZON_YEARS:
        raise ScenarioError(
            f"{where}: [scenario] periods = {info.periods} x period_years = "
            f"{info.period_years} is a horizon of {horizon:,} years; at most "
            f"{MAX_HORIZON_YEARS:,} are allowed (100 to 250 years are common practice)"
        )
    end = info.start_year + horizon
    if end > 9999:
        raise ScenarioError(
            f"{where}: [scenario] start_year = {info.start_year} with a horizon of {horizon} "
            f"years ends in {end}, beyond the four-digit calendar years the outputs hold"
        )
    if horizon > 400:
        note(
            f"{where}: [scenario] a horizon of {horizon} years is unusual: 100 to 250 years "
            "are common practice, and yield curves are rarely known that far"
        )


def boundary_years(info: ScenarioInfo) -> list[int]:
    """The period boundaries: the start year, each period's end (the next one's start)."""
    return [info.start_year + k * info.period_years for k in range(info.periods + 1)]


def _report(raw: Any, info: ScenarioInfo, where: str) -> ReportConfig:
    vals = _take(raw, "report", where)
    allowed = boundary_years(info)
    years = vals["age_class_years"]
    if years is None:  # the start, each quarter of the horizon, the end
        picks = sorted({round(info.periods * q / 4) for q in range(5)})
        years = tuple(allowed[k] for k in picks)
    else:
        bad = [y for y in years if y not in allowed]
        if bad or not years:
            loc = where.at("report", "age_class_years") if isinstance(where, _Where) else where
            shown = ", ".join(str(y) for y in allowed[:4])
            raise ScenarioError(
                f"{loc}: [report] age_class_years = {list(years)!r}: "
                f"{f'{bad[0]:g} is not' if bad else 'give at least one year; each must be'} "
                f"a period boundary ({shown}, ... every {info.period_years} years up to "
                f"{allowed[-1]})"
            )
        years = tuple(sorted({int(y) for y in years}))
    return ReportConfig(
        years,
        vals["age_class_width_years"],
        vals["map_layers"],
        vals["raster_cell_m"],
        vals["markdown"],
        vals["figures"],
    )


def _sensitivity(
    raw: Mapping[str, Any], base_dir: Path, where: str, source: Path | None
) -> tuple[tuple[str, Mapping[str, Any], Scenario], ...]:
    """Each [[sensitivity]] case: the base scenario with its ``set`` keys, checked now."""
    cases_raw = raw.get("sensitivity", [])
    if not isinstance(cases_raw, list):
        raise ScenarioError(f"{where}: sensitivity cases are an array of tables: [[sensitivity]]")
    base = {k: v for k, v in raw.items() if k != "sensitivity"}
    out = []
    seen: set[str] = set()
    for n, case in enumerate(cases_raw, start=1):
        if not isinstance(case, dict) or set(case) - {"name", "set"} or "name" not in case:
            raise ScenarioError(f"{where}: [[sensitivity]] #{n} takes name and set")
        name = case["name"]
        if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.-]*", name):
            raise ScenarioError(
                f"{where}: [[sensitivity]] #{n} name = {name!r}: use letters, "
                "digits, '_', '-' and '.' (it names an output folder)"
            )
        if name in seen:
            raise ScenarioError(f"{where}: [[sensitivity]] name {name!r} is used twice")
        seen.add(name)
        changes = case.get("set", {})
        if not isinstance(changes, dict) or not changes:
            raise ScenarioError(
                f"{where}: [[sensitivity]] {name!r}: set must be a table of "
                'dotted keys, e.g. set = { "flow.band" = 0.1 }'
            )
        case_raw = copy.deepcopy(base)
        for key, value in changes.items():
            _set_dotted(case_raw, str(key), value, f"{where}: [[sensitivity]] {name!r}")
        try:
            scn = parse_scenario(case_raw, base_dir, where, source)
        except ScenarioError as exc:
            raise ScenarioError(f"[[sensitivity]] {name!r}: {exc}") from None
        out.append((name, dict(changes), scn))
    return tuple(out)


def _set_dotted(raw: dict[str, Any], key: str, value: Any, where: str) -> None:
    parts = key.split(".")
    if len(parts) < 2 or parts[0] not in SECTIONS or parts[0] == "sensitivity":
        raise ScenarioError(f"{where}: {key!r} is not a scenario key (section.key)")
    table = raw
    for part in parts[:-1]:
        nxt = table.setdefault(part, {})
        if not isinstance(nxt, dict):
            raise ScenarioError(f"{where}: {key!r}: {part} is a value, not a table")
        table = nxt
    table[parts[-1]] = value


def _cover(raw: Any, where: str) -> tuple[CoverTarget, ...]:
    if not isinstance(raw, list):
        raise ScenarioError(f"{where}: cover targets are an array of tables: [[cover]]")
    out = []
    for n, tbl in enumerate(raw, start=1):
        sect = f"cover #{n}"
        v = _take(tbl, "cover", where, shown=sect)
        old = v["older_than_years"] is not None or v["min_share"] is not None
        young = v["younger_than_years"] is not None or v["max_share"] is not None
        if old == young:
            raise ScenarioError(
                f"{where}: [[cover]] #{n} needs either older_than_years with "
                "min_share, or younger_than_years with max_share"
            )
        if old:
            if v["older_than_years"] is None or v["min_share"] is None:
                raise ScenarioError(
                    f"{where}: [[cover]] #{n} needs both older_than_years and min_share"
                )
            out.append(CoverTarget(**v))
        else:
            if v["younger_than_years"] is None or v["max_share"] is None:
                raise ScenarioError(
                    f"{where}: [[cover]] #{n} needs both younger_than_years and max_share"
                )
            out.append(CoverTarget(**v))
    return tuple(out)


def _array_of_tables(raw: Any, name: str, where: str) -> list[Any]:
    if not isinstance(raw, list):
        raise ScenarioError(f"{where}: {name} is an array of tables: [[{name}]]")
    return raw


UNIT_POLICIES = ("even", "targets")  # the flows searched per management unit


def _units(
    raw: Any, flow: FlowConfig, inventory: InventoryConfig, periods: int, where: str
) -> tuple[UnitConfig, ...]:
    """``[[units]]``: each a unit's own flow keys; names unique; a unit field to read."""
    out = []
    for n, tbl in enumerate(_array_of_tables(raw, "units", where), start=1):
        label = tbl.get("name", f"#{n}") if isinstance(tbl, dict) else f"#{n}"
        unit = UnitConfig(**_take(tbl, "units", where, shown=f"units #{n} {label!r}"))
        policy = unit.policy or flow.policy
        if policy not in UNIT_POLICIES:
            raise ScenarioError(
                f"{where}: [[units]] #{n} {unit.name!r}: policy = {policy!r} is not searched "
                f"per unit; a unit follows one of {', '.join(UNIT_POLICIES)}"
            )
        if policy == "targets" and (unit.targets_m3 or flow.targets_m3) is None:
            raise ScenarioError(
                f"{where}: [[units]] #{n} {unit.name!r}: policy = 'targets' needs targets_m3"
            )
        if unit.targets_m3 is not None and len(unit.targets_m3) != periods:
            raise ScenarioError(
                f"{where}: [[units]] #{n} {unit.name!r}: targets_m3 has "
                f"{len(unit.targets_m3)} values for scenario.periods = {periods}"
            )
        out.append(unit)
    _names_once([u.name for u in out], "units", where)
    if inventory.fields.unit is not None and flow.policy not in UNIT_POLICIES:
        raise ScenarioError(
            f"{where}: [flow] policy = {flow.policy!r} with [inventory.fields] unit: the units "
            f"without a [[units]] table follow [flow], and a unit follows one of "
            f"{', '.join(UNIT_POLICIES)}"
        )
    if out and inventory.fields.unit is None:
        raise ScenarioError(
            f'{where}: [[units]] needs [inventory.fields] unit = "FIELD", the stand layer\'s '
            "field naming each stand's unit"
        )
    return tuple(out)


def _partitions(raw: Any, where: str) -> tuple[PartitionConfig, ...]:
    """``[[partitions]]``: a name, a where rule and at least one limit, minimum <= maximum."""
    out = []
    for n, tbl in enumerate(_array_of_tables(raw, "partitions", where), start=1):
        label = tbl.get("name", f"#{n}") if isinstance(tbl, dict) else f"#{n}"
        sect = f"partitions #{n} {label!r}"
        part = PartitionConfig(**_take(tbl, "partitions", where, shown=sect))
        limits = (part.min_share, part.max_share, part.min_m3, part.max_m3)
        if all(v is None for v in limits):
            raise ScenarioError(
                f"{where}: [{sect}] needs a limit: min_share, max_share, min_m3 or max_m3"
            )
        for lo, hi, what in ((0, 1, "share"), (2, 3, "m3")):
            if limits[lo] is not None and limits[hi] is not None and limits[lo] > limits[hi]:
                raise ScenarioError(
                    f"{where}: [{sect}] min_{what} = {limits[lo]:g} is above "
                    f"max_{what} = {limits[hi]:g}"
                )
        out.append(part)
    _names_once([p.name for p in out], "partitions", where)
    return tuple(out)


def _names_once(names: list[str], section: str, where: str) -> None:
    """Each table of an array of tables names itself once."""
    for name in names:
        if names.count(name) > 1:
            raise ScenarioError(f"{where}: [[{section}]] name = {name!r} is given twice")


def _landbase(raw: Any, base_dir: Path, where: str) -> LandbaseConfig:
    vals = _take(raw, "landbase", where)
    steps = []
    for n, step_raw in enumerate(vals["steps"], start=1):
        sect = f"landbase.steps #{n}"
        if not isinstance(step_raw, dict):
            raise ScenarioError(f"{where}: [[landbase.steps]] #{n} must be a table")
        label = step_raw.get("label", f"#{n}")
        sect = f"landbase.steps #{n} {label!r}"
        v = _take(step_raw, "landbase.steps", where, shown=sect)
        kinds = [k for k in STEP_KINDS if v[k] is not None]
        if len(kinds) != 1:
            raise ScenarioError(
                f"{where}: [{sect}] needs exactly one of {', '.join(STEP_KINDS)}"
                f" (found {', '.join(kinds) or 'none'})"
            )
        kind = kinds[0]
        extra = {
            "where": ("layer_name", "buffer_m", "buffer_by", "above"),
            "layer": ("above",),
            "raster": ("layer_name", "buffer_m", "buffer_by"),
            "percent": ("layer_name", "buffer_m", "buffer_by", "above"),
        }[kind]
        stray = [k for k in extra if k in step_raw]
        if stray:
            raise ScenarioError(
                f"{where}: [{sect}] key {stray[0]!r} does not apply to a {kind!r} step"
            )
        if v["buffer_by"] is not None:
            if v["buffer_m"] is not None:
                raise ScenarioError(f"{where}: [{sect}] give buffer_m or buffer_by, not both")
            v["buffer_by"] = _buffer_by(v["buffer_by"], f"{where}: [{sect}] buffer_by")
        if kind == "raster" and v["above"] is None:
            raise ScenarioError(f"{where}: [{sect}] a raster step needs 'above'")
        steps.append(
            NetdownStep(
                number=n,
                kind=kind,
                **{
                    **v,
                    "layer": (base_dir / v["layer"]).resolve() if v["layer"] else None,
                    "raster": (base_dir / v["raster"]).resolve() if v["raster"] else None,
                },
            )
        )
    return LandbaseConfig(tuple(steps), vals["write_harvestable_layer"])


def _buffer_by(raw: dict[str, Any], where: str) -> BufferBy:
    unknown = set(raw) - {"field", "widths_m"}
    if unknown:
        raise ScenarioError(
            f"{where}: unknown key {sorted(unknown)[0]!r}; it takes field and widths_m"
        )
    if not isinstance(raw.get("field"), str) or not isinstance(raw.get("widths_m"), dict):
        raise ScenarioError(
            f'{where}: needs field = "<name>" and widths_m = {{ <class> = <metres>, ... }}'
        )
    widths = {}
    for cls, width in raw["widths_m"].items():
        ok = isinstance(width, int | float) and not isinstance(width, bool)
        if not ok or not (math.isfinite(width) and width >= 0):
            raise ScenarioError(
                f"{where}: width for class {cls!r} = {width!r}: must be a number >= 0"
            )
        widths[str(cls)] = float(width)
    return BufferBy(raw["field"], widths)


def _species(
    code: str,
    raw: Any,
    base_dir: Path,
    where: str,
    economics: EconomicsConfig,
    max_age_years: float,
) -> SpeciesConfig:
    sect = f"species.{code}"
    vals = _take(raw, "species.*", where, shown=sect)
    curve = vals["curve"]
    given = set(_table(raw, sect, where))
    allowed = set(CURVE_PARAMETERS[curve]) | (_TABLE_KEYS if curve == "table" else _SITE_KEYS)
    foreign = sorted(given & ((_ALL_PARAMETERS | _TABLE_KEYS | _SITE_KEYS) - allowed))
    if foreign:
        raise ScenarioError(
            f"{where}: [{sect}] key {foreign[0]!r} does not apply to curve {curve!r}"
            f" (it takes: {', '.join(CURVE_PARAMETERS[curve]) or 'ages, volumes_m3_ha'})"
        )
    for key in CURVE_PARAMETERS[curve]:
        if vals[key] is None:
            raise ScenarioError(f"{where}: [{sect}] curve {curve!r} needs key {key!r}")
    if "min_viable_m3_ha" in CURVE_PARAMETERS[curve] and not (
        vals["min_viable_m3_ha"] < vals["capacity_m3_ha"]
    ):
        raise ScenarioError(
            f"{where}: [{sect}] min_viable_m3_ha = {vals['min_viable_m3_ha']:g} must be below "
            f"capacity_m3_ha = {vals['capacity_m3_ha']:g}"
        )
    if (
        "initial_m3_ha" in CURVE_PARAMETERS[curve]
        and vals["initial_m3_ha"] > vals["capacity_m3_ha"]
    ):
        raise ScenarioError(
            f"{where}: [{sect}] initial_m3_ha = {vals['initial_m3_ha']:g} must be in "
            f"(0, capacity_m3_ha = {vals['capacity_m3_ha']:g}]: a stock starts at most at its "
            "carrying capacity"
        )
    if curve == "table":
        _table_curve(vals, sect, base_dir, where)
    rules = ("min_harvest_age", "min_harvest_mai_share", "min_harvest_volume_m3_ha")
    if all(vals[r] is None for r in rules) and not vals["min_harvest_economic"]:
        raise ScenarioError(
            f"{where}: [{sect}] needs a minimum harvest age rule: min_harvest_age, "
            "min_harvest_mai_share, min_harvest_volume_m3_ha or min_harvest_economic = true"
        )
    if vals["min_harvest_economic"]:
        if economics.discount_rate is None:
            raise ScenarioError(
                f"{where}: [{sect}] min_harvest_economic = true needs [economics] discount_rate"
            )
        if vals["price_per_m3"] is None:
            raise ScenarioError(f"{where}: [{sect}] min_harvest_economic = true needs price_per_m3")
    lo, hi = vals["site_index_min_m"], vals["site_index_max_m"]
    if lo is not None and hi is not None and lo > hi:
        raise ScenarioError(
            f"{where}: [{sect}] site_index_min_m = {lo} is above site_index_max_m = {hi}"
        )
    if vals["products"] is not None:
        vals["products"] = _products(vals["products"], f"{where}: [{sect}.products]")
    if vals["thinning_m3_ha"] is not None and curve != "table":
        raise ScenarioError(f"{where}: [{sect}] thinning_m3_ha applies to curve 'table' only")
    vals["thinnings"] = _thinnings(vals["thinnings"], vals, sect, where, max_age_years)
    if vals["regenerate_as"] is not None:
        vals["regenerate_as"] = _regeneration(vals["regenerate_as"], f"{where}: [{sect}]")
    return SpeciesConfig(code=str(code), **vals)


def _thinnings(
    raw: tuple, vals: dict[str, Any], sect: str, where: str, max_age_years: float
) -> tuple[Thinning, ...]:
    """[[species.<CODE>.thinnings]]: ages strictly increasing, inside the curve's range."""
    out = []
    for n, tbl in enumerate(raw, start=1):
        out.append(
            Thinning(**_take(tbl, "species.*.thinnings", where, shown=f"{sect}.thinnings #{n}"))
        )
    if not out:
        return ()
    if vals["thinning_m3_ha"] is not None:
        raise ScenarioError(
            f"{where}: [{sect}] give thinning_m3_ha (the table's removals) or "
            "[[thinnings]] (shares of the standing volume), not both"
        )
    ages = [t.age_years for t in out]
    if any(b <= a for a, b in zip(ages, ages[1:], strict=False)):
        raise ScenarioError(f"{where}: [[{sect}.thinnings]] ages must increase strictly: {ages}")
    last = vals["ages"][-1] if vals["curve"] == "table" else max_age_years
    if ages[-1] > last:
        what = "the table's last age" if vals["curve"] == "table" else "growth.max_age_years"
        raise ScenarioError(
            f"{where}: [[{sect}.thinnings]] age_years = {ages[-1]:g} is beyond the curve "
            f"({what} is {last:g})"
        )
    return tuple(out)


def _regeneration(raw: Any, where: str) -> Regeneration:
    """regenerate_as: a code, a table of code = share (adding up to 1), or an array of codes
    (a choice for the harvest LP). Whether the codes exist is checked with every species."""
    key = f"{where} regenerate_as = {raw!r}"
    if isinstance(raw, str) and raw:
        return Regeneration("as", (raw,), (1.0,))
    if isinstance(raw, list):
        if not raw or not all(isinstance(c, str) and c for c in raw):
            raise ScenarioError(f"{key}: a choice needs at least one code (an array of strings)")
        if len(set(raw)) != len(raw):
            raise ScenarioError(f"{key}: a choice lists a code twice")
        return Regeneration("choice", tuple(raw), tuple(1.0 / len(raw) for _ in raw))
    if isinstance(raw, dict) and raw:
        shares = []
        for code, share in raw.items():
            ok = isinstance(share, int | float) and not isinstance(share, bool)
            if not ok or not math.isfinite(share) or not 0 < share <= 1:
                raise ScenarioError(f"{key}: the share of {code!r} must be a number in (0, 1]")
            shares.append(float(share))
        if abs(sum(shares) - 1.0) > 1e-6:
            raise ScenarioError(f"{key}: the shares add up to {sum(shares):g}, not 1")
        return Regeneration("split", tuple(map(str, raw)), tuple(shares))
    raise ScenarioError(
        f'{key}: give a code ("spruce_planted"), a table of shares '
        "({ spruce = 0.7, birch = 0.3 }) or an array of codes to choose among"
    )


def _check_codes(species: Mapping[str, SpeciesConfig], units: Sequence[Any], where: str) -> None:
    """Every code a transition or an analysis unit names has its [species.<CODE>] table."""
    known = sorted(species)
    for code, sp in species.items():
        for target in sp.regenerate_as.codes if sp.regenerate_as else ():
            if target not in species:
                raise ScenarioError(
                    f"{where}: [species.{code}] regenerate_as names {target!r}, which has no "
                    f"[species.{target}] table; codes: {', '.join(known)}"
                )
    for n, unit in enumerate(units, start=1):
        if unit.species not in species:
            raise ScenarioError(
                f"{where}: [[inventory.analysis_units]] #{n} species = {unit.species!r} has no "
                f"[species.{unit.species}] table; codes: {', '.join(known)}"
            )


def _table_curve(vals: dict[str, Any], sect: str, base_dir: Path, where: str) -> None:
    """Resolve a table curve's ages, volumes (one row per class) and classes in place."""
    if vals["table_csv"] is not None:
        given = ("ages", "volumes_m3_ha", "site_classes_m", "thinning_m3_ha")
        if any(vals[k] is not None for k in given):
            raise ScenarioError(
                f"{where}: [{sect}] give either table_csv or ages and volumes_m3_ha, not both"
            )
        csv_path = (base_dir / vals["table_csv"]).resolve()
        vals["table_csv"] = csv_path
        (
            vals["ages"],
            vals["volumes_m3_ha"],
            vals["site_classes_m"],
            vals["thinning_m3_ha"],
        ) = _read_table_csv(csv_path)
        table_where = str(csv_path)
    else:
        if vals["ages"] is None or vals["volumes_m3_ha"] is None:
            raise ScenarioError(
                f"{where}: [{sect}] curve 'table' needs ages and volumes_m3_ha (or table_csv)"
            )
        table_where = f"{where}: [{sect}]"
        rows = vals["volumes_m3_ha"]
        nested = isinstance(rows[0], tuple)
        classes = vals["site_classes_m"]
        if nested and classes is None:
            raise ScenarioError(
                f"{table_where}: volumes_m3_ha has one array per site class; "
                "list the classes in site_classes_m"
            )
        if not nested:
            rows = (rows,)
        if classes is not None and len(classes) != len(rows):
            raise ScenarioError(
                f"{table_where}: site_classes_m has {len(classes)} values but volumes_m3_ha "
                f"has {len(rows)} rows"
            )
        vals["volumes_m3_ha"] = rows
        vals["thinning_m3_ha"] = _rows_like(vals["thinning_m3_ha"], rows, table_where)
    classes = vals["site_classes_m"]
    if classes is not None:
        for c0, c1 in zip(classes, classes[1:], strict=False):
            if not c1 > c0:
                raise ScenarioError(
                    f"{table_where}: site_classes_m must increase strictly ({c0} then {c1})"
                )
        if vals["site_index_min_m"] is None:
            vals["site_index_min_m"] = classes[0]
        if vals["site_index_max_m"] is None:
            vals["site_index_max_m"] = classes[-1]
    for row in vals["volumes_m3_ha"]:
        _check_table(vals["ages"], row, table_where)
    if vals["thinning_m3_ha"] is not None:
        _check_removals(vals["ages"], vals["volumes_m3_ha"], vals["thinning_m3_ha"], table_where)


def _rows_like(thin: Any, rows: Rows, where: str) -> Rows | None:
    """thinning_m3_ha as one row per site class, shaped as volumes_m3_ha."""
    if thin is None:
        return None
    thin = thin if isinstance(thin[0], tuple) else (thin,)
    if len(thin) != len(rows) or any(len(t) != len(r) for t, r in zip(thin, rows, strict=False)):
        raise ScenarioError(
            f"{where}: thinning_m3_ha must have the shape of volumes_m3_ha "
            f"({len(rows)} row(s) of {len(rows[0])} values)"
        )
    return thin


def _check_removals(ages: Sequence[float], vols: Rows, thins: Rows, where: str) -> None:
    """A removal may not exceed the standing volume left after it (a thinning takes less than
    half the stand; a heavier cut is a regeneration felling)."""
    for vrow, trow in zip(vols, thins, strict=True):
        for age, v, t in zip(ages, vrow, trow, strict=True):
            if t > v:
                raise ScenarioError(
                    f"{where}: thinning_m3_ha = {t:g} at age {age:g} is larger than the "
                    f"standing volume {v:g} m3/ha left after it (volumes_m3_ha is the stand "
                    "after thinning); a thinning takes less than half the stand"
                )


def _products(raw: Any, where: str) -> ProductSplit:
    if not isinstance(raw, dict) or "ages" not in raw or len(raw) < 2:
        raise ScenarioError(f"{where}: needs ages and at least one product share array")
    ages = _coerce(raw["ages"], KeySpec("floats"), f"{where} ages")
    shares = {}
    for name, value in raw.items():
        if name == "ages":
            continue
        arr = _coerce(value, KeySpec("floats"), f"{where} {name}")
        if len(arr) != len(ages):
            raise ScenarioError(f"{where} {name}: {len(arr)} shares for {len(ages)} ages")
        if any(not 0 <= v <= 1 for v in arr):
            raise ScenarioError(f"{where} {name}: shares must lie in [0, 1]")
        shares[str(name)] = arr
    for i, age in enumerate(ages):
        total = sum(v[i] for v in shares.values())
        if abs(total - 1.0) > 1e-6:
            raise ScenarioError(f"{where}: shares at age {age:g} add up to {total:g}, not 1")
    for a0, a1 in zip(ages, ages[1:], strict=False):
        if not a1 > a0:
            raise ScenarioError(f"{where}: ages must increase strictly ({a0} then {a1})")
    return ProductSplit(ages, shares)


Rows = tuple[tuple[float, ...], ...]
_UNITS = "inventory.analysis_units"


def _read_table_csv(
    path: Path,
) -> tuple[tuple[float, ...], Rows, tuple[float, ...] | None, Rows | None]:
    """Read a yield table CSV: age_years, volume_m3_ha and optionally site_index_m and
    thinning_m3_ha (long form: one row per site class and age)."""
    # A yield table is a small text file named by the scenario, so it is read with the scenario.
    try:
        data = path.read_bytes()
        rows = list(csv.DictReader(data.decode("utf-8-sig").splitlines()))
    except FileNotFoundError:
        raise ScenarioError(f"{path}: yield table file not found") from None
    except OSError as exc:
        raise ScenarioError(f"{path}: cannot read the yield table ({exc.strerror})") from None
    except UnicodeDecodeError as exc:  # (a byte-order mark, as spreadsheets write, is read)
        line = data.count(b"\n", 0, exc.start) + 1
        raise ScenarioError(
            f"{path}: not UTF-8 text: byte 0x{data[exc.start]:02x} at position {exc.start} "
            f"(line {line}); save it as UTF-8"
        ) from None
    need = ("age_years", "volume_m3_ha")
    if not rows or any(col not in rows[0] for col in need):
        have = ", ".join(rows[0]) if rows else "no rows"
        raise ScenarioError(f"{path}: a yield table needs columns {need} (found: {have})")
    with_site = "site_index_m" in rows[0]
    with_thinning = "thinning_m3_ha" in rows[0]
    table: dict[float, list[tuple[float, float, float]]] = {}
    for n, row in enumerate(rows, start=2):
        try:
            site = float(row["site_index_m"]) if with_site else 1.0
            age, vol = float(row["age_years"]), float(row["volume_m3_ha"])
            thin = float(row["thinning_m3_ha"] or 0.0) if with_thinning else 0.0
        except (TypeError, ValueError):
            raise ScenarioError(
                f"{path}, line {n}: {dict(row)} holds a value that is not a number"
            ) from None
        if not all(math.isfinite(v) for v in (site, age, vol, thin)) or site <= 0 or thin < 0:
            raise ScenarioError(
                f"{path}, line {n}: {dict(row)}: every value must be a finite number "
                "(a site index > 0, a thinning volume >= 0)"
            )
        table.setdefault(site, []).append((age, vol, thin))
    classes = sorted(table)
    ages = tuple(a for a, _, _ in table[classes[0]])
    for site in classes:
        if tuple(a for a, _, _ in table[site]) != ages:
            raise ScenarioError(
                f"{path}: site class {site:g} lists other ages than class {classes[0]:g}; "
                "every class needs the same ages"
            )
    vols = tuple(tuple(v for _, v, _ in table[site]) for site in classes)
    thins = tuple(tuple(t for _, _, t in table[site]) for site in classes)
    return ages, vols, (tuple(classes) if with_site else None), (thins if with_thinning else None)


def _check_table(ages: Sequence[float], vols: Sequence[float], where: str) -> None:
    if len(ages) != len(vols):
        raise ScenarioError(
            f"{where}: ages has {len(ages)} values but volumes_m3_ha has {len(vols)}"
        )
    if len(ages) < 2:
        raise ScenarioError(f"{where}: a yield table needs at least two ages")
    for a0, a1 in zip(ages, ages[1:], strict=False):
        if not a1 > a0:
            raise ScenarioError(f"{where}: ages must increase strictly ({a0} then {a1})")
    if ages[0] < 0 or ages[-1] > MAX_AGE_YEARS:
        raise ScenarioError(
            f"{where}: ages run from {ages[0]:g} to {ages[-1]:g}; they must lie in "
            f"0 .. {MAX_AGE_YEARS:g} years"
        )
    bad = [v for v in vols if not (v >= 0 and math.isfinite(v))]
    if bad:
        raise ScenarioError(f"{where}: volume {bad[0]} is not a finite value >= 0")
    top = 0
    for i, v in enumerate(vols):
        if v < 0.5 * vols[top]:
            note(
                f"{where}: the volume falls from {vols[top]:g} m3/ha at age {ages[top]:g} to "
                f"{v:g} at age {ages[i]:g}; a stand's yield table levels off or declines "
                "slowly, so check the values (a typing slip, another unit, a missing digit)"
            )
            break
        top = i if v > vols[top] else top


def _table(value: Any, sect: str, where: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise ScenarioError(f"{where}: [{sect}] must be a table, found {value!r}")
    return value


def _reject_unknown(raw: Mapping[str, Any], known: Sequence[str], where: str, sect: str) -> None:
    for key in raw:
        if key not in known:
            near = difflib.get_close_matches(key, known, n=1)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            place = f"[{sect}] key" if sect else "section"
            loc = where.at(sect, key) if isinstance(where, _Where) else where
            raise ScenarioError(f"{loc}: unknown {place} {key!r}{hint} Known: {', '.join(known)}")


def _take(raw: Any, spec_name: str, where: str, shown: str | None = None) -> dict[str, Any]:
    """Validate one table against its spec; return every key with defaults filled in."""
    sect = shown or spec_name
    raw = _table(raw, sect, where)
    spec = KEYS[spec_name]
    extra = {"fields", "from_raster", "analysis_units"} if spec_name == "inventory" else set()
    _reject_unknown({k: v for k, v in raw.items() if k not in extra}, list(spec), where, sect)
    out: dict[str, Any] = {}
    for key, ks in spec.items():
        if key not in raw:
            if ks.required:
                raise ScenarioError(f"{where}: [{sect}] missing required key {key!r} ({ks.doc})")
            out[key] = ks.default
            continue
        loc = where.at(sect, key) if isinstance(where, _Where) else where
        out[key] = _coerce(raw[key], ks, f"{loc}: [{sect}] {key} = {raw[key]!r}")
    return out


def _coerce(value: Any, ks: KeySpec, where: str) -> Any:
    if ks.kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            raise ScenarioError(f"{where}: must be a whole number")
    elif ks.kind == "float":
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ScenarioError(f"{where}: must be a number")
        value = float(value)
        if not math.isfinite(value):
            raise ScenarioError(f"{where}: must be a finite number")
    elif ks.kind == "str":
        if not isinstance(value, str) or not value:
            raise ScenarioError(f"{where}: must be a non-empty string")
    elif ks.kind == "choice":
        if value not in ks.choices:
            near = difflib.get_close_matches(str(value), ks.choices, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else ""
            raise ScenarioError(f"{where}: choose one of: {', '.join(ks.choices)}{hint}")
    elif ks.kind == "bool":
        if not isinstance(value, bool):
            raise ScenarioError(f"{where}: must be true or false")
    elif ks.kind == "steps":
        if not isinstance(value, list):
            raise ScenarioError(f"{where}: must be an array of tables ([[landbase.steps]])")
        value = tuple(value)
    elif ks.kind == "table":
        if not isinstance(value, dict):
            raise ScenarioError(f"{where}: must be a table")
    elif ks.kind == "thinnings":
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            raise ScenarioError(f"{where}: must be an array of tables ([[...thinnings]])")
        value = tuple(value)
    elif ks.kind == "volumes":
        if isinstance(value, list) and value and all(isinstance(v, list) for v in value):
            value = tuple(_coerce(v, KeySpec("floats"), where) for v in value)
        else:
            value = _coerce(value, KeySpec("floats"), where)
    elif ks.kind == "floats":
        ok = isinstance(value, list) and all(
            isinstance(v, int | float) and not isinstance(v, bool) for v in value
        )
        if not ok:
            raise ScenarioError(f"{where}: must be an array of numbers")
        value = tuple(float(v) for v in value)
        bad = [v for v in value if not math.isfinite(v)]
        if bad:
            raise ScenarioError(f"{where}: {bad[0]} is not a finite number")
    if ks.check is not None:
        problem = ks.check(value)
        if problem:
            raise ScenarioError(f"{where}: {problem}")
    if ks.usual is not None:
        odd = ks.usual(value)
        if odd:
            note(f"{where}: {odd}")
    return value


# Warnings found while a scenario is parsed; parse_scenario collects them into
# Scenario.warnings, and the run reports them (stderr, run.log, the report).
_NOTES: ContextVar[list[str] | None] = ContextVar("scenario_notes", default=None)


def note(message: str) -> None:
    """Record a warning about the scenario being parsed."""
    notes = _NOTES.get()
    if notes is not None and message not in notes:
        notes.append(message)
