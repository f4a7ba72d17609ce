"""The mean drift of a drifting-cell flow given as components, as angle and speed, or as a
rotation number, and recorded in all three forms.

Accepted in ``[flow]`` (family ``drifting_cellular``), any one form:

* ``drift_x``, ``drift_y``: the components (velocity);
* ``drift_speed`` and ``drift_angle``: speed |V| (velocity) and direction in degrees from the
  x axis;
* ``drift_speed`` and ``rotation_number``: |V| and the winding ratio r = V_y/V_x of the drift
  direction on the torus of period cells (V along (1, r)/√(1 + r²), positive x component).
  ``rotation_number = "golden"`` is the golden mean (√5 − 1)/2, the irrational hardest to
  approximate by rationals (Hurwitz's theorem), so open streamlines never close.

The validated parameters hold all of ``drift_x``, ``drift_y``, ``drift_speed``,
``drift_angle`` (degrees in (−180, 180]) and ``rotation_number`` (V_y/V_x; ±inf for a drift
along y, NaN at rest), so each run records them (``flow_*`` attributes).  Giving two forms is
allowed only when they agree (relative 1e-9): re-validating recorded parameters works.
"""

from __future__ import annotations

import math

from ..errors import StudyError

GOLDEN_MEAN = (math.sqrt(5.0) - 1.0) / 2.0
DERIVED = ("drift_speed", "drift_angle", "rotation_number")
_NAMED_RATIOS = {"golden": GOLDEN_MEAN}


def _number(values, name, where):
    value = values[name]
    if isinstance(value, str) and name == "rotation_number":
        key = value.strip().lower()
        if key not in _NAMED_RATIOS:
            raise StudyError(f"{where}.rotation_number = {value!r}; allowed: a number or "
                             f"{', '.join(repr(k) for k in _NAMED_RATIOS)}")
        return _NAMED_RATIOS[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise StudyError(f"{where}.{name}: expected a number, got {value!r}")
    value = float(value)
    if name != "rotation_number" and not math.isfinite(value):
        raise StudyError(f"{where}.{name} = {value:g} is not a finite number")
    return value


def _components_from(values, where):
    """(V_x, V_y) from the polar forms present in ``values``, or None if none is given."""
    has_angle = "drift_angle" in values
    has_ratio = "rotation_number" in values
    if not (has_angle or has_ratio or "drift_speed" in values):
        return None
    if "drift_speed" not in values:
        given = "drift_angle" if has_angle else "rotation_number"
        raise StudyError(f"{where}.{given} needs {where}.drift_speed (the drift's speed)")
    speed = _number(values, "drift_speed", where)
    if speed < 0:
        raise StudyError(f"{where}.drift_speed = {speed:g} is outside the allowed range "
                         "[0, inf)")
    if has_angle:
        angle = math.radians(_number(values, "drift_angle", where))
        polar = (speed * math.cos(angle), speed * math.sin(angle))
        if has_ratio:
            ratio = _number(values, "rotation_number", where)
            if speed > 0 and not _agree(polar, _from_ratio(speed, ratio)):
                raise StudyError(f"{where}: drift_angle and rotation_number disagree; give one")
        return polar
    if not has_ratio:
        raise StudyError(f"{where}.drift_speed needs {where}.drift_angle or "
                         f"{where}.rotation_number (the drift's direction)")
    return _from_ratio(speed, _number(values, "rotation_number", where))


def _from_ratio(speed, ratio):
    if math.isinf(ratio):
        return 0.0, math.copysign(speed, ratio)
    norm = math.hypot(1.0, ratio)
    return speed / norm, speed * ratio / norm


def _agree(a, b):
    scale = max(math.hypot(*a), math.hypot(*b), 1e-300)
    return math.hypot(a[0] - b[0], a[1] - b[1]) <= 1e-9 * scale


def resolve_drift(values: dict, where: str = "flow") -> dict:
    """``values`` with ``drift_x``/``drift_y`` set from a polar form and the polar keys
    removed; raises StudyError naming the field."""
    values = dict(values)
    polar = _components_from(values, where)
    for name in DERIVED:
        values.pop(name, None)
    if polar is not None:
        given = [n for n in ("drift_x", "drift_y") if n in values]
        if given:
            cartesian = (float(values.get("drift_x", 0.0)), float(values.get("drift_y", 0.0)))
            if not _agree(cartesian, polar):
                raise StudyError(f"{where}: (drift_x, drift_y) = ({cartesian[0]:g}, "
                                 f"{cartesian[1]:g}) disagrees with drift_speed and its "
                                 "direction; give the drift in one form")
        values["drift_x"], values["drift_y"] = polar
    return values


def drift_record(drift_x: float, drift_y: float) -> dict:
    """Speed, angle (degrees) and rotation number V_y/V_x of a drift (see module doc)."""
    speed = math.hypot(drift_x, drift_y)
    if speed == 0.0:
        return {"drift_speed": 0.0, "drift_angle": 0.0, "rotation_number": math.nan}
    ratio = drift_y / drift_x if drift_x != 0.0 else math.copysign(math.inf, drift_y)
    return {"drift_speed": speed, "drift_angle": math.degrees(math.atan2(drift_y, drift_x)),
            "rotation_number": ratio}
