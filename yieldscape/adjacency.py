"""The stand adjacency graph, from the polygons.

Two stands are neighbours when their boundaries share a line (``"edge"``: the DE-9IM
boundary/boundary intersection is one-dimensional, pattern ``****1****``), or touch at all
(``"edge-or-corner"``), or, with a separation distance, lie within that distance of each other.
Candidates come from one STRtree ``intersects`` (or ``dwithin``) query over all stands; the edge
test runs vectorised on the candidate pairs only (a plain ``touches`` query is several times
slower, and about half of a tessellation's touching pairs meet only at a corner).

The graph is returned as compressed sparse rows (``indptr``, ``indices``), symmetric.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely
from numpy.typing import NDArray
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from yieldscape.geometry import metres_per_unit, metric_geometries
from yieldscape.io.cache import cached_arrays

MODES = ("edge", "edge-or-corner")


@dataclass(frozen=True)
class Adjacency:
    """Symmetric neighbour lists of n stands in CSR form."""

    indptr: NDArray[np.int64]
    indices: NDArray[np.int64]

    @property
    def n(self) -> int:
        return len(self.indptr) - 1

    @property
    def pairs(self) -> int:
        return len(self.indices) // 2

    @cached_property
    def csr32(self) -> tuple[NDArray[np.int32], NDArray[np.int32]]:
        """``indptr`` and ``indices`` as 32-bit integers: half the memory traffic for the
        compiled spatial pick, whose time goes mostly to cache misses on these arrays."""
        if len(self.indices) >= 2**31:
            return self.indptr, self.indices  # too many pairs for 32 bits
        return self.indptr.astype(np.int32), self.indices.astype(np.int32)

    def neighbours(self, i: int) -> NDArray[np.int64]:
        return self.indices[self.indptr[i] : self.indptr[i + 1]]

    @classmethod
    def from_pairs(cls, n: int, i: NDArray, j: NDArray) -> Adjacency:
        rows = np.r_[i, j]
        cols = np.r_[j, i]
        m = coo_matrix((np.ones(len(rows), dtype=np.int8), (rows, cols)), shape=(n, n)).tocsr()
        m.sum_duplicates()
        m.sort_indices()
        return cls(m.indptr.astype(np.int64), m.indices.astype(np.int64))

    def components(self, members: NDArray[np.bool_]) -> NDArray[np.int64]:
        """Connected-component label of each member stand over the graph (-1 elsewhere)."""
        idx = np.flatnonzero(members)
        out = np.full(self.n, -1, dtype=np.int64)
        if not len(idx):
            return out
        pos = np.full(self.n, -1, dtype=np.int64)
        pos[idx] = np.arange(len(idx))
        # the members' rows only (the same pairs, in the same order, as a pass over all rows)
        start = self.indptr[idx]
        deg = self.indptr[idx + 1] - start
        rows = np.repeat(np.arange(len(idx)), deg)
        cols = self.indices[np.repeat(start - np.cumsum(deg) + deg, deg) + np.arange(len(rows))]
        keep = members[cols]
        sub = coo_matrix(
            (np.ones(int(keep.sum()), dtype=np.int8), (rows[keep], pos[cols[keep]])),
            shape=(len(idx), len(idx)),
        )
        _, labels = connected_components(sub, directed=False)
        out[idx] = labels
        return out


def build_adjacency(geoms: NDArray, mode: str = "edge", separation: float = 0.0) -> Adjacency:
    """Neighbours of every stand; ``separation`` in the geometries' CRS units (0: touching)."""
    if mode not in MODES:
        raise ValueError(f"adjacency mode {mode!r}: choose one of {', '.join(MODES)}")
    tree = shapely.STRtree(geoms)
    if separation > 0:
        i, j = tree.query(geoms, predicate="dwithin", distance=separation)
    else:
        i, j = tree.query(geoms, predicate="intersects")
    keep = i < j
    i, j = i[keep], j[keep]
    if separation <= 0 and mode == "edge" and len(i):
        edge = shapely.relate_pattern(geoms[i], geoms[j], "****1****")
        i, j = i[edge], j[edge]
    return Adjacency.from_pairs(len(geoms), i, j)


def stand_adjacency(
    stands: gpd.GeoDataFrame,
    source: Path,
    layer: str | None,
    mode: str = "edge",
    separation_m: float = 0.0,
) -> tuple[Adjacency, bool]:
    """The adjacency graph of the stands (in a metre-based CRS), from the on-disk cache when
    the stand file ``source`` and the options are unchanged; and whether it was cached."""
    geoms, wcrs = metric_geometries(stands)
    separation = separation_m / metres_per_unit(wcrs)

    def build() -> dict[str, np.ndarray]:
        adj = build_adjacency(geoms, mode, separation)
        return {"indptr": adj.indptr, "indices": adj.indices}

    options = f"adjacency|{layer}|{mode}|{separation_m}|{len(geoms)}"
    arrays, hit = cached_arrays("adjacency", source, options, build)
    return Adjacency(arrays["indptr"], arrays["indices"]), hit
