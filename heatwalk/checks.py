"""Argument checks at public boundaries, with one wording everywhere.

Each checker returns the value (converted where stated) or raises
:class:`heatwalk.InputError` naming the argument, what was expected and what
was got, e.g. ``steps must be a positive integer, got 0``. ``name`` may carry
its owner as a prefix (``"Torus: n"``); the error's ``field`` is the last word.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

from heatwalk.errors import InputError


def _field(name: str) -> str:
    return name.split(":")[-1].strip().split(" ")[0]


def check_int(name: str, value, *, minimum: int | None = None, maximum: int | None = None) -> int:
    """An int (not a bool) in [minimum, maximum]; ``minimum=1`` reads "a positive integer"."""
    ok = isinstance(value, int) and not isinstance(value, bool)
    if ok and minimum is not None and value < minimum:
        ok = False
    if ok and maximum is not None and value > maximum:
        ok = False
    if not ok:
        if minimum == 1 and maximum is None:
            what = "a positive integer"
        elif minimum is not None and maximum is not None:
            what = f"an integer in [{minimum}, {maximum}]"
        elif minimum is not None:
            what = f"an integer >= {minimum}"
        elif maximum is not None:
            what = f"an integer <= {maximum}"
        else:
            what = "an integer"
        raise InputError(f"{name} must be {what}, got {value!r}", field=_field(name))
    return value


def check_positive_int(name: str, value, *, maximum: int | None = None) -> int:
    """An int >= 1 (and <= ``maximum`` when given)."""
    return check_int(name, value, minimum=1, maximum=maximum)


def check_number(name: str, value, *, minimum: float | None = None, maximum: float | None = None,
                 open_minimum: bool = False, open_maximum: bool = False) -> float:
    """A finite real number (not a bool) in the stated interval; returned as float."""
    ok = isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)
    if ok and minimum is not None:
        ok = value > minimum if open_minimum else value >= minimum
    if ok and maximum is not None:
        ok = value < maximum if open_maximum else value <= maximum
    if not ok:
        if minimum == 0 and open_minimum and maximum is None:
            what = "a positive finite number"
        else:
            lo = "" if minimum is None else ("(" if open_minimum else "[") + f"{minimum:g}"
            hi = "" if maximum is None else f"{maximum:g}" + (")" if open_maximum else "]")
            what = "a finite number" + (f" in {lo or '(-inf'}, {hi or 'inf)'}" if lo or hi else "")
        raise InputError(f"{name} must be {what}, got {value!r}", field=_field(name))
    return float(value)


def check_positive_number(name: str, value) -> float:
    """A finite number > 0."""
    return check_number(name, value, minimum=0, open_minimum=True)


def check_choice(name: str, value, choices: Iterable):
    """One of ``choices``."""
    choices = tuple(choices)
    if value not in choices:
        raise InputError(f"{name} must be one of {', '.join(map(repr, choices))}; got {value!r}",
                         field=_field(name))
    return value
