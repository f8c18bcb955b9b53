"""Attribute rules over stand fields: the ``where`` of a land-base step and of an analysis
unit. A safe subset of Python expressions is parsed with :mod:`ast` and evaluated over pandas
Series, never with ``eval``."""

from __future__ import annotations

import ast
import operator
from collections.abc import Mapping

import numpy as np
import pandas as pd

from yieldscape.errors import InputError


class RuleError(InputError):
    """A ``where`` rule that cannot be evaluated as written."""


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
    ``notnull(FIELD)``. A comparison with a null value is false (``!=`` too).

    >>> import pandas as pd
    >>> fields = {"COVER": pd.Series(["forest", "rock", None]), "AGE": pd.Series([80, 30, 120])}
    >>> evaluate_where("COVER in ['wetland', 'rock'] or AGE > 100", fields, "step 1").tolist()
    [False, True, True]
    >>> evaluate_where("COVER == 'forest'", fields, "step 1").tolist()  # null: false
    [True, False, False]
    >>> evaluate_where("COVER != 'forest'", fields, "step 1").tolist()  # null: false
    [False, True, False]
    """
    try:
        tree = ast.parse(expr, mode="eval")
    except SyntaxError as exc:
        raise RuleError(
            f"{where}: where = {expr!r} does not parse ({exc.msg} at column {exc.offset})"
        ) from None
    result = np.asarray(_truth(_Rule(expr, fields, where).ev(tree)), dtype=bool)
    n = len(next(iter(fields.values())))
    if result.shape != (n,):
        raise RuleError(f"{where}: where = {expr!r} must compare fields (it gives a single value)")
    return result


class _Rule:
    """The evaluation of one ``where`` rule: one method per kind of expression node; values
    are field Series, constants, lists or boolean arrays."""

    def __init__(self, expr: str, fields: Mapping[str, pd.Series], where: str) -> None:
        self.expr, self.fields, self.where = expr, fields, where

    def error(self, what: str) -> RuleError:
        return RuleError(f"{self.where}: where = {self.expr!r}{what}")

    def ev(self, node: ast.AST):  # noqa: ANN201 - returns Series, scalar or list
        if isinstance(node, ast.Expression):
            return self.ev(node.body)
        if isinstance(node, ast.BoolOp):
            vals = [np.asarray(_truth(self.ev(v)), dtype=bool) for v in node.values]
            op = np.logical_and if isinstance(node.op, ast.And) else np.logical_or
            out = vals[0]
            for v in vals[1:]:
                out = op(out, v)
            return out
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.Not | ast.USub):
            return self.unary(node)
        if isinstance(node, ast.Compare):
            return self.compare(node)
        if isinstance(node, ast.BinOp) and type(node.op) in _ARITH:
            return self.arithmetic(node)
        if isinstance(node, ast.Name):
            if node.id not in self.fields:
                raise self.error(
                    f" names field {node.id!r}, which the stands do not have; fields: "
                    f"{', '.join(self.fields)}"
                )
            return self.fields[node.id]
        if isinstance(node, ast.Constant) and isinstance(node.value, int | float | str):
            return node.value
        if isinstance(node, ast.List | ast.Tuple):
            return [self.ev(e) for e in node.elts]
        if (
            isinstance(node, ast.Call)
            and isinstance(node.func, ast.Name)
            and node.func.id in _FUNCS
            and len(node.args) == 1
        ):
            return _FUNCS[node.func.id](pd.Series(self.ev(node.args[0]))).to_numpy()
        raise self.error(
            f": {ast.unparse(node)!r} is not allowed (see docs/scenario.md for the expression "
            "syntax)"
        )

    def unary(self, node: ast.UnaryOp):  # noqa: ANN201
        val = self.ev(node.operand)
        if isinstance(node.op, ast.Not):
            return ~np.asarray(_truth(val), dtype=bool)
        try:
            return -val
        except TypeError:
            raise self.error(f": {ast.unparse(node)!r} negates text") from None

    def arithmetic(self, node: ast.BinOp):  # noqa: ANN201
        left, right = self.ev(node.left), self.ev(node.right)
        try:
            return _ARITH[type(node.op)](left, right)
        except (TypeError, ValueError):
            raise self.error(
                f": {ast.unparse(node)!r} mixes text and numbers (or a list); arithmetic "
                "needs numeric fields"
            ) from None

    def compare(self, node: ast.Compare) -> np.ndarray:
        """A comparison chain: every link must hold; a null value compares false."""
        left = self.ev(node.left)
        out = None
        for op, comp in zip(node.ops, node.comparators, strict=True):
            right = self.ev(comp)
            if isinstance(op, ast.In | ast.NotIn):
                res = self.membership(left, right, isinstance(op, ast.NotIn))
            elif type(op) in _CMP:
                res = self.order(type(op), left, right)
            else:
                raise self.error(f": {ast.unparse(node)!r} is not allowed")
            out = res if out is None else out & res
            left = right
        return out

    def membership(self, left, right, negate: bool) -> np.ndarray:  # noqa: ANN001
        if not isinstance(right, list):
            raise self.error(": 'in' needs a list, e.g. SPP in ['fir', 'pine']")
        res = pd.Series(left).isin(right).to_numpy()
        res = ~res if negate else res
        return res & pd.Series(left).notna().to_numpy()

    def order(self, op: type, left, right) -> np.ndarray:  # noqa: ANN001
        try:
            if isinstance(left, pd.Series):
                res = _CMP[op](left, right)
            elif isinstance(right, pd.Series):
                res = _CMP[_FLIP[op]](right, left)
            else:
                raise self.error(" compares two constants; name a field")
        except TypeError:
            raise self.error(": cannot compare text with a number") from None
        out = pd.Series(res).fillna(False).to_numpy(dtype=bool)
        for side in (left, right):  # a null compares false, != included
            if isinstance(side, pd.Series):
                out = out & side.notna().to_numpy()
        return out


def _truth(value):  # noqa: ANN001, ANN202
    if isinstance(value, pd.Series):
        if value.dtype == bool:
            return value.to_numpy()
        raise RuleError(f"a field alone is not a condition; compare it ({value.name!r})")
    return value
