"""The scenario file: TOML in, frozen typed config objects out.

Every key is stated once, as a field of the dataclass of its section, with a :func:`key` that
records its TOML type, unit, default, meaning, the range outside which a value is an error and
the usual range outside which it warns. :data:`KEYS` is read off those fields; it drives the
parsing, the unknown-key errors and the test that checks ``docs/scenario.md`` against it (each
key's default and unit). Choices come from the registries that own them: curve families from
:mod:`yieldscape.growth.curves`, flow policies and priority rules from
:mod:`yieldscape.policies`.

    >>> scn = load_scenario("sample_region/scenario.toml")            # doctest: +SKIP
    >>> scn = load_scenario(path, overrides=["flow.band=0.1"])          # doctest: +SKIP
"""

from __future__ import annotations

import copy
import csv
import dataclasses
import difflib
import math
import re
import tomllib
from collections.abc import Callable, Mapping, Sequence
from contextvars import ContextVar
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

from yieldscape.errors import ScenarioError
from yieldscape.growth.curves import FAMILIES, SiteScaling, YieldCurve, make_curve
from yieldscape.growth.products import ProductSplit
from yieldscape.growth.rules import AgeRules, Money, Search
from yieldscape.policies import FLOW_POLICIES, PRIORITIES

# curve family -> the parameter keys it needs (besides the keys every species takes)
CURVE_PARAMETERS: dict[str, tuple[str, ...]] = {n: f.parameters for n, f in FAMILIES.items()}
CURVES = tuple(CURVE_PARAMETERS)
COMPOUNDING = ("continuous", "annual")
TIMINGS = ("start", "midpoint", "end")
ADJACENCY_MODES = ("edge", "edge-or-corner")
METHODS = ("rules", "optimize")
OBJECTIVES = ("max-even-flow", "max-volume", "max-npv")
TERMINAL_VALUES = ("none", "standing")

_REQUIRED: Any = object()  # the default of a key that must be given
# Hard limits: beyond them a value is not a forest-planning input but a slip.
# older than any tree known (bristlecone pines, about 4,800 years; from memory)
MAX_AGE_YEARS = 5000.0
MAX_HORIZON_YEARS = 1000  # a timber supply horizon is 100 to 250 years (common practice)
MAX_PERIODS = MAX_HORIZON_YEARS


@dataclass(frozen=True)
class Range:
    """A closed or open interval of numbers; called on a value (or an array of values) it
    returns what is wrong with it, or None. Every number in a scenario is finite as well."""

    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    hi_open: bool = False

    def holds(self, v: float) -> bool:
        if self.lo is not None and not (v > self.lo if self.lo_open else v >= self.lo):
            return False
        return self.hi is None or (v < self.hi if self.hi_open else v <= self.hi)

    def text(self) -> str:
        parts = []
        if self.lo is not None:
            parts.append(f"{'>' if self.lo_open else '>='} {_number(self.lo)}")
        if self.hi is not None:
            parts.append(f"{'<' if self.hi_open else '<='} {_number(self.hi)}")
        return " and ".join(parts)

    def __call__(self, value: Any) -> str | None:
        values = value if isinstance(value, tuple) else (value,)
        for v in _flat(values):
            if not self.holds(v):
                return f"must be {self.text()}" + (f" ({v:g} is not)" if len(values) > 1 else "")
        return None


@dataclass(frozen=True)
class Usual:
    """The range a value usually lies in, and why; a value outside it is possible but worth a
    warning (a wrong unit, a typing slip)."""

    range: Range
    why: str

    def __call__(self, value: Any) -> str | None:
        values = value if isinstance(value, tuple) else (value,)
        odd = [v for v in _flat(values) if not self.range.holds(v)]
        if not odd:
            return None
        shown = f"{odd[0]:g}" if len(values) == 1 else f"{odd[0]:g} among them"
        return f"{shown} is unusual: usually {self.range.text()} ({self.why})"


def _number(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else f"{x:g}"


def _flat(values: Sequence[Any]) -> list[float]:
    out: list[float] = []
    for v in values:
        out.extend(_flat(v) if isinstance(v, tuple) else [v])
    return out


@dataclass(frozen=True)
class KeySpec:
    """One scenario key: its type, default, unit, a line of documentation, the range outside
    which a value is an error (``check``) and the usual range outside which it is a warning."""

    kind: str  # "int", "float", "str", "bool", "floats", "volumes", "table", "choice"
    default: Any = _REQUIRED
    unit: str = ""
    doc: str = ""
    choices: tuple[str, ...] = ()
    check: Callable[[Any], str | None] | None = None  # returns a problem, or None
    usual: Usual | None = None

    @property
    def required(self) -> bool:
        return self.default is _REQUIRED


_positive = Range(0, lo_open=True)
_non_negative = Range(0)
_fraction_below_one = Range(0, 1, hi_open=True)
_share = Range(0, 1)
_finite = Range()
_VOLUME_USUAL = Usual(
    Range(0, 3000), "the largest stand volumes recorded are a few thousand m3/ha, from memory"
)
_SITE_USUAL = Usual(
    Range(0, 60), "site indices above 50 to 60 m are rare even on the best sites; feet?"
)
_EXPONENT_USUAL = Usual(Range(-5, 5), "site exponents of 0 to 2 are usual")


SECTIONS = (
    "scenario",
    "inventory",
    "species",
    "harvest",
    "flow",
    "economics",
    "growth",
    "landbase",
    "cover",
    "disturbance",
    "report",
    "sensitivity",
)
STEP_KINDS = ("where", "layer", "raster", "percent")
_ALL_PARAMETERS = {k for keys in CURVE_PARAMETERS.values() for k in keys}
_SITE_KEYS = {"site_index_ref_m", "site_exponent_a", "site_exponent_k"}
_TABLE_KEYS = {"ages", "volumes_m3_ha", "table_csv", "site_classes_m"}
_TABLE_PARAMS = {"ages", "volumes_m3_ha", "site_classes_m"}  # what a table curve is built of


def key(
    kind: str,
    default: Any = _REQUIRED,
    unit: str = "",
    doc: str = "",
    choices: Sequence[str] = (),
    check: Callable[[Any], str | None] | None = None,
    usual: Usual | None = None,
) -> Any:
    """A dataclass field that is a scenario key, with everything said of it in one place."""
    spec = KeySpec(kind, default, unit, doc, tuple(choices), check, usual)
    if default is _REQUIRED:
        return field(metadata={"key": spec})
    return field(default=default, metadata={"key": spec})


def keys_of(cls: type) -> dict[str, KeySpec]:
    """The scenario keys of a section's dataclass, in field order."""
    return {f.name: f.metadata["key"] for f in dataclasses.fields(cls) if "key" in f.metadata}


# ----------------------------------------------------------------------------- the sections
@dataclass(frozen=True)
class ScenarioInfo:
    """``[scenario]``: its name and the time grid."""

    name: str = key("str", doc="Name of the scenario, shown in outputs.")
    start_year: int = key(
        "int",
        unit="year",
        doc="Calendar year at the start of period 1.",
        check=Range(1, 9999),
        usual=Usual(Range(1900, 2200), "the year of the inventory"),
    )
    period_years: int = key(
        "int",
        10,
        "years",
        "Length of one period.",
        check=Range(1, 100),
        usual=Usual(
            Range(1, 20),
            "periods of 5 to 10 years are common practice; longer ones blur harvest ages",
        ),
    )
    periods: int = key(
        "int", 20, "", "Number of periods in the horizon.", check=Range(1, MAX_PERIODS)
    )
    harvest_timing: str = key(
        "choice",
        "midpoint",
        "",
        "Moment within a period at which its harvest is taken and ages are judged.",
        choices=TIMINGS,
    )


@dataclass(frozen=True)
class FieldMap:
    """``[inventory.fields]``: the layer's names of the fields the tool reads."""

    stand_id: str = key("str", doc="Layer field holding a unique stand identifier.")
    species: str = key("str", doc="Layer field holding the species code.")
    site_index: str = key("str", doc="Layer field holding the site index [m].")
    age: str = key("str", doc="Layer field holding the stand age [years] at start_year.")
    zone: str | None = key("str", None, doc="Layer field holding a zone name (optional).")


@dataclass(frozen=True)
class RasterFill:
    """``[inventory.from_raster]``: stand values filled from a raster by zonal mean."""

    site_index: Path | None = key(
        "str", None, "m", "Raster of site index to fill stand values by zonal mean."
    )
    band: int = key("int", 1, "", "Band of the raster to read.", check=Range(1, 65535))


@dataclass(frozen=True)
class InventoryConfig:
    """``[inventory]``: the stand layer and how its fields map onto the tool's."""

    path: Path = key("str", doc="Stand layer file, relative to the scenario file.")
    fields: FieldMap  # [inventory.fields]
    layer: str | None = key("str", None, doc="Layer name; may be left out if the file has one.")
    crs: str | None = key(
        "str", None, doc="CRS of the layer (e.g. 'EPSG:32633'), only if it has none."
    )
    raster_wins: bool = key(
        "bool", False, "", "Raster values replace layer values (else they fill gaps)."
    )
    from_raster: RasterFill = field(default_factory=RasterFill)


@dataclass(frozen=True)
class BufferBy:
    """A buffer width per class of an overlay field."""

    field: str
    widths_m: Mapping[str, float]


@dataclass(frozen=True)
class NetdownStep:
    """``[[landbase.steps]]``: one netdown step; ``kind`` is one of STEP_KINDS."""

    number: int  # 1-based position in the scenario
    kind: str
    label: str = key("str", doc="Name of the step in the netdown table.")
    where: str | None = key("str", None, doc="Attribute rule: stands matching it are removed.")
    layer: Path | None = key(
        "str", None, doc="Overlay vector file (polygons, or lines/points with a buffer)."
    )
    layer_name: str | None = key("str", None, doc="Layer inside the overlay file.")
    buffer_m: float | None = key(
        "float",
        None,
        "m",
        "Buffer around every overlay feature.",
        check=_non_negative,
        usual=Usual(
            Range(0, 500), "riparian and other reserve buffers are tens of metres per side"
        ),
    )
    buffer_by: BufferBy | None = key(
        "table", None, "", "Buffer width by class: field and widths_m."
    )
    raster: Path | None = key("str", None, doc="Raster mask file.")
    band: int = key("int", 1, "", "Band of the raster mask.", check=Range(1, 65535))
    above: float | None = key(
        "float",
        None,
        "raster units",
        "Remove the part of the stand where the raster exceeds this.",
        check=_finite,
    )
    percent: float | None = key(
        "float", None, "%", "Flat deduction of the remaining area.", check=Range(0, 100)
    )


@dataclass(frozen=True)
class LandbaseConfig:
    """``[landbase]``: the netdown."""

    steps: tuple[NetdownStep, ...] = key("steps", (), "", "Netdown steps, applied in order.")
    write_harvestable_layer: bool = key(
        "bool", False, "", "Also write the netted geometry as a layer."
    )


@dataclass(frozen=True)
class CoverTarget:
    """``[[cover]]``: an old-forest floor (older_than_years, min_share) or a young-forest
    ceiling (younger_than_years, max_share) in one zone or all (``"*"``)."""

    zone: str = key("str", "*", "", "Zone the target applies to; '*' for all together.")
    older_than_years: float | None = key(
        "float",
        None,
        "years",
        "Old-forest target: area at least this old ...",
        check=_non_negative,
    )
    min_share: float | None = key(
        "float", None, "fraction", "... is at least this share.", check=_share
    )
    younger_than_years: float | None = key(
        "float",
        None,
        "years",
        "Young-forest limit: area younger than this ...",
        check=_positive,
    )
    max_share: float | None = key(
        "float", None, "fraction", "... is at most this share.", check=_share
    )

    @property
    def kind(self) -> str:
        """``"old"`` or ``"young"``."""
        return "old" if self.older_than_years is not None else "young"

    @property
    def age_years(self) -> float:
        age = self.older_than_years if self.kind == "old" else self.younger_than_years
        assert age is not None, "checked when the scenario was loaded"
        return age

    @property
    def share(self) -> float:
        share = self.min_share if self.kind == "old" else self.max_share
        assert share is not None, "checked when the scenario was loaded"
        return share


@dataclass(frozen=True)
class DisturbanceConfig:
    """``[disturbance]``: stand-replacing disturbance and its Monte Carlo replicates."""

    annual_rate: float = key(
        "float",
        0.0,
        "1/year",
        "Stand-replacing disturbance rate on unharvested area.",
        check=_fraction_below_one,
        usual=Usual(
            Range(0, 0.02),
            "reported stand-replacing fire rates are about 0.3% to 0.7% a year in boreal forests",
        ),
    )
    replicates: int = key(
        "int",
        0,
        "",
        "Monte Carlo replicates (0: expected values only).",
        check=Range(0, 100_000),
        usual=Usual(Range(0, 1000), "each replicate is one more simulated horizon"),
    )
    seed: int = key("int", 1, "", "Seed of the Monte Carlo draws.", check=Range(0, 2**32 - 1))


@dataclass(frozen=True)
class ReportConfig:
    """``[report]``: what the report and the map outputs show."""

    # resolved when parsed: never empty afterwards
    age_class_years: tuple[int, ...] | None = key(
        "floats",
        None,
        "year",
        "Years at which age classes and stand ages are reported (period boundaries; "
        "default: the start, each quarter of the horizon and its end).",
    )
    age_class_width_years: float = key(
        "float",
        20.0,
        "years",
        "Width of an age class.",
        check=_positive,
        usual=Usual(Range(1, 50), "age classes of 10 or 20 years are common practice"),
    )
    map_layers: bool = key(
        "bool", True, "", "Per-period harvest and per-year age layers in projection.gpkg."
    )
    raster_cell_m: float | None = key(
        "float",
        None,
        "m",
        "Also write GeoTIFFs of first harvest period and ages at this cell size.",
        check=_positive,
        usual=Usual(Range(1, 1000), "stand maps are drawn at cells of metres to tens of metres"),
    )
    markdown: bool = key("bool", False, "", "Also write the report as Markdown.")


@dataclass(frozen=True)
class EconomicsConfig:
    """``[economics]``: discounting."""

    discount_rate: float | None = key(
        "float",
        None,
        "1/year",
        "Real discount rate.",
        check=Range(0, 1, lo_open=True, hi_open=True),
        usual=Usual(Range(0, 0.15), "real rates of 2% to 8% are common practice"),
    )
    compounding: str = key(
        "choice", "continuous", "", "Discounting convention.", choices=COMPOUNDING
    )


@dataclass(frozen=True)
class GrowthConfig:
    """``[growth]``: how far and how finely curves are searched."""

    max_age_years: float = key(
        "float",
        400.0,
        "years",
        "Oldest age searched for culmination and rotations.",
        check=Range(1, MAX_AGE_YEARS),
        usual=Usual(Range(1, 1000), "few stands live longer"),
    )
    yield_class_step: float = key(
        "float",
        2.0,
        "m3/ha/yr",
        "Step to which maximum MAI is rounded for the yield class.",
        check=_positive,
    )
    rule_site_step_m: float = key(
        "float", 0.1, "m", "Site index rounding for per-site harvest-age rules.", check=_positive
    )

    def search(self) -> Search:
        return Search(self.max_age_years, self.yield_class_step, self.rule_site_step_m)


@dataclass(frozen=True)
class SpeciesConfig:
    """``[species.<CODE>]``: a species' (or analysis unit's) curve, rules, costs, products."""

    code: str
    curve: str = key("choice", doc="Yield curve family.", choices=CURVES)
    a: float | None = key(
        "float",
        None,
        "m3/ha",
        "Asymptote (chapman-richards, schumacher, logistic, gompertz) at the reference site.",
        check=_positive,
        usual=_VOLUME_USUAL,
    )
    k: float | None = key(
        "float",
        None,
        "1/year",
        "Rate (chapman-richards, logistic, gompertz).",
        check=_positive,
        usual=Usual(Range(0, 1), "fitted rates are a few hundredths a year"),
    )
    c: float | None = key(
        "float",
        None,
        "",
        "Chapman-Richards shape exponent.",
        check=_positive,
        usual=Usual(Range(0.5, 10), "fitted shape exponents lie between about 1 and 6"),
    )
    b: float | None = key(
        "float", None, "", "Schumacher b [years]; logistic / gompertz b [-].", check=_positive
    )
    r: float | None = key(
        "float",
        None,
        "1/year",
        "Intrinsic growth rate of a stock-growth model.",
        check=_positive,
        usual=Usual(Range(0, 2), "a stock that more than triples in a year is no forest"),
    )
    capacity_m3_ha: float | None = key(
        "float",
        None,
        "m3/ha",
        "Carrying capacity K of a stock model.",
        check=_positive,
        usual=_VOLUME_USUAL,
    )
    initial_m3_ha: float | None = key(
        "float", None, "m3/ha", "Stock at age 0 of a stock model.", check=_positive
    )
    min_viable_m3_ha: float | None = key(
        "float",
        None,
        "m3/ha",
        "Minimum viable stock of stock-threshold (0 < m < K).",
        check=_positive,
    )
    site_index_ref_m: float | None = key(
        "float",
        None,
        "m",
        "Reference site index of the parameters; leave out for no site dependence.",
        check=_positive,
        usual=_SITE_USUAL,
    )
    site_exponent_a: float = key(
        "float",
        1.0,
        "",
        "Volume scales with (SI / site_index_ref_m) to this power.",
        check=_finite,
        usual=_EXPONENT_USUAL,
    )
    site_exponent_k: float = key(
        "float",
        0.0,
        "",
        "Age runs faster by (SI / site_index_ref_m) to this power.",
        check=_finite,
        usual=_EXPONENT_USUAL,
    )
    ages: tuple[float, ...] | None = key(
        "floats",
        None,
        "years",
        "Table curve: ages, strictly increasing.",
        check=Range(0, MAX_AGE_YEARS),
    )
    # one row per site class
    volumes_m3_ha: tuple[tuple[float, ...], ...] | None = key(
        "volumes",
        None,
        "m3/ha",
        "Table curve: volume at each age (one array per site class).",
        check=_non_negative,
        usual=_VOLUME_USUAL,
    )
    site_classes_m: tuple[float, ...] | None = key(
        "floats",
        None,
        "m",
        "Table curve: site index of each row of volumes_m3_ha.",
        check=_positive,
        usual=_SITE_USUAL,
    )
    table_csv: Path | None = key(
        "str",
        None,
        "",
        "Table curve from a CSV file (columns age_years, volume_m3_ha and optionally "
        "site_index_m), relative to the scenario file.",
    )
    min_harvest_age: float | None = key(
        "float",
        None,
        "years",
        "Youngest age that may be cut.",
        check=Range(0, MAX_AGE_YEARS),
    )
    min_harvest_mai_share: float | None = key(
        "float",
        None,
        "fraction",
        "Youngest age at which MAI reaches this share of its maximum.",
        check=Range(0, 1, lo_open=True),
    )
    min_harvest_volume_m3_ha: float | None = key(
        "float",
        None,
        "m3/ha",
        "Youngest age with at least this volume.",
        check=_positive,
        usual=_VOLUME_USUAL,
    )
    min_harvest_economic: bool = key(
        "bool", False, "", "Not before the Faustmann (LEV-maximising) rotation."
    )
    regen_delay_years: float = key(
        "float",
        0.0,
        "years",
        "Years from harvest until the new stand starts at age 0.",
        check=Range(0, MAX_AGE_YEARS),
        usual=Usual(Range(0, 30), "regeneration delays of 0 to 5 years are common practice"),
    )
    site_index_min_m: float | None = key(
        "float", None, "m", "Lowest site index the curve is valid for.", check=_positive
    )
    site_index_max_m: float | None = key(
        "float", None, "m", "Highest site index the curve is valid for.", check=_positive
    )
    price_per_m3: float | None = key(
        "float", None, "currency/m3", "Net price of harvested wood.", check=_non_negative
    )
    regen_cost_per_ha: float = key(
        "float",
        0.0,
        "currency/ha",
        "Regeneration cost at the start of each rotation.",
        check=_non_negative,
    )
    annual_cost_per_ha: float = key(
        "float", 0.0, "currency/ha/yr", "Annual cost.", check=_non_negative
    )
    products: ProductSplit | None = key(
        "table", None, "", "Product split by age: ages and one share array per product."
    )

    def yield_curve(self) -> YieldCurve:
        """The yield curve this table describes (a family of growth.curves.FAMILIES)."""
        params = {name: getattr(self, name) for name in _CURVE_FIELDS}
        site = SiteScaling(self.site_index_ref_m, self.site_exponent_a, self.site_exponent_k)
        return make_curve(self.curve, params, site)

    def age_rules(self) -> AgeRules:
        return AgeRules(
            self.min_harvest_age,
            self.min_harvest_mai_share,
            self.min_harvest_volume_m3_ha,
            self.min_harvest_economic,
        )

    def money(self, economics: EconomicsConfig) -> Money:
        return Money(
            self.price_per_m3,
            self.regen_cost_per_ha,
            self.annual_cost_per_ha,
            economics.discount_rate,
            economics.compounding,
        )


@dataclass(frozen=True)
class HarvestConfig:
    """``[harvest]``: the cutting order, the area cap and the spatial rules."""

    priority: str = key(
        "choice",
        "oldest",
        "",
        "Order in which eligible stands are cut.",
        choices=tuple(PRIORITIES),
    )
    max_area_ha_per_period: float | None = key(
        "float", None, "ha", "Cap on the area harvested in one period.", check=_positive
    )
    greenup_years: float = key(
        "float",
        0.0,
        "years",
        "A stand cut less than this long ago blocks its neighbours (0: no spatial rules).",
        check=_non_negative,
        usual=Usual(Range(0, 50), "green-up takes a few to about twenty years"),
    )
    max_opening_ha: float | None = key(
        "float",
        None,
        "ha",
        "Largest opening (contiguous area cut within the green-up window); 0 = unit "
        "restriction (no two neighbours).",
        check=_non_negative,
    )
    adjacency: str = key(
        "choice", "edge", "", "Which stands are neighbours.", choices=ADJACENCY_MODES
    )
    separation_m: float = key(
        "float",
        0.0,
        "m",
        "Stands within this distance are neighbours too.",
        check=_non_negative,
        usual=Usual(Range(0, 1000), "separation distances are tens to hundreds of metres"),
    )

    @property
    def spatial(self) -> bool:
        return self.greenup_years > 0


@dataclass(frozen=True)
class FlowConfig:
    """``[flow]``: the flow policy, the ending stock and the harvest LP."""

    policy: str = key("choice", "even", "", "Flow policy.", choices=tuple(FLOW_POLICIES))
    band: float = key(
        "float",
        0.0,
        "fraction",
        "Allowed change of harvest between consecutive periods (0.1 = +/-10%).",
        check=_fraction_below_one,
    )
    ending_stock: float = key(
        "float",
        1.0,
        "fraction",
        "Growing stock at the end of the horizon must be at least this share of the initial.",
        check=_non_negative,
        usual=Usual(Range(0, 2), "above 2 the forest must more than double its stock"),
    )
    step_down_max: float = key(
        "float",
        0.1,
        "fraction",
        "stepdown: largest drop from one period to the next.",
        check=Range(0, 1, lo_open=True, hi_open=True),
    )
    targets_m3: tuple[float, ...] | None = key(
        "floats",
        None,
        "m3/period",
        "targets: the harvest target of each period.",
        check=_non_negative,
    )
    long_term_periods: int | None = key(
        "int",
        None,
        "periods",
        "stepdown: periods over which the long-term level must hold the harvestable growing "
        "stock (default: a quarter of the horizon, at least 2).",
        check=_positive,
    )
    method: str = key(
        "choice",
        "rules",
        "",
        "rules: the rule-based scheduler; optimize: the harvest LP, mapped to stands.",
        choices=METHODS,
    )
    objective: str = key("choice", "max-even-flow", "", "LP objective.", choices=OBJECTIVES)
    terminal_value: str = key(
        "choice",
        "none",
        "",
        "max-npv: value of the standing forest at the horizon's end.",
        choices=TERMINAL_VALUES,
    )
    lp_bound: bool = key("bool", True, "", "rules: also solve the LP as an upper bound.")
    lp_site_class_m: float = key(
        "float", 1.0, "m", "LP strata: site index class width.", check=_positive
    )
    lp_age_class_years: float = key(
        "float",
        5.0,
        "years",
        "LP strata: age class width.",
        check=_positive,
        usual=Usual(Range(0, 20), "wider classes blur the ages the LP harvests at"),
    )


_CURVE_FIELDS = sorted({p for f in FAMILIES.values() for p in f.parameters} | _TABLE_PARAMS)

# Section name -> key name -> spec, read off the dataclasses. "species.*" applies to every
# species table.
KEYS: dict[str, dict[str, KeySpec]] = {
    "scenario": keys_of(ScenarioInfo),
    "inventory": keys_of(InventoryConfig),
    "inventory.from_raster": keys_of(RasterFill),
    "inventory.fields": keys_of(FieldMap),
    "landbase": keys_of(LandbaseConfig),
    "landbase.steps": keys_of(NetdownStep),
    "cover": keys_of(CoverTarget),
    "disturbance": keys_of(DisturbanceConfig),
    "report": keys_of(ReportConfig),
    "species.*": keys_of(SpeciesConfig),
    "economics": keys_of(EconomicsConfig),
    "growth": keys_of(GrowthConfig),
    "harvest": keys_of(HarvestConfig),
    "flow": keys_of(FlowConfig),
}


@dataclass(frozen=True)
class Scenario:
    """A parsed, checked scenario. ``source`` is the scenario file (None if built in code)."""

    scenario: ScenarioInfo
    inventory: InventoryConfig
    species: Mapping[str, SpeciesConfig]
    harvest: HarvestConfig = field(default_factory=HarvestConfig)
    flow: FlowConfig = field(default_factory=FlowConfig)
    economics: EconomicsConfig = field(default_factory=EconomicsConfig)
    growth: GrowthConfig = field(default_factory=GrowthConfig)
    landbase: LandbaseConfig = field(default_factory=LandbaseConfig)
    cover: tuple[CoverTarget, ...] = ()
    disturbance: DisturbanceConfig = field(default_factory=DisturbanceConfig)
    report: ReportConfig = field(default_factory=ReportConfig)
    source: Path | None = None
    overrides: tuple[str, ...] = ()
    # [[sensitivity]] cases: (name, the dotted keys it sets, the scenario it makes)
    sensitivity: tuple[tuple[str, Mapping[str, Any], Scenario], ...] = ()
    # values that are possible but unusual (see KeySpec.usual), for the run to report
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        """The resolved scenario as plain JSON-able data (paths as strings)."""

        def clean(obj: Any) -> Any:
            if isinstance(obj, dict):
                return {k: clean(v) for k, v in obj.items()}
            if isinstance(obj, list | tuple):
                return [clean(v) for v in obj]
            if isinstance(obj, Path):
                return str(obj)
            if isinstance(obj, Mapping):
                return {k: clean(v) for k, v in obj.items()}
            return obj

        cases = [{"name": n, "set": dict(sets)} for n, sets, _ in self.sensitivity]
        plain = clean(asdict(replace(self, sensitivity=())))
        del plain["warnings"]  # what the run found, not what the user set
        return {**plain, "sensitivity": cases}


# ----------------------------------------------------------------------------- parsing


# ----------------------------------------------------------------------------- parsing
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
    if parts in (["cover"], ["sensitivity"]) and isinstance(value, list):
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
        str(code): _species(code, tbl, base_dir, where, economics)
        for code, tbl in species_raw.items()
    }
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
        disturbance,
        _report(raw.get("report", {}), info, where),
        source,
        overrides,
        _sensitivity(raw, base_dir, where, source),
    )


def _inventory(inv_raw: dict[str, Any], base_dir: Path, where: str) -> InventoryConfig:
    """``[inventory]`` with its ``fields`` and ``from_raster`` tables; paths resolved."""
    vals = _take(
        {k: v for k, v in inv_raw.items() if k not in ("fields", "from_raster")}, "inventory", where
    )
    if "fields" not in inv_raw:
        raise ScenarioError(f"{where}: missing table [inventory.fields]")
    fields = FieldMap(**_take(inv_raw["fields"], "inventory.fields", where))
    rasters = _take(inv_raw.get("from_raster", {}), "inventory.from_raster", where)
    site = rasters["site_index"]
    fill = RasterFill((base_dir / site).resolve() if site else None, rasters["band"])
    path = (base_dir / vals["path"]).resolve()
    return InventoryConfig(**{**vals, "path": path, "fields": fields, "from_raster": fill})


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
    code: str, raw: Any, base_dir: Path, where: str, economics: EconomicsConfig
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
    if curve == "stock-threshold" and not vals["min_viable_m3_ha"] < vals["capacity_m3_ha"]:
        raise ScenarioError(
            f"{where}: [{sect}] min_viable_m3_ha = {vals['min_viable_m3_ha']:g} must be below "
            f"capacity_m3_ha = {vals['capacity_m3_ha']:g}"
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
    return SpeciesConfig(code=str(code), **vals)


def _table_curve(vals: dict[str, Any], sect: str, base_dir: Path, where: str) -> None:
    """Resolve a table curve's ages, volumes (one row per class) and classes in place."""
    if vals["table_csv"] is not None:
        if any(vals[k] is not None for k in ("ages", "volumes_m3_ha", "site_classes_m")):
            raise ScenarioError(
                f"{where}: [{sect}] give either table_csv or ages and volumes_m3_ha, not both"
            )
        csv_path = (base_dir / vals["table_csv"]).resolve()
        vals["table_csv"] = csv_path
        vals["ages"], vals["volumes_m3_ha"], vals["site_classes_m"] = _read_table_csv(csv_path)
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


def _read_table_csv(
    path: Path,
) -> tuple[tuple[float, ...], tuple[tuple[float, ...], ...], tuple[float, ...] | None]:
    """Read a yield table CSV: age_years, volume_m3_ha and optionally site_index_m (long form)."""
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
    table: dict[float, list[tuple[float, float]]] = {}
    for n, row in enumerate(rows, start=2):
        try:
            site = float(row["site_index_m"]) if with_site else 1.0
            age, vol = float(row["age_years"]), float(row["volume_m3_ha"])
        except (TypeError, ValueError):
            raise ScenarioError(
                f"{path}, line {n}: {dict(row)} holds a value that is not a number"
            ) from None
        if not all(math.isfinite(v) for v in (site, age, vol)) or site <= 0:
            raise ScenarioError(
                f"{path}, line {n}: {dict(row)}: every value must be a finite number "
                "(and a site index > 0)"
            )
        table.setdefault(site, []).append((age, vol))
    classes = sorted(table)
    ages = tuple(a for a, _ in table[classes[0]])
    for site in classes:
        if tuple(a for a, _ in table[site]) != ages:
            raise ScenarioError(
                f"{path}: site class {site:g} lists other ages than class {classes[0]:g}; "
                "every class needs the same ages"
            )
    vols = tuple(tuple(v for _, v in table[site]) for site in classes)
    return ages, vols, (tuple(classes) if with_site else None)


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
    extra = {"fields", "from_raster"} if spec_name == "inventory" else set()
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
