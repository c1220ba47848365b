"""The kinds of rule a config value is checked against (:mod:`closure_nn.config_rules` holds the
table, :mod:`closure_nn.config_checks` the checking): a choice from a registry, a number in a
range, a flag, text, a list, a logarithmic axis, a mapping, or a subtree checked elsewhere.
"""
from __future__ import annotations

import importlib
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

from .physics.checks import RANGES

def _registry(ref: str | Iterable) -> tuple:
    """``'module:NAME'`` -> the names of that tuple or dict (imported on demand); else the items."""
    if isinstance(ref, str):
        mod, _, attr = ref.partition(":")
        ref = getattr(importlib.import_module(mod), attr)
    return tuple(ref)


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def show(v, unit: str = "") -> str:
    """A config value as the user would type it (text quoted, ``null``, ``true``)."""
    if v is None:
        return "null"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return repr(v)
    if isinstance(v, float):
        return f"{v:g}" + (f" {unit}" if unit else "")
    if isinstance(v, int):
        return f"{v}" + (f" {unit}" if unit else "")
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(show(x) for x in v) + "]"
    if isinstance(v, Mapping):
        return "{" + ", ".join(f"{k}: {show(x)}" for k, x in v.items()) + "}"
    return repr(v)


class Rule:
    """A rule for one value: :meth:`ok` tests it, :meth:`text` says what is expected."""

    nullable = False

    def ok(self, v) -> bool:  # pragma: no cover - every rule overrides it
        raise NotImplementedError

    def text(self) -> str:  # pragma: no cover
        raise NotImplementedError

    def accepts(self, v) -> bool:
        return (v is None and self.nullable) or (v is not None and self.ok(v))

    def expected(self) -> str:
        return ("null or " if self.nullable else "") + self.text()


@dataclass(frozen=True)
class Choice(Rule):
    """One of a set of names; ``values`` a tuple or ``'module:NAME'`` of a registry."""

    values: object
    nullable: bool = False
    what: str = ""  # e.g. 'wall friction correlation': the message adds "(unknown <what> 'x')"

    def names(self) -> tuple:
        return _registry(self.values)

    def ok(self, v) -> bool:
        return isinstance(v, str) and v in self.names()

    def text(self) -> str:
        return "one of " + ", ".join(map(str, self.names()))


@dataclass(frozen=True)
class Number(Rule):
    """A number in a range; ``whole``: an integer; ``open_lo``/``open_hi``: strict bounds."""

    lo: float | None = None
    hi: float | None = None
    whole: bool = False
    open_lo: bool = False
    open_hi: bool = False
    nullable: bool = False
    unit: str = ""

    def ok(self, v) -> bool:
        if not _is_number(v) or (self.whole and not isinstance(v, int)) or not math.isfinite(v):
            return False
        if self.lo is not None and (v < self.lo or (self.open_lo and v == self.lo)):
            return False
        return self.hi is None or not (v > self.hi or (self.open_hi and v == self.hi))

    def text(self) -> str:
        what = "a whole number" if self.whole else "a number"
        u = f" {self.unit}" if self.unit else ""
        lo, hi = self.lo, self.hi
        if lo is not None and hi is not None:
            if not (self.open_lo or self.open_hi) and u:
                return f"{what} {lo:g} to {hi:g}{u}"
            return f"{what} in {'(' if self.open_lo else '['}{lo:g}, {hi:g}{')' if self.open_hi else ']'}{u}"
        if lo is not None:
            return f"{what} {'>' if self.open_lo else '>='} {lo:g}{u}"
        if hi is not None:
            return f"{what} {'<' if self.open_hi else '<='} {hi:g}{u}"
        return what


@dataclass(frozen=True)
class Flag(Rule):
    def ok(self, v) -> bool:
        return isinstance(v, bool)

    def text(self) -> str:
        return "true or false"


@dataclass(frozen=True)
class Text(Rule):
    """Free text (a path, a name)."""

    what: str = "a text"
    nullable: bool = False

    def ok(self, v) -> bool:
        return isinstance(v, str) and v.strip() != ""

    def text(self) -> str:
        return self.what


@dataclass(frozen=True)
class Either(Rule):
    """Any of several rules (e.g. a number or a named model)."""

    rules: tuple
    nullable: bool = False

    def ok(self, v) -> bool:
        return any(r.accepts(v) for r in self.rules)

    def text(self) -> str:
        return " or ".join(r.expected() for r in self.rules)


@dataclass(frozen=True)
class ListOf(Rule):
    item: Rule
    min_len: int = 0
    nullable: bool = False

    def ok(self, v) -> bool:
        return isinstance(v, (list, tuple)) and len(v) >= self.min_len and all(self.item.accepts(x) for x in v)

    def text(self) -> str:
        n = f" (at least {self.min_len})" if self.min_len else ""
        return f"a list{n} of: {self.item.expected()}"


@dataclass(frozen=True)
class Axis(Rule):
    """A range ``[low, high]`` with ``0 < low < high`` (a logarithmic axis)."""

    unit: str = "m/s"

    def ok(self, v) -> bool:
        return (isinstance(v, (list, tuple)) and len(v) == 2 and all(_is_number(x) and math.isfinite(x) for x in v)
                and 0 < v[0] < v[1])

    def text(self) -> str:
        return f"[low, high] in {self.unit} with 0 < low < high (the axis is logarithmic)"


@dataclass(frozen=True)
class MapOf(Rule):
    """A mapping whose keys are names of ``keys`` (a registry) and whose values pass ``value``."""

    keys: object
    value: Rule
    nullable: bool = False

    def ok(self, v) -> bool:
        names = _registry(self.keys) if self.keys is not None else None
        return isinstance(v, Mapping) and all((names is None or k in names) and self.value.accepts(x)
                                              for k, x in v.items())

    def text(self) -> str:
        keys = "names" if self.keys is None else ", ".join(_registry(self.keys))
        return f"a mapping of {keys} to {self.value.expected()}"


@dataclass(frozen=True)
class Described(Rule):
    """``rule`` with its own wording of what is expected."""

    rule: Rule
    wording: str

    def ok(self, v) -> bool:
        return self.rule.accepts(v)

    def text(self) -> str:
        return self.wording


@dataclass(frozen=True)
class Opaque(Rule):
    """A subtree checked elsewhere (``note`` says where); any value passes here."""

    note: str = ""

    def ok(self, v) -> bool:
        return True

    def text(self) -> str:
        return self.note


def physical(name: str, scale: float = 1.0, unit: str | None = None) -> Number:
    """The range of input ``name`` in :data:`closure_nn.physics.checks.RANGES` (times ``scale``)."""
    lo, hi, u, _ = RANGES[name]
    return Number(lo * scale, hi * scale, unit=unit or u)
