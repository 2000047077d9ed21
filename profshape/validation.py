"""Declarative constraints on settings, in one place.

Every settings class states its constraints as a table ``{name: [constraint, ...]}``,
in the manner of scikit-learn's parameter validation (``_parameter_constraints``;
implemented here, not imported): a value is valid when it satisfies at least one
constraint of its list. The constraints are

- :class:`Interval`: an integer or a finite real number in a range,
  ``Interval(Integral, 1, None, closed="left")`` (``>= 1``) or
  ``Interval(Real, 0, 1, closed="both")`` (``[0, 1]``);
- :class:`Options`: one of a set of values, ``Options(str, {"log", "identity"})``;
- :class:`InstanceOf`: any value of the given types (``InstanceOf(bool)`` for a flag);
- ``None``: the value may be ``None``.

:func:`validate` checks a mapping against a table and returns the values converted
(an integral float given for an integer becomes an ``int``); the first failure raises
the given error class (a :class:`~profshape.exceptions.InputDataError` by default)
with a message naming ``owner.key``, the value received and the fix. The calibration
file (:mod:`profshape.config`) uses the same tables for its sections, with the
file's key, line and ``did you mean`` suggestions added.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import MISSING, fields
from numbers import Integral, Real
from typing import Any, ClassVar, Literal

import numpy as np

from .exceptions import InputDataError

__all__ = ["Constraint", "InstanceOf", "Interval", "Options", "constraint_text",
           "dataclass_defaults", "did_you_mean", "validate", "validate_dataclass",
           "validate_value"]

Closed = Literal["left", "right", "both", "neither"]


def did_you_mean(name: str, known: Any) -> str:
    """`` (did you mean 'x'?)`` for the closest of ``known`` (difflib), or ``""``."""
    near = difflib.get_close_matches(str(name), [str(k) for k in known], n=1, cutoff=0.6)
    return f" (did you mean {near[0]!r}?)" if near else ""


def _fmt(x: float) -> str:
    return f"{int(x)}" if float(x).is_integer() and abs(x) < 1e15 else f"{x:g}"


class Constraint:
    """One acceptable form of a value."""

    def accepts_type(self, value: Any) -> bool:
        """Whether ``value`` has a type this constraint is about."""
        raise NotImplementedError

    def convert(self, value: Any) -> Any:
        """``value`` in its canonical form; called only when :meth:`accepts_type` holds."""
        return value

    def satisfied_by(self, value: Any) -> bool:
        """Whether ``value`` (of an accepted type) is valid."""
        return self.accepts_type(value)

    def describe(self) -> str:
        """What a valid value is, for messages (``"an integer >= 1"``)."""
        raise NotImplementedError

    def problem(self, value: Any) -> str:
        """Why ``value``, of an accepted type, is invalid (``"must be >= 1"``)."""
        return f"must be {self.describe()}"

    def hint(self, value: Any) -> str:
        """Text after the value received (a ``did you mean`` suggestion), or ``""``."""
        return ""


class InstanceOf(Constraint):
    """Any value of the given types (``bool`` is not taken for a number)."""

    _NAMES: ClassVar[dict[type, str]] = {bool: "True or False", str: "a string",
                                         list: "an array", dict: "a table", tuple: "a tuple"}

    def __init__(self, *types: type, name: str | None = None):
        self.types = types
        self.name = name

    def accepts_type(self, value: Any) -> bool:
        if isinstance(value, bool) and bool not in self.types:
            return False
        return isinstance(value, self.types)

    def describe(self) -> str:
        if self.name:
            return self.name
        return " or ".join(self._NAMES.get(t, f"a {t.__name__}") for t in self.types)


class Interval(Constraint):
    """An integer (``Integral``) or a finite real number (``Real``) in a range.

    Parameters
    ----------
    kind : Integral or Real
        ``Integral`` accepts Python and numpy integers and integral floats (converted
        to ``int``); ``Real`` accepts any finite real number (converted to ``float``).
        ``bool`` is never taken for a number.
    left, right : float or None
        Bounds; ``None`` for no bound on that side.
    closed : {"left", "right", "both", "neither"}
        Which bounds belong to the range.
    """

    def __init__(self, kind: type, left: float | None, right: float | None, *,
                 closed: Closed = "both"):
        if kind not in (Integral, Real):
            raise TypeError("Interval kind must be numbers.Integral or numbers.Real")
        self.kind = kind
        self.left = left
        self.right = right
        self.closed = closed

    def accepts_type(self, value: Any) -> bool:
        if isinstance(value, (bool, np.bool_)) or not isinstance(value, (Real, np.number)):
            return False
        if self.kind is Integral:
            return isinstance(value, (Integral, np.integer)) or (
                math.isfinite(float(value)) and float(value).is_integer())
        return True

    def convert(self, value: Any) -> Any:
        return int(value) if self.kind is Integral else float(value)

    def satisfied_by(self, value: Any) -> bool:
        if not self.accepts_type(value):
            return False
        v = float(value)
        if not math.isfinite(v):
            return False
        left_ok = self.left is None or (v >= self.left if self.closed in ("left", "both")
                                        else v > self.left)
        right_ok = self.right is None or (v <= self.right if self.closed in ("right", "both")
                                          else v < self.right)
        return left_ok and right_ok

    def range_text(self) -> str:
        """``">= 1"``, ``"> 0"``, ``"lie in [0, 1]"``, or ``""`` (no bound)."""
        lo_in = self.closed in ("left", "both")
        hi_in = self.closed in ("right", "both")
        if self.left is not None and self.right is not None:
            return (f"lie in {'[' if lo_in else '('}{_fmt(self.left)}, {_fmt(self.right)}"
                    f"{']' if hi_in else ')'}")
        if self.left is not None:
            return f"{'>=' if lo_in else '>'} {_fmt(self.left)}"
        if self.right is not None:
            return f"{'<=' if hi_in else '<'} {_fmt(self.right)}"
        return ""

    def describe(self) -> str:
        noun = "an integer" if self.kind is Integral else "a number"
        text = self.range_text().replace("lie in ", "in ")
        return f"{noun} {text}".rstrip()

    def problem(self, value: Any) -> str:
        if not math.isfinite(float(value)):
            return "must be finite"
        return f"must {self.range_text()}" if self.range_text().startswith("lie") \
            else f"must be {self.range_text()}"


class Options(Constraint):
    """One of a set of values (kept in the order given, for messages).

    ``normalise`` maps a value to its canonical form before the comparison (e.g.
    ``str.lower``); the canonical form is what :func:`validate` returns.
    """

    def __init__(self, kind: type, options: Iterable[Any],
                 normalise: Callable[[Any], Any] | None = None):
        self.kind = kind
        self.options = tuple(options)
        self.normalise = normalise

    def accepts_type(self, value: Any) -> bool:
        return isinstance(value, self.kind) and not (isinstance(value, bool)
                                                     and self.kind is not bool)

    def convert(self, value: Any) -> Any:
        return self.normalise(value) if self.normalise else value

    def satisfied_by(self, value: Any) -> bool:
        return self.accepts_type(value) and self.convert(value) in self.options

    def describe(self) -> str:
        return f"one of {list(self.options)}"

    def hint(self, value: Any) -> str:
        return did_you_mean(value, self.options)


ConstraintList = Sequence[Constraint | None]


def constraint_text(constraints: ConstraintList) -> str:
    """What a valid value is, for all constraints of a list (``"an integer >= 1 or None"``)."""
    parts = [c.describe() for c in constraints if c is not None]
    if None in constraints:
        parts.append("None")
    return " or ".join(parts)


def validate_value(name: str, value: Any, constraints: ConstraintList, *, fix: str = "",
                   error: type[InputDataError] = InputDataError) -> Any:
    """``value`` converted by the first constraint it satisfies; else ``error``.

    The message reads ``"{name} must be ...; got {value!r}. {fix}"``.
    """
    if value is None and None in constraints:
        return None
    real = [c for c in constraints if c is not None]
    for c in real:
        if c.satisfied_by(value):
            return c.convert(value)
    tail = f" {fix}" if fix else ""
    typed = [c for c in real if c.accepts_type(value)]
    if typed:  # the right kind of value, out of range or not an option
        c = typed[0]
        raise error(f"{name} {c.problem(value)}; got {value!r}{c.hint(value)}.{tail}")
    raise error(f"{name} must be {constraint_text(constraints)}; got {value!r}.{tail}")


def validate(owner: str, values: Mapping[str, Any], table: Mapping[str, ConstraintList], *,
             fixes: Mapping[str, str] | None = None,
             error: type[InputDataError] = InputDataError) -> dict[str, Any]:
    """Check every key of ``table`` present in ``values``; return the converted values.

    Keys of ``values`` missing from ``table`` are returned unchanged (they are
    checked elsewhere). Messages name ``owner.key`` (``owner`` empty: ``key``).
    """
    fixes = fixes or {}
    out = dict(values)
    for key, constraints in table.items():
        if key in values:
            name = f"{owner}.{key}" if owner else key
            out[key] = validate_value(name, values[key], constraints, fix=fixes.get(key, ""),
                                      error=error)
    return out


def validate_dataclass(obj: Any, table: Mapping[str, ConstraintList], *, owner: str | None = None,
                       fixes: Mapping[str, str] | None = None,
                       error: type[InputDataError] = InputDataError) -> None:
    """Check the fields of a (frozen) dataclass instance in place, from ``__post_init__``."""
    names = [f.name for f in fields(obj)]
    missing = sorted(set(table) - set(names))
    if missing:  # pragma: no cover - a table naming a field that does not exist
        raise TypeError(f"constraints for unknown fields {missing} of {type(obj).__name__}")
    checked = validate(type(obj).__name__ if owner is None else owner,
                       {n: getattr(obj, n) for n in table}, table, fixes=fixes, error=error)
    for name, value in checked.items():
        object.__setattr__(obj, name, value)


def dataclass_defaults(cls: type) -> dict[str, Any]:
    """The default of every field of dataclass ``cls`` that has one."""
    out: dict[str, Any] = {}
    for f in fields(cls):
        if f.default is not MISSING:
            out[f.name] = f.default
        elif f.default_factory is not MISSING:
            out[f.name] = f.default_factory()
    return out
