"""Units shared by every layer: time, frequency and percentages, parsed and printed in one place.

Everything here is exact where it can be (``fractions.Fraction`` seconds and hertz) and imports
nothing from marchkit but the error tree.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

from .errors import ModelError

_FREQ_UNITS = {"hz": 1, "khz": 10**3, "mhz": 10**6, "ghz": 10**9}


def parse_frequency(text: str | float | int) -> Fraction:
    """``100MHz``, ``1.2 GHz``, ``250e6`` (Hz) → Hz as an exact fraction."""
    if isinstance(text, (int, float)):
        f = Fraction(str(text))
    else:
        m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?)\s*([kKmMgG]?[hH][zZ])?\s*", text)
        if not m:
            raise ModelError(f"clock {text!r} is not a frequency such as 100MHz")
        f = Fraction(m.group(1)) * _FREQ_UNITS[(m.group(2) or "hz").lower()]
    if f <= 0:
        raise ModelError("the clock frequency must be positive")
    return f


def parse_duration(text: str) -> Fraction:
    """``10ms``, ``64 us``, ``2s`` → seconds."""
    m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?)\s*(ns|us|µs|ms|s)\s*", str(text))
    if not m:
        raise ModelError(f"{text!r} is not a duration such as 10ms")
    unit = {"ns": Fraction(1, 10**9), "us": Fraction(1, 10**6), "µs": Fraction(1, 10**6),
            "ms": Fraction(1, 1000), "s": Fraction(1)}[m.group(2)]
    return Fraction(m.group(1)) * unit


def seconds_to_cycles(seconds: Fraction, clock_hz: Fraction) -> int:
    """Whole clock cycles covering ``seconds``: ``ceil(seconds × f)``."""
    return math.ceil(Fraction(seconds) * clock_hz)


def format_seconds(s: Fraction) -> str:
    """An exact duration in the largest unit (s, ms, us, ns) that keeps it ≥ 1: ``1.5s``, ``250ns``."""
    s = Fraction(s)
    for unit, scale in (("s", 1), ("ms", 1000), ("us", 10**6), ("ns", 10**9)):
        v = s * scale
        if v >= 1 or unit == "ns":
            if v.denominator == 1:
                return f"{v.numerator}{unit}"
            return f"{float(v):.15g}{unit}"
    return f"{float(s)}s"  # pragma: no cover
