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

import ast
import operator
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from yieldscape.config import NetdownStep
from yieldscape.errors import InputError
from yieldscape.geometry import invalid_mask, repair
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


# ----------------------------------------------------------------------------- expressions
_CMP = {
    ast.Eq: operator.eq,
    ast.NotEq: operator.ne,
    ast.Lt: operator.lt,
    ast.LtE: operator.le,
    ast.Gt: operator.gt,
    ast.GtE: operator.ge,
}
_FLIP = {
    ast.Lt: ast.Gt,
    ast.LtE: ast.GtE,
    ast.Gt: ast.Lt,
    ast.GtE: ast.LtE,
    ast.Eq: ast.Eq,
    ast.NotEq: ast.NotEq,
}
_ARITH = {
    ast.Add: operator.add,
    ast.Sub: operator.sub,
    ast.Mult: operator.mul,
    ast.Div: operator.truediv,
}
_FUNCS = {"isnull": lambda s: s.isna(), "notnull": lambda s: s.notna()}


def evaluate_where(expr: str, fields: Mapping[str, pd.Series], where: str) -> np.ndarray:
    """Evaluate an attribute rule over stand fields to a boolean array.

    Syntax (a safe subset of Python expressions): field names; numbers and quoted strings;
    comparisons ``== != < <= > >=`` (chains allowed); ``in [...]`` / ``not in [...]``;
    ``and``, ``or``, ``not``; ``+ - * /`` and parentheses; ``isnull(FIELD)``,
    ``notnull(FIELD)``. A comparison with a null value is false.

    >>> import pandas as pd
    >>> fields = {"COVER": pd.Series(["forest", "rock", None]), "AGE": pd.Series([80, 30, 120])}
    >>> evaluate_where("COVER in ['wetland', 'rock'] or AGE > 100", fields, "step 1").tolist()
    [False, True, True]
    >>> evaluate_where("COVER == 'forest'", fields, "step 1").tolist()  # null: false
    [True, False, False]
    """
    try:
        tree = ast.parse(expr, mode="eval")
    except SyntaxError as exc:
        raise NetdownError(
            f"{where}: where = {expr!r} does not parse ({exc.msg} at column {exc.offset})"
        ) from None

    def ev(node: ast.AST):  # noqa: ANN202 - returns Series, scalar or list
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.BoolOp):
            vals = [np.asarray(_truth(ev(v)), dtype=bool) for v in node.values]
            op = np.logical_and if isinstance(node.op, ast.And) else np.logical_or
            out = vals[0]
            for v in vals[1:]:
                out = op(out, v)
            return out
        if isinstance(node, ast.UnaryOp):
            val = ev(node.operand)
            if isinstance(node.op, ast.Not):
                return ~np.asarray(_truth(val), dtype=bool)
            if isinstance(node.op, ast.USub):
                try:
                    return -val
                except TypeError:
                    raise NetdownError(
                        f"{where}: where = {expr!r}: {ast.unparse(node)!r} negates text"
                    ) from None
        if isinstance(node, ast.Compare):
            left = ev(node.left)
            out = None
            for op, comp in zip(node.ops, node.comparators, strict=True):
                right = ev(comp)
                if isinstance(op, ast.In | ast.NotIn):
                    if not isinstance(right, list):
                        raise NetdownError(
                            f"{where}: where = {expr!r}: 'in' needs a list, "
                            "e.g. SPP in ['fir', 'pine']"
                        )
                    res = pd.Series(left).isin(right).to_numpy()
                    res = ~res if isinstance(op, ast.NotIn) else res
                    res = res & pd.Series(left).notna().to_numpy()
                elif type(op) in _CMP:
                    try:
                        if isinstance(left, pd.Series):
                            res = _CMP[type(op)](left, right)
                        elif isinstance(right, pd.Series):
                            res = _CMP[_FLIP[type(op)]](right, left)
                        else:
                            raise NetdownError(
                                f"{where}: where = {expr!r} compares two constants; name a field"
                            )
                    except TypeError:
                        raise NetdownError(
                            f"{where}: where = {expr!r}: cannot compare text with a number"
                        ) from None
                    res = pd.Series(res).fillna(False).to_numpy(dtype=bool)
                else:
                    break
                out = res if out is None else out & res
                left = right
            else:
                return out
        if isinstance(node, ast.BinOp) and type(node.op) in _ARITH:
            left, right = ev(node.left), ev(node.right)
            try:
                return _ARITH[type(node.op)](left, right)
            except (TypeError, ValueError):
                raise NetdownError(
                    f"{where}: where = {expr!r}: {ast.unparse(node)!r} mixes text and numbers "
                    "(or a list); arithmetic needs numeric fields"
                ) from None
        if isinstance(node, ast.Name):
            if node.id not in fields:
                raise NetdownError(
                    f"{where}: where = {expr!r} names field {node.id!r}, which "
                    f"the stands do not have; fields: {', '.join(fields)}"
                )
            return fields[node.id]
        if isinstance(node, ast.Constant) and isinstance(node.value, int | float | str):
            return node.value
        if isinstance(node, ast.List | ast.Tuple):
            return [ev(e) for e in node.elts]
        if (
            isinstance(node, ast.Call)
            and isinstance(node.func, ast.Name)
            and node.func.id in _FUNCS
            and len(node.args) == 1
        ):
            return _FUNCS[node.func.id](pd.Series(ev(node.args[0]))).to_numpy()
        raise NetdownError(
            f"{where}: where = {expr!r}: {ast.unparse(node)!r} is not allowed "
            "(see docs/scenario.md for the expression syntax)"
        )

    result = np.asarray(_truth(ev(tree)), dtype=bool)
    n = len(next(iter(fields.values())))
    if result.shape != (n,):
        raise NetdownError(
            f"{where}: where = {expr!r} must compare fields (it gives a single value)"
        )
    return result


def _truth(value):  # noqa: ANN001, ANN202
    if isinstance(value, pd.Series):
        if value.dtype == bool:
            return value.to_numpy()
        raise NetdownError(f"a field alone is not a condition; compare it ({value.name!r})")
    return value


# ----------------------------------------------------------------------------- geometry
def work_crs(crs: pyproj.CRS, geoms: np.ndarray) -> pyproj.CRS:
    """A metre-based CRS for buffers: the layer's own if projected, else a local LAEA."""
    if not crs.is_geographic:
        return crs
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    return pyproj.CRS.from_proj4(
        f"+proj=laea +lat_0={(y0 + y1) / 2} +lon_0={(x0 + x1) / 2} +ellps=WGS84 +units=m"
    )


def metric_geometries(frame: gpd.GeoDataFrame) -> tuple[np.ndarray, pyproj.CRS]:
    """The frame's geometries in its metre-based work CRS (see :func:`work_crs`), and that
    CRS."""
    crs = pyproj.CRS.from_user_input(frame.crs)
    geoms = frame.geometry.to_numpy()
    wcrs = work_crs(crs, geoms)
    return (geoms if wcrs == crs else frame.geometry.to_crs(wcrs).to_numpy()), wcrs


def metres_per_unit(crs: pyproj.CRS) -> float:
    return crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0


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
    if step.buffer_field is not None:
        assert step.buffer_widths_m is not None
        if step.buffer_field not in frame.columns:
            raise NetdownError(
                f"{where}: buffer_by field {step.buffer_field!r} is not in the "
                f"layer; its fields: {', '.join(map(str, frame.columns))}"
            )
        classes = frame[step.buffer_field].astype(str).to_numpy()
        missing = sorted(set(classes) - set(step.buffer_widths_m))
        if missing:
            raise NetdownError(
                f"{where}: buffer_by has no width for class "
                f"{missing[0]!r} of field {step.buffer_field!r}; "
                f"widths given for: {', '.join(step.buffer_widths_m)}"
            )
        width = np.array([step.buffer_widths_m[c] for c in classes])
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
    gross = stands["area_ha"].to_numpy(dtype=np.float64)
    crs = pyproj.CRS.from_user_input(stands.crs)
    geoms, wcrs = metric_geometries(stands)
    state = _State(geoms.copy(), shapely.area(geoms), gross.copy())
    removed = np.zeros((len(steps), len(gross)))
    notes: list[str] = []
    warnings: list[str] = []
    for k, step in enumerate(steps):
        where = f"[[landbase.steps]] #{step.number} {step.label!r}"
        before = state.area_ha.copy()
        if step.kind == "where":
            assert step.where is not None
            hit = evaluate_where(step.where, fields, where)
            state.area_ha[hit] = 0.0
            state.geom[hit] = shapely.Polygon()
            state.geom_area[hit] = 0.0
        elif step.kind == "percent":
            state.area_ha *= 1.0 - (step.percent or 0.0) / 100.0
        elif step.kind == "layer":
            frame = _valid_overlay(read_overlay(step, wcrs), strict, where, warnings)
            overlay = buffer_overlay(frame, step, metres_per_unit(wcrs), where)
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
            if not len(hit):
                notes.append(f"{where}: the layer touches no stand; nothing removed")
        elif step.kind == "raster":
            raster, in_raster_crs = read_raster(step, state.geom, wcrs)
            if raster is None:
                raise NetdownError(
                    f"{where}: {step.raster}: the raster does not overlap the stands"
                )
            z = zonal(in_raster_crs, raster, threshold=step.above)
            live = state.area_ha > 0
            if not z.covered[live].any():
                raise NetdownError(
                    f"{where}: {step.raster}: the raster holds no data over the stands"
                )
            missing = int((live & ~z.covered).sum())
            if missing:
                notes.append(
                    f"{where}: {missing} stands are not covered by {step.raster.name}"
                    " (outside it or nodata); nothing removed from them"
                )
            state.area_ha *= 1.0 - z.fraction_above()
        removed[k] = before - state.area_ha
    crumbs = (state.area_ha > 0) & (state.area_ha < CRUMB_HA) & (gross >= CRUMB_HA)
    if crumbs.any():
        warnings.append(
            f"{int(crumbs.sum())} stands keep less than 1 m2 of harvestable area after the "
            f"netdown (the smallest {float(state.area_ha[crumbs].min()):.3g} ha): crumbs an "
            "overlay's edge left (is it drawn along the stand boundaries?); they are cut, if "
            "at all, as whole parts"
        )
    remaining_geom = (
        state.geom if wcrs == crs else gpd.GeoSeries(state.geom, crs=wcrs).to_crs(crs).to_numpy()
    )
    return Netdown(
        gross,
        removed,
        state.area_ha.copy(),
        remaining_geom,
        netdown_table(gross, removed, steps),
        tuple(notes),
        tuple(warnings),
    )


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
