"""Option declarations: each option of the Python API and the command line is
declared once, here-style, as an :class:`Option` (name, default, unit, help
text, check), and both the API defaults and the CLI arguments are made from it,
so the two cannot drift apart.

A layer declares its options as an :class:`OptionSet`; the Python function
calls :meth:`OptionSet.resolve` on its keyword arguments, and the command line
calls :meth:`OptionSet.add_arguments` on its parser and
:meth:`OptionSet.from_namespace` on the parsed arguments.
"""
from __future__ import annotations

import argparse
import math
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable

from .errors import InputError

__all__ = ["Option", "OptionSet", "RANGE", "parse_pair", "parse_range", "positive", "non_negative", "at_least", "finite",
           "in_range"]

#: ``kind`` of an option that takes a range: ``LO HI`` or ``LO,HI`` on the command line,
#: a pair of numbers in Python.
RANGE = "range"

_UNSET = object()


# -- reusable checks: each returns None when the value is fine, else the reason -----------------

def finite(value) -> str | None:
    """The value must be a finite number."""
    return None if value is None or math.isfinite(float(value)) else "must be a finite number"


def positive(value) -> str | None:
    """The value must be a finite number above 0."""
    return None if value is None or (math.isfinite(float(value)) and value > 0) else "must be > 0"


def non_negative(value) -> str | None:
    """The value must be a finite number of at least 0."""
    return None if value is None or (math.isfinite(float(value)) and value >= 0) else "must be >= 0"


def at_least(limit) -> Callable[[Any], str | None]:
    """A check that the value is at least ``limit``."""
    def check(value):
        return None if value is None or value >= limit else f"must be >= {limit}"
    return check


def in_range(lo, hi) -> Callable[[Any], str | None]:
    """A check that ``lo <= value <= hi``."""
    def check(value):
        ok = value is None or (math.isfinite(float(value)) and lo <= value <= hi)
        return None if ok else f"must be between {lo:g} and {hi:g}"
    return check


def parse_pair(value, name="pair") -> tuple[float, float]:
    """Two numbers from a pair, ``"A,B"``, ``["A,B"]`` or ``["A", "B"]`` (command-line words);
    :class:`InputError` otherwise."""
    parts = value
    if isinstance(value, str):
        parts = value.split(",")
    elif len(value) == 1 and isinstance(value[0], str):
        parts = value[0].split(",")
    try:
        a, b = (float(v) for v in parts)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be two numbers, LO HI or LO,HI, got {value!r}") from None
    return a, b


def parse_range(value, name="range") -> tuple[float, float]:
    """``(lo, hi)`` as :func:`parse_pair` reads it; :class:`InputError` unless both are finite
    with lo <= hi (the function that takes the range checks the rest)."""
    lo, hi = parse_pair(value, name)
    if not (math.isfinite(lo) and math.isfinite(hi) and lo <= hi):
        raise InputError(f"{name} must be finite with LO <= HI, got {lo:g}, {hi:g}")
    return lo, hi


@dataclass(frozen=True)
class Option:
    """One option: its Python name, default, unit, help text and check.

    ``flag`` is the command-line spelling (default ``--`` + the name with
    dashes; ``""`` keeps the option off the command line). ``kind`` is the value
    type (``float``, ``int``, ``str``, ``bool`` for a switch, or ``list`` for a
    repeatable option). ``check`` returns ``None`` or the reason the value is
    refused. ``group`` names the help section on the command line.
    """

    name: str
    default: Any
    help: str
    unit: str = ""
    kind: Callable = float
    choices: tuple | None = None
    check: Callable[[Any], str | None] | None = None
    flag: str | None = None
    metavar: str | None = None
    group: str | None = None
    show_default: bool = True

    @property
    def cli_flag(self) -> str:
        return self.flag if self.flag is not None else "--" + self.name.replace("_", "-")

    def default_text(self) -> str:
        if not self.show_default or self.kind in (bool, list, RANGE) or self.default is None:
            return ""
        unit = f" {self.unit}" if self.unit else ""
        value = f"{self.default:g}" if isinstance(self.default, float) else str(self.default)
        return f"default {value}{unit}"

    def validate(self, value):
        """``value`` if it passes the choices and the check, else :class:`InputError`."""
        if self.choices is not None and value not in self.choices:
            raise InputError(f"{self.cli_flag or self.name}: {value!r} is not one of "
                             f"{', '.join(map(str, self.choices))}")
        if self.check is not None and value is not None:
            try:
                reason = self.check(value)
            except (TypeError, ValueError):
                reason = f"must be of type {getattr(self.kind, '__name__', self.kind)}"
            if reason:
                raise InputError(f"{self.cli_flag or self.name} {reason}, got {value!r}")
        return value

    def add_argument(self, parser) -> None:
        """Add this option to an argparse parser or argument group."""
        text = self.help
        shown = self.default_text()
        if shown and "default" not in text:
            text = f"{text} ({shown})"
        kwargs: dict[str, Any] = {"dest": self.name, "help": text}
        if self.kind is bool:
            kwargs["action"] = "store_true"
        elif self.kind == RANGE:
            kwargs.update(nargs="+", metavar=self.metavar or ("LO", "HI"), default=self.default)
        elif self.kind is list:
            kwargs.update(action="append", metavar=self.metavar)
        else:
            kwargs.update(type=self.kind, default=self.default, metavar=self.metavar)
            if self.choices is not None:
                kwargs["choices"] = list(self.choices)
        parser.add_argument(self.cli_flag, **kwargs)


@dataclass
class OptionSet:
    """An ordered set of :class:`Option` declarations."""

    options: tuple
    groups: dict = field(default_factory=dict)

    def __init__(self, *options: Option, groups: dict | None = None):
        self.options = tuple(options)
        self.groups = dict(groups or {})
        names = [o.name for o in self.options]
        if len(set(names)) != len(names):
            raise RuntimeError(f"option declared twice: {names}")

    def __iter__(self):
        return iter(self.options)

    def __getitem__(self, name: str) -> Option:
        for opt in self.options:
            if opt.name == name:
                return opt
        raise KeyError(name)

    def __add__(self, other: "OptionSet") -> "OptionSet":
        return OptionSet(*self.options, *other.options, groups={**self.groups, **other.groups})

    def names(self) -> list[str]:
        return [o.name for o in self.options]

    def defaults(self) -> dict:
        """Every option's default, by name (lists copied, so callers may change them)."""
        return {o.name: (list(o.default) if isinstance(o.default, list) else o.default) for o in self.options}

    def resolve(self, given: dict | None = None, *, what: str = "options") -> dict:
        """Defaults overridden by ``given``; unknown names and refused values raise :class:`InputError`."""
        given = dict(given or {})
        unknown = sorted(set(given) - set(self.names()))
        if unknown:
            raise InputError(f"unknown {what}: {', '.join(unknown)} (known: {', '.join(self.names())})")
        values = self.defaults()
        values.update(given)
        for opt in self.options:
            opt.validate(values[opt.name])
        return values

    def add_arguments(self, parser, skip: Iterable[str] = ()) -> None:
        """Add every command-line option (those with a flag) to ``parser``, in help groups."""
        made: dict[str, Any] = {}
        for opt in self.options:
            if opt.cli_flag == "" or opt.name in skip:
                continue
            target = parser
            if opt.group:
                if opt.group not in made:
                    made[opt.group] = parser.add_argument_group(opt.group, self.groups.get(opt.group))
                target = made[opt.group]
            opt.add_argument(target)

    def from_namespace(self, ns: argparse.Namespace, skip: Iterable[str] = ()) -> dict:
        """The values of this set's options from parsed arguments (``list`` options: ``[]`` if not given)."""
        out = {}
        for opt in self.options:
            if opt.cli_flag == "" or opt.name in skip or not hasattr(ns, opt.name):
                continue
            value = getattr(ns, opt.name)
            if opt.kind is list and value is None:
                value = []
            elif opt.kind == RANGE and value is not None:
                value = parse_range(value, opt.cli_flag)
            out[opt.name] = value
        return out

    def doc(self) -> str:
        """Numpy-style parameter lines for docstrings."""
        lines = []
        for opt in self.options:
            unit = f" [{opt.unit}]" if opt.unit else ""
            default = "" if opt.kind is bool and opt.default is False else f", default {opt.default!r}"
            lines.append(f"{opt.name} : {getattr(opt.kind, '__name__', opt.kind)}{default}{unit}")
            lines.append(f"    {opt.help}")
        return "\n".join(lines)
