"""Harvest partitions in the rule-based scheduler: shares (or amounts) of each period's
regional harvest volume that the stands a condition selects must yield (a minimum) or may
yield at most (a maximum).

A part counts in partition k where ``member[stand, code, k]``: the condition is read on the
stand's attributes with the code it grows as, so a stand regenerated as another code may
enter or leave a partition. Each period the pick first cuts toward each minimum from that
partition's candidates (management units one after the other, each within its own target,
while some of the minimum is still needed), then toward the targets from every candidate; a
candidate of a partition whose maximum its cut would pass is left out of the pick (whole: the
maximum is kept, perhaps by less than a stand's volume). The period's volumes are then
checked against every limit; a limit missed fails the period, as a missed floor does, naming
the partition.
"""

from __future__ import annotations

import ast
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Protocol

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from yieldscape.expressions import evaluate_where

_REL = 1e-9


@dataclass(frozen=True)
class PartitionRules:
    """The partitions' names, membership (stands x codes x partitions) and limits, one value
    per partition each (NaN: no such limit): shares of the period's harvest volume and
    amounts [m3 per period]."""

    names: tuple[str, ...]
    member: NDArray[np.bool_]
    min_share: NDArray
    max_share: NDArray
    min_m3: NDArray
    max_m3: NDArray

    @property
    def n(self) -> int:
        return len(self.names)

    def of_parts(self, stand: NDArray, code: NDArray) -> NDArray[np.bool_]:
        """Which partitions each part counts in (parts x partitions)."""
        # rows of the (stand, code) pairs, taken from the flat table: many times faster than
        # indexing the 3-d array by two arrays (a view where the table is contiguous)
        _, C, K = self.member.shape
        rows = np.asarray(stand, dtype=np.intp) * C + code
        return np.take(self.member.reshape(-1, K), rows, axis=0)

    def minimum(self, harvest_m3: float) -> NDArray:
        """Each partition's least volume [m3] of a period harvesting ``harvest_m3``."""
        share = _times(np.nan_to_num(self.min_share, nan=0.0), harvest_m3)
        return np.maximum(share, np.nan_to_num(self.min_m3, nan=0.0))

    def maximum(self, harvest_m3: float) -> NDArray:
        """Each partition's most volume [m3] of a period harvesting ``harvest_m3``."""
        out = np.full(self.n, np.inf)
        has = ~np.isnan(self.max_share)
        out[has] = _times(self.max_share[has], harvest_m3)
        return np.minimum(out, np.where(np.isnan(self.max_m3), np.inf, self.max_m3))

    def first_broken(self, volume_m3: NDArray, harvest_m3: float) -> tuple[int, float, float]:
        """The first limit the period's partition volumes break: the partition, its volume
        and the limit [m3] (partition -1: none)."""
        low = self.minimum(harvest_m3)
        high = self.maximum(harvest_m3)
        for k in range(self.n):
            v = float(volume_m3[k])
            if v < low[k] * (1 - 1e-7) - 1e-6:
                return k, v, float(low[k])
            if v > high[k] * (1 + 1e-7) + 1e-6:
                return k, v, float(high[k])
        return -1, 0.0, 0.0

    def broken(self, volume_m3: NDArray, harvest_m3: float) -> str:
        """The first limit the period's partition volumes break, in words ("" for none)."""
        k, v, limit = self.first_broken(volume_m3, harvest_m3)
        if k < 0:
            return ""
        share = v / harvest_m3 if harvest_m3 > 0 else 0.0
        side = "below its minimum" if v < limit else "above its maximum"
        return (
            f"partition {self.names[k]!r} yields {v:,.0f} m3 ({share:.1%} of the harvest), "
            f"{side} of {limit:,.0f} m3"
        )


class PartitionSpec(Protocol):
    """What a partition is asked as (a ``[[partitions]]`` table): its name, its ``where`` rule
    and its limits (None: none)."""

    name: str
    where: str
    min_share: float | None
    max_share: float | None
    min_m3: float | None
    max_m3: float | None


def partition_rules(
    specs: Sequence[PartitionSpec],
    fields: Mapping[str, pd.Series],
    codes: Sequence[str],
    where: str,
) -> PartitionRules:
    """The partitions of ``specs`` over stands with these ``fields`` (the stand layer's
    attributes and ``unit``, ``zone``): each ``where`` rule read once per code with
    ``species`` as that code (once for all codes where the rule does not name ``species``).
    ``where`` prefixes a rule's error (the file)."""
    n = len(next(iter(fields.values())))
    member = np.zeros((n, len(codes), len(specs)), dtype=bool)
    for k, spec in enumerate(specs):
        at = f"{where}: [[partitions]] {spec.name!r}"
        names = _names(spec.where)
        if "species" not in names:
            member[:, :, k] = evaluate_where(spec.where, fields, at)[:, None]
            continue
        for c, code in enumerate(codes):
            as_code = {**fields, "species": pd.Series([code] * n, dtype=object)}
            member[:, c, k] = evaluate_where(spec.where, as_code, at)
    limits = [
        np.array([np.nan if getattr(s, key) is None else float(getattr(s, key)) for s in specs])
        for key in ("min_share", "max_share", "min_m3", "max_m3")
    ]
    return PartitionRules(tuple(s.name for s in specs), member, *limits)


def _names(expr: str) -> set[str]:
    """The field names a rule reads (none where it does not parse: evaluate_where says so)."""
    try:
        tree = ast.parse(expr, mode="eval")
    except SyntaxError:
        return set()
    return {x.id for x in ast.walk(tree) if isinstance(x, ast.Name)}


def _times(share: NDArray, harvest_m3: float) -> NDArray:
    """share x harvest, with 0 x an unbounded harvest (a trial's) taken as 0."""
    out = np.zeros(len(share))
    pos = share > 0
    out[pos] = share[pos] * harvest_m3
    return out


def within_maximum(
    net_m3: NDArray, member: NDArray[np.bool_], room_m3: NDArray
) -> NDArray[np.bool_]:
    """Which candidates (in priority order, their volumes ``net_m3`` and memberships) the pick
    may keep: for each partition with a finite maximum (``room_m3`` left this period), its
    candidates while the volume of its candidates up to and including each is within the
    room. (Counting every earlier member as cut, the test is conservative where a rule of the
    pick refuses one.)"""
    keep = np.ones(len(net_m3), dtype=bool)
    for k in np.flatnonzero(np.isfinite(room_m3)):
        mk = member[:, k]
        cum = np.cumsum(np.where(mk, net_m3, 0.0))
        keep &= ~mk | (cum <= room_m3[k] * (1 + _REL))
    return keep
