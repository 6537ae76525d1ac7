"""Numbers with units, as recipes write them: ``"20 ns"``, ``"-220 MHz"``, ``"2.4 GS/s"``.

Everything inside shaper is SI: seconds and hertz (cycles per second). A plain
number in a recipe is read as SI. A string must carry a unit of the right kind;
an unknown unit or one of the wrong kind is an error that names the key.
"""

from __future__ import annotations

import math
import re

from shaper.errors import RecipeError

_PREFIX = {"": 1.0, "k": 1e3, "M": 1e6, "G": 1e9, "T": 1e12,
           "m": 1e-3, "u": 1e-6, "µ": 1e-6, "μ": 1e-6, "n": 1e-9, "p": 1e-12}

# unit symbol -> (kind, scale to SI)
UNITS: dict[str, tuple[str, float]] = {}
for _prefix in ("", "m", "u", "µ", "μ", "n", "p"):
    UNITS[_prefix + "s"] = ("time", _PREFIX[_prefix])
UNITS["min"] = ("time", 60.0)
UNITS["h"] = ("time", 3600.0)
for _prefix in ("", "k", "M", "G", "T"):
    UNITS[_prefix + "Hz"] = ("frequency", _PREFIX[_prefix])
    UNITS[_prefix + "S/s"] = ("sample rate", _PREFIX[_prefix])
    UNITS[_prefix + "Sa/s"] = ("sample rate", _PREFIX[_prefix])

# which unit kinds a quantity of each kind accepts
_ACCEPTS = {
    "time": ("time",),
    "frequency": ("frequency",),
    "sample rate": ("sample rate", "frequency"),
}
_EXAMPLE = {"time": '"20 ns"', "frequency": '"-220 MHz"', "sample rate": '"2.4 GS/s"'}

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([^\s\d].*?)?\s*$")


# A bare number (no unit) this far from what a lab writes is almost always a unit slip:
# max_rabi = 60 meant 60 MHz, not 60 Hz. Written with its unit, any value is taken.
_PLAUSIBLE_BARE = {
    "frequency": (lambda v: v == 0 or abs(v) >= 1e3, "MHz"),
    "sample rate": (lambda v: v >= 1e3, "GS/s"),
    "time": (lambda v: v <= 1e-2, "ns"),
}


def _shown(value) -> str:
    """A value as an error quotes it: at most 60 characters, unprintable ones escaped."""
    text = repr(value)
    return text if len(text) <= 60 else text[:60] + "..."


def parse_quantity(value, kind: str, *, key: str, path: str | None = None,
                   bare_check: bool = True, hint: str | None = None) -> float:
    """Read a number with a unit and return it in SI units.

    Args:
        value: a plain int or float (already SI), or a string such as ``"20 ns"``.
        kind: ``"time"``, ``"frequency"`` or ``"sample rate"``.
        key: the key path, for the error message.
        path: the recipe file, for the error message.
        bare_check: refuse a number without a unit that is implausible for the kind (a
            frequency below 1 kHz, a sample rate below 1 kS/s, a time above 10 ms), with
            "did you mean ..."; off for budgets such as ``optimizer.max_time``.
        hint: the unit to suggest for a bare number (default by kind: MHz, GS/s, ns).

    Returns:
        The value in seconds, hertz or samples per second.

    Raises:
        RecipeError: the value is not a finite number, its unit is unknown or of another
            kind, or a bare number is implausible (see ``bare_check``).

    Examples:
        >>> parse_quantity("20 ns", "time", key="pulse.duration")
        2e-08
        >>> parse_quantity("2.4 GS/s", "sample rate", key="pulse.sample_rate")
        2400000000.0
        >>> parse_quantity(-220e6, "frequency", key="system.anharmonicity")
        -220000000.0
    """
    if isinstance(value, bool):
        raise RecipeError(f"expected a {kind} such as {_EXAMPLE[kind]}, got {_shown(value)}",
                          path=path, key=key)
    if isinstance(value, int | float):
        return _checked(float(value), kind, key, path, bare=bare_check, hint=hint)
    if not isinstance(value, str):
        raise RecipeError(f"expected a {kind} such as {_EXAMPLE[kind]}, got {_shown(value)}",
                          path=path, key=key)
    match = _NUMBER.match(value)
    if not match:
        raise RecipeError(f"cannot read {_shown(value)} as a {kind}; write it like "
                          f"{_EXAMPLE[kind]}", path=path, key=key)
    number, unit = float(match.group(1)), (match.group(2) or "")
    if not unit:
        return _checked(number, kind, key, path, bare=bare_check, hint=hint)
    if unit not in UNITS:
        known = ", ".join(u for u, (k, _) in UNITS.items()
                          if k in _ACCEPTS[kind] and "μ" not in u and "µ" not in u)
        raise RecipeError(f"unknown unit {_shown(unit)} in {_shown(value)}; a {kind} takes "
                          f"one of: {known}", path=path, key=key)
    unit_kind, scale = UNITS[unit]
    if unit_kind not in _ACCEPTS[kind]:
        raise RecipeError(f"{_shown(value)} is a {unit_kind}, but this key wants a {kind} "
                          f"such as {_EXAMPLE[kind]}", path=path, key=key)
    return _checked(number * scale, kind, key, path, bare=False)


def _checked(value: float, kind: str, key: str, path: str | None, *, bare: bool,
             hint: str | None = None) -> float:
    if not math.isfinite(value):
        raise RecipeError(f"expected a finite {kind}, got {_shown(value)}", path=path, key=key)
    plausible, unit = _PLAUSIBLE_BARE[kind]
    unit = hint or unit
    if bare and not plausible(value):
        where = "command line" if key.startswith("-") else "recipe"
        raise RecipeError(f"{value:g} without a unit reads as {value:g} "
                          f"{'s' if kind == 'time' else 'Hz'}, which is implausible here; did "
                          f"you mean '{value:g} {unit}'? Write the unit in the {where} "
                          f"(any value written with its unit is taken)", path=path, key=key)
    return value


def format_quantity(value: float, unit: str, digits: int = 6) -> str:
    """A short human form of an SI value: ``format_quantity(2e-8, "s")`` gives ``'20 ns'``
    (``digits`` significant digits).

    Examples:
        >>> format_quantity(2e-8, "s")
        '20 ns'
        >>> format_quantity(-2.2e8, "Hz")
        '-220 MHz'
    """
    if value == 0:
        return f"0 {unit}"
    prefixes = [("T", 1e12), ("G", 1e9), ("M", 1e6), ("k", 1e3), ("", 1.0),
                ("m", 1e-3), ("u", 1e-6), ("n", 1e-9), ("p", 1e-12)]
    if unit == "s":
        prefixes = [p for p in prefixes if p[1] <= 1.0]
    for prefix, scale in prefixes:
        if abs(value) >= scale * 0.9999999:
            return f"{value / scale:.{digits}g} {prefix}{unit}"
    return f"{value:.{digits}g} {unit}"


MAX_DURATIONS = 500  # points of one sweep


def parse_durations(text, *, key: str, path: str | None = None) -> list[float]:
    """``"6ns:30ns:2ns"`` (start:stop:step, stop included) or ``"10ns,12ns,20ns"``, in
    seconds, sorted; the count is known (and bounded) before any list is made.

    Raises:
        RecipeError: naming ``key``: not text, malformed, non-positive, or more than
            :data:`MAX_DURATIONS` points.
    """
    def fail(why: str):
        raise RecipeError(f"{_shown(text)}: {why}", path=path, key=key)

    if not isinstance(text, str):
        fail("expected durations as text, e.g. \"12ns:24ns:4ns\" or \"10ns,20ns\"")

    def one(part):
        return parse_quantity(part.strip(), "time", key=key, path=path)
    if ":" in text:
        pieces = text.split(":")
        if len(pieces) != 3:
            fail("write start:stop:step, e.g. 6ns:30ns:2ns")
        start, stop, step = (one(p) for p in pieces)
        if not (step > 0 and stop >= start):
            fail("needs start <= stop and a positive step")
        count = math.floor((stop - start) / step + 0.5) + 1
        if count > MAX_DURATIONS:
            fail(f"{count:.3g} points; at most {MAX_DURATIONS} (a larger step?)")
        values = [start + k * step for k in range(count)]
    else:
        parts = [p for p in text.split(",") if p.strip()]
        if len(parts) > MAX_DURATIONS:
            fail(f"{len(parts)} points; at most {MAX_DURATIONS}")
        values = [one(p) for p in parts]
    if not values or min(values) <= 0:
        fail("durations must be positive")
    return sorted(values)
