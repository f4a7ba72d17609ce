"""Exceptions raised at the package's boundaries (study files, inputs, numerical failure)."""

import math


def range_text(low: float, high: float, low_open: bool = False, high_open: bool = False) -> str:
    """Interval notation for an allowed range; infinite ends are open (values must be finite)."""
    left = "(" if low_open or math.isinf(low) else "["
    right = ")" if high_open or math.isinf(high) else "]"
    return f"{left}{low:g}, {high:g}{right}"


class EddyhopError(Exception):
    """Base class for every error the package raises on purpose."""


class StudyError(EddyhopError, ValueError):
    """A study file or parameter is invalid; the message names the field, value and range."""


class BlowUpError(EddyhopError, FloatingPointError):
    """The integration produced NaN or overflow; the message names the step and dt."""


class InputDataError(EddyhopError, ValueError):
    """A Dataset or file handed to an analysis or plot lacks what it needs."""


class OutputPathError(EddyhopError, ValueError):
    """An output path would destroy data or cannot be written; checked before any work."""
