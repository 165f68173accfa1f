"""Quantities with units, as users write them: areas ('2ha', '0.5km2', '5000m2') and
lengths ('200m', '1.5km'); bare numbers are square metres and metres."""

from __future__ import annotations

from .errors import InputError

__all__ = ["parse_area", "parse_length"]

_AREA = {"m2": 1.0, "ha": 1e4, "km2": 1e6}
_LENGTH = {"m": 1.0, "km": 1e3}


def _parse_quantity(text, units, what, default_unit):
    s = str(text).strip().lower().replace(" ", "")
    for u in sorted(units, key=len, reverse=True):
        if s.endswith(u):
            num = s[: -len(u)]
            break
    else:
        num, u = s, default_unit
    try:
        v = float(num)
    except ValueError:
        raise InputError(f"cannot read {what} {text!r}; write a number with a unit, one of "
                         f"{', '.join(units)} (e.g. {'0.5km2' if 'km2' in units else '200m'})"
                         ) from None
    if not v >= 0:
        raise InputError(f"{what} must be zero or positive, got {text!r}")
    return v * units[u]


def parse_area(text, what="the area"):
    """'0.5km2', '20ha', '5000m2' (bare numbers are m²) → square metres."""
    return _parse_quantity(text, _AREA, what, "m2")


def parse_length(text, what="the length"):
    """'200m', '1.5km' (bare numbers are metres) → metres."""
    return _parse_quantity(text, _LENGTH, what, "m")
