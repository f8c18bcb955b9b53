"""The scenario's sections as frozen dataclasses, every key a field declared with
:func:`yieldscape.config.keys.key` (stated once: type, unit, default, meaning, ranges), and the
:class:`Scenario` that holds them. :data:`KEYS` is read off the fields."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from yieldscape.config.keys import (
    _EXPONENT_USUAL,
    _SITE_USUAL,
    _VOLUME_USUAL,
    KeySpec,
    Range,
    Usual,
    _finite,
    _fraction_below_one,
    _non_negative,
    _positive,
    _share,
    key,
    keys_of,
)
from yieldscape.growth.curves import FAMILIES, SiteScaling, YieldCurve, make_curve
from yieldscape.growth.products import ProductSplit
from yieldscape.growth.rules import AgeRules, Money, Search
from yieldscape.policies import FLOW_POLICIES, PRIORITIES

CURVE_PARAMETERS: dict[str, tuple[str, ...]] = {n: f.parameters for n, f in FAMILIES.items()}
CURVES = tuple(CURVE_PARAMETERS)
COMPOUNDING = ("continuous", "annual")
TIMINGS = ("start", "midpoint", "end")
ADJACENCY_MODES = ("edge", "edge-or-corner")
METHODS = ("rules", "optimize")
OBJECTIVES = ("max-even-flow", "max-volume", "max-npv")
TERMINAL_VALUES = ("none", "standing")
OUTPUT_FORMATS = ("gpkg", "geoparquet")
GEOPARQUET_GEOMETRY = ("wkb", "native")

# Hard limits: beyond them a value is not a forest-planning input but a slip.
# older than any tree known (bristlecone pines, about 4,800 years; from memory)
MAX_AGE_YEARS = 5000.0
MAX_HORIZON_YEARS = 1000  # a timber supply horizon is 100 to 250 years (common practice)
MAX_PERIODS = MAX_HORIZON_YEARS


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
    "units",
    "partitions",
    "disturbance",
    "report",
    "output",
    "sensitivity",
)
STEP_KINDS = ("where", "layer", "raster", "percent")
_ALL_PARAMETERS = {k for keys in CURVE_PARAMETERS.values() for k in keys}
_SITE_KEYS = {"site_index_ref_m", "site_exponent_a", "site_exponent_k"}
_TABLE_KEYS = {"ages", "volumes_m3_ha", "table_csv", "site_classes_m", "thinning_m3_ha"}
_TABLE_PARAMS = {"ages", "volumes_m3_ha", "site_classes_m"}  # what a table curve is built of


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
    unit: str | None = key(
        "str",
        None,
        doc="Layer field holding the management unit of each stand (optional; see [[units]]).",
    )


@dataclass(frozen=True)
class RasterFill:
    """``[inventory.from_raster]``: stand values filled from a raster by zonal mean."""

    site_index: Path | None = key(
        "str", None, "m", "Raster of site index to fill stand values by zonal mean."
    )
    band: int = key("int", 1, "", "Band of the raster to read.", check=Range(1, 65535))


@dataclass(frozen=True)
class AnalysisUnit:
    """``[[inventory.analysis_units]]``: stands matching ``where`` grow as ``species``."""

    where: str = key(
        "str", doc="Attribute rule over the stand layer's fields (as a land base where rule)."
    )
    species: str = key("str", doc="The code (a [species.<CODE>] table) the matching stands take.")


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
    # [[inventory.analysis_units]], in order: a stand takes the code of the first it matches
    analysis_units: tuple[AnalysisUnit, ...] = ()


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
class UnitConfig:
    """``[[units]]``: a management unit's own flow; units without a table follow [flow]."""

    name: str = key("str", doc="The unit: a value of the stand layer's unit field.")
    policy: str | None = key(
        "choice",
        None,
        "",
        "The unit's flow policy (default: flow.policy).",
        choices=tuple(FLOW_POLICIES),
    )
    band: float | None = key(
        "float",
        None,
        "fraction",
        "The unit's band (default: flow.band).",
        check=Range(0, 1, hi_open=True),
    )
    ending_stock: float | None = key(
        "float",
        None,
        "fraction",
        "The unit's ending growing stock as a share of its initial (default: flow.ending_stock).",
        check=_non_negative,
    )
    targets_m3: tuple[float, ...] | None = key(
        "floats",
        None,
        "m3/period",
        "targets: the unit's harvest target of each period (default: flow.targets_m3).",
        check=_non_negative,
    )


@dataclass(frozen=True)
class PartitionConfig:
    """``[[partitions]]``: a share (or an amount) of each period's regional harvest volume
    that the stands a condition selects must (or may at most) yield."""

    name: str = key("str", doc="The partition's name (in messages and the constraints table).")
    where: str = key(
        "str",
        doc="Rule over the stand layer's fields and species, unit and zone (as a land base "
        "where rule).",
    )
    min_share: float | None = key(
        "float", None, "fraction", "At least this share of each period's harvest.", check=_share
    )
    max_share: float | None = key(
        "float", None, "fraction", "At most this share of each period's harvest.", check=_share
    )
    min_m3: float | None = key(
        "float", None, "m3/period", "At least this volume in each period.", check=_non_negative
    )
    max_m3: float | None = key(
        "float", None, "m3/period", "At most this volume in each period.", check=_non_negative
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
    figures: bool = key(
        "bool",
        True,
        "",
        "Draw the figures (figures/, embedded in the report); false for quick batch runs.",
    )


@dataclass(frozen=True)
class OutputConfig:
    """``[output]``: the format of the stand and harvest layers."""

    format: str = key(
        "choice",
        "gpkg",
        "",
        "Format of the stand and harvest layers: one GeoPackage (projection.gpkg) or "
        "GeoParquet files (stands.parquet, harvests.parquet).",
        choices=OUTPUT_FORMATS,
    )
    geoparquet_geometry: str = key(
        "choice",
        "wkb",
        "",
        "Geometry encoding of the GeoParquet layers: WKB, which every GeoParquet reader reads "
        "(GDAL >= 3.5), or 'native', GeoParquet 1.1's GeoArrow encoding of a layer of one "
        "geometry type (smaller, faster to read; GDAL >= 3.9, geopandas >= 1.0), WKB where "
        "the layer mixes types.",
        choices=GEOPARQUET_GEOMETRY,
    )


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
class Regeneration:
    """What a clearcut part of a code regrows as: ``kind`` "as" (one code), "split" (the cut
    area splits in ``shares``) or "choice" (the harvest LP chooses among ``codes``; the
    rule-based scheduler takes the first)."""

    kind: str
    codes: tuple[str, ...]
    shares: tuple[float, ...]

    def default_shares(self) -> tuple[tuple[str, float], ...]:
        """(code, share) pairs the rule-based scheduler regrows a cut into."""
        if self.kind == "choice":
            return ((self.codes[0], 1.0),)
        return tuple(zip(self.codes, self.shares, strict=True))


@dataclass(frozen=True)
class Thinning:
    """``[[species.<CODE>.thinnings]]``: at ``age_years`` a share of the standing volume is
    removed; the stand keeps its curve's gross increment (constant-increment assumption)."""

    age_years: float = key(
        "float",
        unit="years",
        doc="Age at which the stand is thinned.",
        check=Range(0, MAX_AGE_YEARS, lo_open=True),
    )
    removal_share: float = key(
        "float",
        unit="fraction",
        doc="Share of the standing volume the thinning removes.",
        check=Range(0, 1, lo_open=True, hi_open=True),
        usual=Usual(Range(0.05, 0.5), "thinnings take about 10% to 40% of the standing volume"),
    )


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
        check=Range(0, 100_000, lo_open=True),
        usual=_VOLUME_USUAL,
    )
    initial_m3_ha: float | None = key(
        "float", None, "m3/ha", "Stock at age 0 of a stock model.", check=_positive
    )
    min_viable_m3_ha: float | None = key(
        "float",
        None,
        "m3/ha",
        "Minimum viable stock m of stock-minimum and stock-threshold (0 < m < K).",
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
    regenerate_as: Regeneration | None = key(
        "regeneration",
        None,
        "",
        "What a clearcut part regrows as: a code, a table of code = share, or an array of "
        "codes for the harvest LP to choose among (default: this code).",
    )
    thinning_m3_ha: tuple[tuple[float, ...], ...] | None = key(
        "volumes",
        None,
        "m3/ha",
        "Table curve: volume removed by thinning at each age (one array per site class).",
        check=_non_negative,
        usual=_VOLUME_USUAL,
    )
    thinnings: tuple[Thinning, ...] = key(
        "thinnings", (), "", "Thinnings by age ([[species.<CODE>.thinnings]])."
    )

    def yield_curve(self) -> YieldCurve:
        """The yield curve this table describes (a family of growth.curves.FAMILIES): the
        gross (total) yield, standing volume plus everything thinned so far. A table with
        removals lists the stand after thinning; its total yield adds the removals up to each
        age (as published yield tables of managed stands give total production)."""
        params = {name: getattr(self, name) for name in _CURVE_FIELDS}
        if self.thinning_m3_ha is not None:
            params["volumes_m3_ha"] = tuple(
                tuple(float(v) for v in np.asarray(vols) + np.cumsum(thin))
                for vols, thin in zip(self.volumes_m3_ha or (), self.thinning_m3_ha, strict=True)
            )
        site = SiteScaling(self.site_index_ref_m, self.site_exponent_a, self.site_exponent_k)
        return make_curve(self.curve, params, site)

    @property
    def thinned(self) -> bool:
        return bool(self.thinnings) or self.thinning_m3_ha is not None

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
    lp_bound: bool = key(
        "bool",
        True,
        "",
        "rules: also solve the LP of the same problem as a bound, and search in its order.",
    )
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
    "inventory.analysis_units": keys_of(AnalysisUnit),
    "landbase": keys_of(LandbaseConfig),
    "landbase.steps": keys_of(NetdownStep),
    "cover": keys_of(CoverTarget),
    "units": keys_of(UnitConfig),
    "partitions": keys_of(PartitionConfig),
    "disturbance": keys_of(DisturbanceConfig),
    "report": keys_of(ReportConfig),
    "output": keys_of(OutputConfig),
    "species.*": keys_of(SpeciesConfig),
    "species.*.thinnings": keys_of(Thinning),
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
    units: tuple[UnitConfig, ...] = ()
    partitions: tuple[PartitionConfig, ...] = ()
    disturbance: DisturbanceConfig = field(default_factory=DisturbanceConfig)
    report: ReportConfig = field(default_factory=ReportConfig)
    output: OutputConfig = field(default_factory=OutputConfig)
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
