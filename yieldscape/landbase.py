"""Land base netdown: from gross stand area to the harvestable land base.

Steps run in the scenario's order, each removing only area that earlier steps left. Per stand
the netdown keeps the *remaining geometry* (what vector steps have not cut away) and the
*remaining area* [ha]:

- ``where`` (attribute rule): a matching stand loses all its remaining area;
- ``layer`` (overlay, buffered or not): the part of the remaining geometry that intersects the
  overlay is cut away exactly (shapely 2, STRtree candidates, vectorised intersections and
  per-stand unions);
- ``raster`` (mask): the share of the remaining geometry's cells whose value is above the
  threshold (cell-centre rule, see :mod:`yieldscape.zonal`) is removed from the remaining area;
- ``percent``: that percentage of the remaining area is removed.

Raster and percent steps remove area, not geometry, so a later vector step scales what it cuts
by remaining area / area of the remaining geometry: earlier raster and percent removals are
taken as spread evenly over the stand. A netdown of vector and attribute steps only is exact.
Areas come from geometry ratios times the stand's ``area_ha``, so any CRS works; buffers are
built in metres (a geographic layer is netted in a local equal-area projection).

The excluded area still grows and counts in growing stock; it is only never cut.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from yieldscape.config import NetdownStep
from yieldscape.errors import InputError
from yieldscape.expressions import evaluate_where
from yieldscape.geometry import invalid_mask, metres_per_unit, repair, work_crs
from yieldscape.io.rasters import RasterData
from yieldscape.zonal import zonal

CRUMB_HA = 1e-4  # harvestable area under 1 m2 is an artefact of an overlay's edge
_GROUP = 64  # pieces per stand unioned in one vectorised call; larger groups one by one


class NetdownError(InputError):
    """A netdown step that cannot be applied as written."""


@dataclass(frozen=True)
class Netdown:
    """The outcome: per-stand removals, the harvestable area and the netdown table."""

    gross_ha: np.ndarray
    removed_ha: np.ndarray  # (steps, stands)
    harvestable_ha: np.ndarray
    remaining_geometry: np.ndarray  # in the stands' CRS
    table: pd.DataFrame
    notes: tuple[str, ...] = field(default_factory=tuple)
    warnings: tuple[str, ...] = field(default_factory=tuple)


# ----------------------------------------------------------------------------- geometry
def overlay_cut(remaining: np.ndarray, overlay: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per stand: the union of its remaining geometry's intersections with the overlay, and
    what is left of the geometry. Candidates come from an STRtree; intersections and unions
    are vectorised (groups of pieces padded into a 2-D array for ``union_all(axis=1)``)."""
    n = len(remaining)
    cut = np.array([None] * n, dtype=object)
    if not len(overlay) or not n:
        return cut, remaining.copy()
    tree = shapely.STRtree(overlay)
    si, oj = tree.query(remaining, predicate="intersects")
    if not len(si):
        return cut, remaining.copy()
    pieces = shapely.intersection(remaining[si], overlay[oj])
    keep = shapely.area(pieces) > 0
    si, pieces = si[keep], pieces[keep]
    order = np.argsort(si, kind="stable")
    si, pieces = si[order], pieces[order]
    stands, start, counts = np.unique(si, return_index=True, return_counts=True)
    small = counts <= _GROUP
    if small.any():
        width = int(counts[small].max())
        grid = np.full((int(small.sum()), width), None, dtype=object)
        rows = np.repeat(np.arange(small.sum()), counts[small])
        cols = np.arange(len(rows)) - np.repeat(
            np.cumsum(counts[small]) - counts[small], counts[small]
        )
        take = np.concatenate(
            [np.arange(s, s + c) for s, c in zip(start[small], counts[small], strict=True)]
        )
        grid[rows, cols] = pieces[take]
        cut[stands[small]] = shapely.union_all(grid, axis=1)
    for stand, s, c in zip(stands[~small], start[~small], counts[~small], strict=True):
        cut[stand] = shapely.union_all(pieces[s : s + c])  # rare: stands with many pieces
    left = remaining.copy()
    hit = np.flatnonzero(cut != None)  # noqa: E711 - element-wise test on an object array
    left[hit] = shapely.difference(remaining[hit], cut[hit])
    return cut, left


def buffer_overlay(
    frame: gpd.GeoDataFrame, step: NetdownStep, unit_m: float, where: str
) -> np.ndarray:
    """Overlay geometries with the step's buffer (metres, converted to CRS units)."""
    geoms = frame.geometry.to_numpy()
    if step.buffer_by is not None:
        by = step.buffer_by
        if by.field not in frame.columns:
            raise NetdownError(
                f"{where}: buffer_by field {by.field!r} is not in the "
                f"layer; its fields: {', '.join(map(str, frame.columns))}"
            )
        classes = frame[by.field].astype(str).to_numpy()
        missing = sorted(set(classes) - set(by.widths_m))
        if missing:
            raise NetdownError(
                f"{where}: buffer_by has no width for class "
                f"{missing[0]!r} of field {by.field!r}; "
                f"widths given for: {', '.join(by.widths_m)}"
            )
        width = np.array([by.widths_m[c] for c in classes])
    else:
        width = np.full(len(geoms), step.buffer_m or 0.0)
    gtype = shapely.get_type_id(geoms)
    lines = ~np.isin(gtype, (3, 6))
    if (lines & (width <= 0)).any():
        raise NetdownError(
            f"{where}: the layer has lines or points; give a buffer_m or "
            "buffer_by width > 0 so they cover area"
        )
    out = geoms.copy()
    grow = width > 0
    out[grow] = shapely.buffer(geoms[grow], width[grow] / unit_m, quad_segs=8)
    return out[~(shapely.is_empty(out) | shapely.is_missing(out))]


# ----------------------------------------------------------------------------- the netdown
@dataclass
class _State:
    geom: np.ndarray  # remaining geometry, work CRS
    geom_area: np.ndarray  # its planar area, work CRS units
    area_ha: np.ndarray  # remaining area


OverlayReader = Callable[[NetdownStep, pyproj.CRS], gpd.GeoDataFrame]
RasterReader = Callable[[NetdownStep, np.ndarray, pyproj.CRS], tuple[RasterData | None, np.ndarray]]


def apply_netdown(
    stands: gpd.GeoDataFrame,
    steps: tuple[NetdownStep, ...],
    fields: Mapping[str, pd.Series],
    read_overlay: OverlayReader,
    read_raster: RasterReader,
    strict: bool = False,
) -> Netdown:
    """Run the steps over the stands (see the module docstring).

    ``read_overlay(step, crs)`` returns the step's layer in ``crs``; ``read_raster(step,
    geoms, crs)`` returns the raster window over the geometries and the geometries in the
    raster's CRS (None if they do not overlap). Both are file readers injected by the
    pipeline, so this module opens no file. Invalid overlay geometries are repaired as stand
    geometries are (:mod:`yieldscape.geometry`), or rejected with ``strict``.
    """
    return netdown_by_partition(
        [stands], steps, lambda _: fields, read_overlay, read_raster, strict, eager=True
    )


def netdown_by_partition(
    partitions: Iterable[gpd.GeoDataFrame],
    steps: tuple[NetdownStep, ...],
    fields_of: Callable[[gpd.GeoDataFrame], Mapping[str, pd.Series]],
    read_overlay: OverlayReader,
    read_raster: RasterReader,
    strict: bool = False,
    work: pyproj.CRS | None = None,
    keep_geometry: bool = True,
    eager: bool = False,
) -> Netdown:
    """:func:`apply_netdown` over a stand layer given as partitions (frames with ``area_ha``
    in one CRS, taken one at a time: the files of a partitioned GeoParquet dataset, or slices
    of one frame), each netted alone. A stand's netdown depends on its own geometry and
    fields only, so the result is the in-memory one, stand for stand; each overlay is read
    and buffered once, a raster read over each partition's extent.

    ``fields_of(partition)`` gives the fields a ``where`` rule may name. ``work`` is the
    metric work CRS (default: that of the first partition, which is the layer's own CRS when
    projected; for a layer in degrees give the whole layer's, as the local equal-area
    projection depends on the extent). Without ``keep_geometry`` the remaining geometry is
    dropped after each partition (``remaining_geometry`` is then empty): for a stand layer
    larger than memory. ``eager`` raises a raster step's errors from the first partition that
    has them (:func:`apply_netdown`: one partition); otherwise they are raised only when no
    partition overlaps the raster, or none has data."""
    overlays = _Overlays(read_overlay, strict)
    parts: list[_Part] = []
    crs = None
    for frame in partitions:
        if crs is None:
            crs = pyproj.CRS.from_user_input(frame.crs)
            work = work if work is not None else work_crs(crs, frame.geometry.to_numpy())
        assert work is not None
        parts.append(
            _netdown_part(frame, steps, fields_of(frame), overlays, read_raster, work, eager)
        )
        if keep_geometry:
            parts[-1].geom = _to_crs(parts[-1].geom, work, crs)
        else:
            parts[-1].geom = np.empty(0, dtype=object)
    if not parts:
        raise NetdownError("the stand layer has no partitions")
    gross = np.concatenate([p.gross for p in parts])
    removed = np.concatenate([p.removed for p in parts], axis=1)
    area = np.concatenate([p.area_ha for p in parts])
    notes = _step_notes(steps, np.sum([p.tally for p in parts], axis=0))
    warnings = list(overlays.warnings)
    crumbs = (area > 0) & (area < CRUMB_HA) & (gross >= CRUMB_HA)
    if crumbs.any():
        warnings.append(
            f"{int(crumbs.sum())} stands keep less than 1 m2 of harvestable area after the "
            f"netdown (the smallest {float(area[crumbs].min()):.3g} ha): crumbs an "
            "overlay's edge left (is it drawn along the stand boundaries?); they are cut, if "
            "at all, as whole parts"
        )
    return Netdown(
        gross,
        removed,
        area,
        np.concatenate([p.geom for p in parts]),
        netdown_table(gross, removed, steps),
        tuple(notes),
        tuple(warnings),
    )


def netdown_in_parts(
    stands: gpd.GeoDataFrame,
    rows: list[int],
    steps: tuple[NetdownStep, ...],
    fields_of: Callable[[gpd.GeoDataFrame], Mapping[str, pd.Series]],
    read_overlay: OverlayReader,
    read_raster: RasterReader,
    strict: bool = False,
) -> Netdown:
    """The netdown of ``stands`` in consecutive parts of ``rows`` stands each (the partitions
    of the layer they were read from), with the working memory of one part; the same result
    as :func:`apply_netdown`, to which one part (or rows not adding up) goes."""
    if len(rows) <= 1 or sum(rows) != len(stands):
        return apply_netdown(stands, steps, fields_of(stands), read_overlay, read_raster, strict)
    ends = np.cumsum(rows)
    return netdown_by_partition(
        (stands.iloc[end - n : end] for n, end in zip(rows, ends, strict=True)),
        steps,
        fields_of,
        read_overlay,
        read_raster,
        strict,
        work=work_crs(pyproj.CRS.from_user_input(stands.crs), stands.geometry.to_numpy()),
    )


def _where(step: NetdownStep) -> str:
    return f"[[landbase.steps]] #{step.number} {step.label!r}"


def _to_crs(geoms: np.ndarray, src: pyproj.CRS, dst: pyproj.CRS) -> np.ndarray:
    return geoms if src == dst else gpd.GeoSeries(geoms, crs=src).to_crs(dst).to_numpy()


class _Overlays:
    """Each layer step's overlay, read, repaired and buffered once (at first use)."""

    def __init__(self, read: OverlayReader, strict: bool) -> None:
        self.read, self.strict = read, strict
        self.prepared: dict[int, np.ndarray] = {}
        self.warnings: list[str] = []

    def get(self, step: NetdownStep, wcrs: pyproj.CRS) -> np.ndarray:
        if step.number not in self.prepared:
            where = _where(step)
            frame = _valid_overlay(self.read(step, wcrs), self.strict, where, self.warnings)
            self.prepared[step.number] = buffer_overlay(frame, step, metres_per_unit(wcrs), where)
        return self.prepared[step.number]


# per step of a partition: stands hit by the layer; over the raster (0/1); any live stand
# covered by the raster's data (0/1); live stands not covered
_HIT, _OVER, _COVERED, _MISSING = range(4)


@dataclass
class _Part:
    gross: np.ndarray
    removed: np.ndarray  # (steps, stands)
    area_ha: np.ndarray
    geom: np.ndarray  # remaining geometry, work CRS
    tally: np.ndarray  # (steps, 4), see _HIT


def _netdown_part(
    stands: gpd.GeoDataFrame,
    steps: tuple[NetdownStep, ...],
    fields: Mapping[str, pd.Series],
    overlays: _Overlays,
    read_raster: RasterReader,
    wcrs: pyproj.CRS,
    eager: bool,
) -> _Part:
    """The steps over one partition's stands (in the work CRS ``wcrs``)."""
    gross = stands["area_ha"].to_numpy(dtype=np.float64)
    geoms = _to_crs(stands.geometry.to_numpy(), pyproj.CRS.from_user_input(stands.crs), wcrs)
    state = _State(geoms.copy(), shapely.area(geoms), gross.copy())
    removed = np.zeros((len(steps), len(gross)))
    tally = np.zeros((len(steps), 4), dtype=np.int64)
    for k, step in enumerate(steps):
        before = state.area_ha.copy()
        if step.kind == "where":
            assert step.where is not None
            hit = evaluate_where(step.where, fields, _where(step))
            state.area_ha[hit] = 0.0
            state.geom[hit] = shapely.Polygon()
            state.geom_area[hit] = 0.0
        elif step.kind == "percent":
            state.area_ha *= 1.0 - (step.percent or 0.0) / 100.0
        elif step.kind == "layer":
            tally[k, _HIT] = _cut_layer(state, overlays.get(step, wcrs))
        elif step.kind == "raster":
            tally[k] = _mask_raster(state, step, read_raster, wcrs, eager)
        removed[k] = before - state.area_ha
    return _Part(gross, removed, state.area_ha, state.geom, tally)


def _cut_layer(state: _State, overlay: np.ndarray) -> int:
    """Cut the overlay out of the remaining geometry; the number of stands it hits."""
    cut, left = overlay_cut(state.geom, overlay)
    hit = np.flatnonzero(cut != None)  # noqa: E711
    cut_area = shapely.area(cut[hit])
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(
            state.geom_area[hit] > 0, np.minimum(cut_area / state.geom_area[hit], 1.0), 0.0
        )
    state.area_ha[hit] *= 1.0 - share
    state.geom = left
    state.geom_area = shapely.area(left)
    gone = hit[state.geom_area[hit] <= 1e-12 * np.maximum(cut_area, 1e-300)]
    state.area_ha[gone] = 0.0  # wholly inside the overlay: no rounding residue
    return len(hit)


def _mask_raster(
    state: _State, step: NetdownStep, read_raster: RasterReader, wcrs: pyproj.CRS, eager: bool
) -> np.ndarray:
    """Remove the share of each stand's cells above the threshold; the step's tally."""
    tally = np.zeros(4, dtype=np.int64)
    live = state.area_ha > 0
    raster, in_raster_crs = read_raster(step, state.geom, wcrs)
    if raster is None:
        if eager:
            raise NetdownError(_no_overlap(step))
        tally[_MISSING] = live.sum()
        return tally
    z = zonal(in_raster_crs, raster, threshold=step.above)
    covered = bool(z.covered[live].any())
    if eager and not covered:
        raise NetdownError(_no_data(step))
    tally[_OVER], tally[_COVERED] = 1, covered
    tally[_MISSING] = (live & ~z.covered).sum()
    state.area_ha *= 1.0 - z.fraction_above()
    return tally


def _no_overlap(step: NetdownStep) -> str:
    return f"{_where(step)}: {step.raster}: the raster does not overlap the stands"


def _no_data(step: NetdownStep) -> str:
    return f"{_where(step)}: {step.raster}: the raster holds no data over the stands"


def _step_notes(steps: tuple[NetdownStep, ...], tally: np.ndarray) -> list[str]:
    """The notes of the steps over all partitions, in step order (and the raster errors no
    partition could tell alone)."""
    notes = []
    for k, step in enumerate(steps):
        where = _where(step)
        if step.kind == "layer" and not tally[k, _HIT]:
            notes.append(f"{where}: the layer touches no stand; nothing removed")
        elif step.kind == "raster":
            if not tally[k, _OVER]:
                raise NetdownError(_no_overlap(step))
            if not tally[k, _COVERED]:
                raise NetdownError(_no_data(step))
            if tally[k, _MISSING]:
                assert step.raster is not None
                notes.append(
                    f"{where}: {int(tally[k, _MISSING])} stands are not covered by "
                    f"{step.raster.name} (outside it or nodata); nothing removed from them"
                )
    return notes


def _valid_overlay(
    frame: gpd.GeoDataFrame, strict: bool, where: str, warnings: list[str]
) -> gpd.GeoDataFrame:
    """The overlay with invalid geometries repaired (a warning names them), or an error with
    ``strict``. Features are named by their 1-based position in the layer."""
    geoms = frame.geometry.to_numpy()
    bad = invalid_mask(geoms)
    if not bad.any():
        return frame
    pos = frame.index.to_numpy()[bad] + 1
    why = shapely.is_valid_reason(geoms[bad])
    shown = "; ".join(f"feature {p}: {w}" for p, w in zip(pos[:5], why[:5], strict=True))
    more = f" and {len(pos) - 5} more" if len(pos) > 5 else ""
    if strict:
        raise NetdownError(
            f"{where}: {int(bad.sum())} invalid overlay geometries (--strict): {shown}{more}"
        )
    warnings.append(
        f"{where}: {int(bad.sum())} invalid overlay geometries repaired with make_valid "
        f"({shown}{more}); mend them in the source, or use --strict to reject them"
    )
    out = frame.copy()
    out[out.geometry.name] = gpd.GeoSeries(repair(geoms, bad), index=frame.index, crs=frame.crs)
    return out


def netdown_table(
    gross: np.ndarray, removed: np.ndarray, steps: tuple[NetdownStep, ...]
) -> pd.DataFrame:
    """step, label, removed_ha, percent_of_gross, remaining_ha; then the harvestable row."""
    total = float(gross.sum())
    rem = removed.sum(axis=1)
    remaining = total - np.cumsum(rem)
    pct = (lambda a: a / total * 100.0) if total > 0 else (lambda a: a * 0.0)
    rows = pd.DataFrame(
        {
            "step": pd.array([s.number for s in steps], dtype="Int64"),
            "label": [s.label for s in steps],
            "removed_ha": rem,
            "percent_of_gross": pct(rem),
            "remaining_ha": remaining,
            "kind": [s.kind for s in steps],
        }
    )
    harvestable = total - float(rem.sum())
    last = pd.DataFrame(
        {
            "step": pd.array([pd.NA], dtype="Int64"),
            "label": ["harvestable land base"],
            "removed_ha": [np.nan],
            "percent_of_gross": [pct(np.array([harvestable]))[0]],
            "remaining_ha": [harvestable],
            "kind": ["harvestable"],
        }
    )
    return pd.concat([rows, last], ignore_index=True)


def with_netdown_columns(
    stands: gpd.GeoDataFrame, netdown: Netdown, steps: tuple[NetdownStep, ...]
) -> gpd.GeoDataFrame:
    """The stand table with the netdown after ``area_ha``: ``gross_ha``, what each step removed
    (``removed_step<N>_ha``) and ``harvestable_ha``; the geometry stays last."""
    stands = stands.copy()
    geom = stands.geometry.name
    extra = {"gross_ha": netdown.gross_ha}
    for step, removed in zip(steps, netdown.removed_ha, strict=True):
        extra[f"removed_step{step.number}_ha"] = removed
    extra["harvestable_ha"] = netdown.harvestable_ha
    at = list(stands.columns).index("area_ha") + 1
    for offset, (name, values) in enumerate(extra.items()):
        stands.insert(at + offset, name, values)
    return stands[[c for c in stands.columns if c != geom] + [geom]]


def where_fields(stands: gpd.GeoDataFrame, fields_map: Mapping[str, str | None]) -> dict:
    """Fields a netdown rule may name: the stand table's own, and the layer's names for the
    standard ones (``fields_map``: standard name -> the layer's name)."""
    fields = {c: stands[c] for c in stands.columns if c != stands.geometry.name}
    for ours, theirs in fields_map.items():
        if theirs is not None and theirs not in fields:
            fields[theirs] = stands[ours]
    return fields
