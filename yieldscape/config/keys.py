"""How a scenario key is stated: its TOML type, unit, default, a line of documentation, the
range outside which a value is an error and the usual range outside which it warns. A key is a
dataclass field declared with :func:`key`; :func:`keys_of` reads them off a section's class."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

REQUIRED: Any = object()  # the default of a key that must be given


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
    default: Any = REQUIRED
    unit: str = ""
    doc: str = ""
    choices: tuple[str, ...] = ()
    check: Callable[[Any], str | None] | None = None  # returns a problem, or None
    usual: Usual | None = None

    @property
    def required(self) -> bool:
        return self.default is REQUIRED


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


def key(
    kind: str,
    default: Any = REQUIRED,
    unit: str = "",
    doc: str = "",
    choices: Sequence[str] = (),
    check: Callable[[Any], str | None] | None = None,
    usual: Usual | None = None,
) -> Any:
    """A dataclass field that is a scenario key, with everything said of it in one place."""
    spec = KeySpec(kind, default, unit, doc, tuple(choices), check, usual)
    if default is REQUIRED:
        return field(metadata={"key": spec})
    return field(default=default, metadata={"key": spec})


def keys_of(cls: type) -> dict[str, KeySpec]:
    """The scenario keys of a section's dataclass, in field order."""
    return {f.name: f.metadata["key"] for f in dataclasses.fields(cls) if "key" in f.metadata}
