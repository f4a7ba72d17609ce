"""Verdicts of fits and flags: one set of names, one way to store and to read them.

Every fit the package reports (aging form, residence-time tails, Péclet scaling) carries a
goodness-of-fit statistic and a verdict stored as a CF flag variable
(``flag_values`` 0 1 2, ``flag_meanings`` "accepted rejected undetermined"):

* ``accepted``: the goodness-of-fit test does not reject the model at ``significance``;
* ``rejected``: it does (p < ``significance``); the fitted numbers describe a model the data
  refuse, so their error bars are widened (each fit says how) and printouts say "rejected";
* ``undetermined``: no test was possible (too few points or degrees of freedom, no error
  estimates), or the fitted points are themselves undetermined.

:func:`flag_meaning` reads any flag variable (``deff_converged``, ``step_check``, the fit
verdicts …) through its own ``flag_values``/``flag_meanings``, so commands, the report and
figures spell every flag the way the variable does.
"""

from __future__ import annotations

import math

import numpy as np

ACCEPTED, REJECTED, UNDETERMINED = 0, 1, 2
VERDICTS = ("accepted", "rejected", "undetermined")  # index = flag value
DEFAULT_SIGNIFICANCE = 0.05


def verdict_from_p(p_value: float, significance: float = DEFAULT_SIGNIFICANCE) -> int:
    """ACCEPTED when p ≥ significance, REJECTED when p < significance, UNDETERMINED for NaN."""
    if p_value is None or not math.isfinite(float(p_value)):
        return UNDETERMINED
    return REJECTED if float(p_value) < significance else ACCEPTED


def verdict_attrs(test: str, significance: float) -> dict:
    """CF flag attributes of a verdict variable; ``test`` names the goodness-of-fit test."""
    return {"flag_values": np.array([ACCEPTED, REJECTED, UNDETERMINED], dtype=np.int8),
            "flag_meanings": " ".join(VERDICTS), "test": test,
            "significance": float(significance)}


def flag_meaning(variable, value=None) -> str:
    """The meaning (a word of ``flag_meanings``) of ``value`` — by default the variable's own
    scalar value — for any CF flag variable; "" when the value is missing or unknown."""
    attrs = getattr(variable, "attrs", {})
    if value is None:
        value = np.asarray(getattr(variable, "values", variable))
    try:
        number = float(np.asarray(value))
    except (TypeError, ValueError):
        return ""
    if not math.isfinite(number):
        return ""
    meanings = str(attrs.get("flag_meanings", "")).split()
    values = np.atleast_1d(np.asarray(attrs.get("flag_values", np.arange(len(meanings)))))
    for flag, meaning in zip(values, meanings):
        if float(flag) == number:
            return meaning
    return ""


def flag_value(variable, meaning: str):
    """The flag value that ``variable``'s ``flag_meanings`` gives to ``meaning`` (None if the
    variable has no such meaning)."""
    attrs = getattr(variable, "attrs", {})
    meanings = str(attrs.get("flag_meanings", "")).split()
    values = np.atleast_1d(np.asarray(attrs.get("flag_values", np.arange(len(meanings)))))
    for flag, name in zip(values, meanings):
        if name == meaning:
            return flag.item() if hasattr(flag, "item") else flag
    return None
