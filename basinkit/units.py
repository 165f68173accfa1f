"""Quantities with units, as users write them: areas ('2ha', '0.5km2', '5000m2') and
lengths ('200m', '1.5km'), where bare numbers are square metres and metres; rainfall depths
('110mm', '4.3in'), durations ('24h', '30min') and intensities ('45mm/h'), which must always
name their unit."""

from __future__ import annotations

from .errors import InputError

__all__ = ["parse_area", "parse_length", "parse_depth", "parse_duration", "parse_intensity",
           "parse_memory"]

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


# ------------------------------------------------------------------ rainfall quantities
# Rainfall has no default unit: a bare number is refused (a depth in inches read as
# millimetres is a 25-fold error), so every depth, intensity and duration names its unit.
_DEPTH = {"mm": 1.0, "cm": 10.0, "in": 25.4, "inch": 25.4, "inches": 25.4}
_DURATION = {"min": 1.0 / 60.0, "minutes": 1.0 / 60.0, "h": 1.0, "hr": 1.0, "hours": 1.0,
             "d": 24.0, "days": 24.0}
_INTENSITY = {"mm/h": 1.0, "mm/hr": 1.0, "in/h": 25.4, "in/hr": 25.4}


def _parse_required_unit(text, units, what, example):
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        raise InputError(f"{what} {text!r} has no unit; write it with one, e.g. {example!r}")
    s = str(text).strip().lower().replace(" ", "")
    for u in sorted(units, key=len, reverse=True):
        if s.endswith(u) and s[: -len(u)]:
            num = s[: -len(u)]
            break
    else:
        raise InputError(f"{what} {text!r} has no unit (or an unknown one); write it with "
                         f"one of {', '.join(units)}, e.g. {example!r}")
    try:
        v = float(num)
    except ValueError:
        raise InputError(f"cannot read {what} {text!r}; write a number with a unit, e.g. "
                         f"{example!r}") from None
    if not (v >= 0 and v < float("inf")):
        raise InputError(f"{what} must be zero or positive, got {text!r}")
    return v * units[u]


def parse_depth(text, what="the rainfall depth"):
    """'110mm', '4.3in', '11cm' → millimetres. A bare number is refused."""
    return _parse_required_unit(text, _DEPTH, what, "110mm")


def parse_duration(text, what="the duration"):
    """'24h', '30min', '1d' → hours. A bare number is refused."""
    return _parse_required_unit(text, _DURATION, what, "24h")


def parse_intensity(text, what="the rainfall intensity"):
    """'45mm/h', '1.8in/h' → millimetres per hour. A bare number is refused."""
    return _parse_required_unit(text, _INTENSITY, what, "45mm/h")


# ------------------------------------------------------------------ memory sizes
# decimal prefixes as written on a machine's spec sheet, binary ones with an "i"
_MEMORY = {"b": 1, "kb": 10**3, "mb": 10**6, "gb": 10**9, "tb": 10**12,
           "kib": 2**10, "mib": 2**20, "gib": 2**30, "tib": 2**40,
           "k": 10**3, "m": 10**6, "g": 10**9, "t": 10**12}


def parse_memory(text, what="the memory size") -> int:
    """'2GB', '256MB', '1.5GiB' → bytes (GB = 10⁹ bytes, GiB = 2³⁰ bytes). The unit is
    required (a bare number is refused).

    Examples
    --------
    >>> parse_memory("2GB"), parse_memory("256 MiB")
    (2000000000, 268435456)
    """
    s = str(text).strip().lower().replace(" ", "")
    for u in sorted(_MEMORY, key=len, reverse=True):
        if s.endswith(u) and s[: -len(u)]:
            num = s[: -len(u)]
            break
    else:
        raise InputError(f"cannot read {what} {text!r}; write a number with a unit, one of "
                         "MB, GB, TB (10^6, 10^9, 10^12 bytes) or MiB, GiB, TiB, e.g. 2GB")
    try:
        v = float(num)
    except ValueError:
        raise InputError(f"cannot read {what} {text!r}; write a number with a unit, one of "
                         "MB, GB, TB or MiB, GiB, TiB, e.g. 2GB") from None
    if not v > 0 or v == float("inf"):
        raise InputError(f"{what} must be a positive size, got {text!r}")
    return int(v * _MEMORY[u])
