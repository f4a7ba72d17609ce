"""Small typed readers of study-table values: one-line StudyError naming the field and range.

Shared by ``spec.py`` and the optional tables parsed in their own modules
(``velocity_table.py``), so that those need not import ``spec`` back.
"""

from __future__ import annotations

import math

from ..errors import StudyError, range_text


def _number(table, key, where, default=None, low=-math.inf, high=math.inf, low_open=False,
            high_open=False, integer=False):
    if key not in table:
        if default is None:
            raise StudyError(f"{where}.{key} is required")
        return default
    value = table[key]
    kind = "an integer" if integer else "a number"
    if isinstance(value, bool) or not isinstance(value, int if integer else (int, float)):
        raise StudyError(f"{where}.{key}: expected {kind}, got {value!r}")
    if not integer:
        value = float(value)
    below = value <= low if low_open else value < low
    above = value >= high if high_open else value > high
    if not math.isfinite(value) or below or above:
        raise StudyError(f"{where}.{key} = {value!r} is outside the allowed range "
                         f"{range_text(low, high, low_open, high_open)}")
    return value



def _choice(table, key, where, choices, default):
    value = table.get(key, default)
    if value not in choices:
        raise StudyError(f"{where}.{key} = {value!r} is not allowed; choose one of: "
                         + ", ".join(choices))
    return value


def _text(table, key, where, default=""):
    value = table.get(key, default)
    if not isinstance(value, str):
        raise StudyError(f"{where}.{key}: expected a string, got {value!r}")
    return value


def _number_list(table, key, where, low=-math.inf, low_open=False, integer=False):
    value = table.get(key, [])
    if not isinstance(value, list):
        raise StudyError(f"{where}.{key}: expected a list of numbers, got {value!r}")
    return tuple(_number({f"{key}[{i}]": v}, f"{key}[{i}]", where, low=low, low_open=low_open,
                         integer=integer)
                 for i, v in enumerate(value))


def _table(document, key, where="study"):
    value = document.get(key, {})
    if not isinstance(value, dict):
        raise StudyError(f"{where}.{key}: expected a table, got {type(value).__name__}")
    return value


def _reject_unknown(table, allowed, where):
    unknown = sorted(set(table) - set(allowed))
    if unknown:
        raise StudyError(f"{where}: unknown key(s) {', '.join(map(repr, unknown))}; "
                         f"allowed: {', '.join(sorted(allowed))}")
