"""Unit conversion on the way in: SPICE numbers with scale factors, side-file lengths.

Everything after this module works in SI units.
"""

from __future__ import annotations

import math
import re

# SPICE scale factors, from the ngspice manual (ngspice User's Manual, section 2.4
# "Syntax of expressions / scale factors": T G Meg K mil m u n p f). Case-insensitive;
# "meg" and "mil" are matched before "m".
SCALE_FACTORS = {
    "t": 1e12,
    "g": 1e9,
    "meg": 1e6,
    "k": 1e3,
    "mil": 25.4e-6,
    "m": 1e-3,
    "u": 1e-6,
    "n": 1e-9,
    "p": 1e-12,
    "f": 1e-15,
}

# Side-file length units in metres; 1 in = 25.4 mm exactly, 1 mil = 0.001 in (NIST SP 811, B.8).
LENGTH_UNITS = {
    "m": 1.0,
    "cm": 1e-2,
    "mm": 1e-3,
    "um": 1e-6,
    "in": 0.0254,
    "mil": 0.0254e-3,
}

_NUMBER = re.compile(
    r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)(meg|mil|[tgkmunpf])?([a-z]*)\s*$",
    re.IGNORECASE,
)


def spice_number(text: str) -> float:
    """Value of a SPICE number such as ``4.7k``, ``10uF``, ``1meg`` or ``2.5e-9``.

    Trailing letters after the scale factor are units and are ignored, as ngspice does
    (``10uF`` is 1e-5; ``1MEG`` is 1e6 but ``1M`` is 1e-3). Raises ValueError when the text is
    not a number.
    """
    match = _NUMBER.match(text)
    if not match:
        raise ValueError(f"'{text}' is not a number")
    mantissa, scale, _unit = match.groups()
    value = float(mantissa) * (SCALE_FACTORS[scale.lower()] if scale else 1.0)
    if not math.isfinite(value):
        raise ValueError(f"'{text}' is not a finite number")
    return value


def length_scale(units: str) -> float:
    """Metres per side-file length unit; raises KeyError for an unknown unit."""
    return LENGTH_UNITS[units]


def engineering(value: float, unit: str = "", digits: int = 3) -> str:
    """Format a value with an SI prefix, e.g. ``engineering(1.2e-7, 'H') == '120 nH'``."""
    if value is None or not math.isfinite(value):
        return f"{value} {unit}".strip()
    if value == 0:
        return f"0 {unit}".strip()
    prefixes = {-15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M", 9: "G", 12: "T"}
    exponent = int(math.floor(math.log10(abs(value)) / 3) * 3)
    exponent = max(-15, min(12, exponent))
    scaled = value / 10**exponent
    return f"{scaled:.{digits}g} {prefixes[exponent]}{unit}".strip()
