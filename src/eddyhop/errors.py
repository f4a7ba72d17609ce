"""Exceptions raised at the package's boundaries (study files, inputs, numerical failure)."""


class EddyhopError(Exception):
    """Base class for every error the package raises on purpose."""


class StudyError(EddyhopError, ValueError):
    """A study file or parameter is invalid; the message names the field, value and range."""


class BlowUpError(EddyhopError, FloatingPointError):
    """The integration produced NaN or overflow; the message names the step and dt."""


class InputDataError(EddyhopError, ValueError):
    """A Dataset or file handed to an analysis or plot lacks what it needs."""
