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

from yieldscape.config.keys import KeySpec, Range, Usual, key, keys_of
from yieldscape.config.model import (
    ADJACENCY_MODES,
    COMPOUNDING,
    CURVE_PARAMETERS,
    CURVES,
    KEYS,
    MAX_AGE_YEARS,
    MAX_HORIZON_YEARS,
    MAX_PERIODS,
    SECTIONS,
    STEP_KINDS,
    TIMINGS,
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
    RasterFill,
    ReportConfig,
    Scenario,
    ScenarioInfo,
    SpeciesConfig,
)
from yieldscape.config.parse import (
    apply_override,
    boundary_years,
    load_scenario,
    note,
    parse_scenario,
)

__all__ = [
    "ADJACENCY_MODES",
    "COMPOUNDING",
    "CURVES",
    "CURVE_PARAMETERS",
    "KEYS",
    "MAX_AGE_YEARS",
    "MAX_HORIZON_YEARS",
    "MAX_PERIODS",
    "SECTIONS",
    "STEP_KINDS",
    "TIMINGS",
    "BufferBy",
    "CoverTarget",
    "DisturbanceConfig",
    "EconomicsConfig",
    "FieldMap",
    "FlowConfig",
    "GrowthConfig",
    "HarvestConfig",
    "InventoryConfig",
    "KeySpec",
    "LandbaseConfig",
    "NetdownStep",
    "Range",
    "RasterFill",
    "OutputConfig",
    "ReportConfig",
    "Scenario",
    "ScenarioInfo",
    "SpeciesConfig",
    "Usual",
    "apply_override",
    "boundary_years",
    "key",
    "keys_of",
    "load_scenario",
    "note",
    "parse_scenario",
]
