"""Management units and harvest partitions in the harvest LP (:mod:`yieldscape.schedule.lp`).

A region's stands belong to management units (licences, owners, districts), each with a flow
of its own; partitions ask a share (or an amount) of each period's regional harvest from the
stands a condition selects. In the Model II LP (Johnson & Scheurman 1977, For. Sci. Monogr.
18) each unit gets its own harvest accounting rows H_(u,p), flow rows and ending-stock row,
while the cover targets and the area cap stay regional rows over every column: the zone-wise
flow rows of a Model II with several ownerships or zones, a standard extension (Davis, Johnson,
Bettinger & Howard 2001, *Forest Management*, 4th ed., ch. 14, from memory). A partition is a
row per period on the harvest of its columns (cuts and the thinnings taken while a column
stands): sum_(c in k) v_c x_c - s H_p >= 0 for a minimum share s (<= 0 for a maximum), or
sum >= (<=) an amount.

The LP's columns are strata and regeneration groups, so no stratum (and no regrowth) may
straddle two units or two memberships of a partition: stands are grouped into *cells*, each
one unit and one membership, and the strata and their regrowth never leave their cell. A
partition's condition may name the species, which a regeneration changes: a cell keeps a
membership per code, and a column of code c counts in partition k where ``member[cell, c, k]``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray


@dataclass(frozen=True)
class UnitFlow:
    """A management unit's flow: its name, flow policy (an LP flow policy: ``even``,
    ``nondeclining``, ``none``), band and ending stock (share of the unit's initial growing
    stock)."""

    name: str
    policy: str = "even"
    band: float = 0.0
    ending_stock: float = 1.0


@dataclass(frozen=True)
class Partition:
    """A partition of each period's regional harvest volume: the stands its condition
    selects yield at least ``min_share`` (at most ``max_share``) of it, or at least ``min_m3``
    (at most ``max_m3``) m3 per period. ``None``: no such limit."""

    name: str
    min_share: float | None = None
    max_share: float | None = None
    min_m3: float | None = None
    max_m3: float | None = None

    def limits(self) -> list[tuple[str, float]]:
        """The partition's limits as (key, value) pairs, in a fixed order."""
        keys = ("min_share", "max_share", "min_m3", "max_m3")
        return [(k, float(getattr(self, k))) for k in keys if getattr(self, k) is not None]


@dataclass(frozen=True)
class Cells:
    """Stands grouped by unit and partition membership. ``of_stand``: each stand's cell;
    ``unit``: each cell's unit; ``member``: (cells, codes, partitions) whether a cell's area of
    each code counts in each partition."""

    of_stand: NDArray[np.int64]
    unit: NDArray[np.int64]
    member: NDArray[np.bool_]

    @property
    def n(self) -> int:
        return len(self.unit)

    @classmethod
    def single(cls, n_stands: int, n_codes: int) -> Cells:
        """One cell: one unit, no partition."""
        return cls(
            np.zeros(n_stands, dtype=np.int64),
            np.zeros(1, dtype=np.int64),
            np.zeros((1, n_codes, 0), dtype=bool),
        )


def make_cells(stand_unit: NDArray, member: NDArray) -> Cells:
    """The cells of stands with these units (codes 0 .. U-1) and memberships ((stands, codes,
    partitions) bool: whether the stand's area, as each code, counts in each partition)."""
    n, C, K = member.shape
    key = np.column_stack([np.asarray(stand_unit, dtype=np.int64), member.reshape(n, C * K)])
    uniq, of_stand = np.unique(key, axis=0, return_inverse=True)
    return Cells(
        of_stand.reshape(-1).astype(np.int64),
        uniq[:, 0].astype(np.int64),
        uniq[:, 1:].reshape(len(uniq), C, K).astype(bool),
    )
