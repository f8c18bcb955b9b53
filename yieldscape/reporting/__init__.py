"""Reporting: turn a simulation into the tables and layers users read."""

from yieldscape.reporting.tables import (
    harvests_layer,
    stands_layer,
    wood_flow_by_product,
    wood_flow_table,
)

__all__ = ["harvests_layer", "stands_layer", "wood_flow_by_product", "wood_flow_table"]
