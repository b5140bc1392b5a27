"""Units shared by every layer: time, frequency and percentages, parsed and printed in one
place (``parse_frequency``, ``parse_duration``, ``seconds_to_cycles``, ``format_seconds`` —
exact; ``format_time``, ``format_frequency``, ``time_unit``, ``percent_text`` — for display).

Everything here is exact where it can be (``fractions.Fraction`` seconds and hertz) and imports
nothing from marchkit but the error tree.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

from .errors import ModelError

SECONDS_PER_UNIT = {"ns": Fraction(1, 10**9), "us": Fraction(1, 10**6), "ms": Fraction(1, 1000), "s": Fraction(1)}
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
    unit = SECONDS_PER_UNIT[m.group(2).replace("µs", "us")]
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


# ---- printing ------------------------------------------------------------------------------

TIME_UNITS = (("s", 1.0), ("ms", 1e-3), ("µs", 1e-6), ("ns", 1e-9))


def time_unit(seconds_max: float) -> tuple[str, float]:
    """The largest unit in which the longest time is at least 1."""
    for unit, scale in TIME_UNITS:
        if seconds_max >= scale:
            return unit, scale
    return TIME_UNITS[-1]


def format_time(seconds: float) -> str:
    """``12.5 µs``, ``3.2 ms``, ``0.2 s`` — four significant digits at most."""
    s = float(seconds)
    if s == 0:
        return "0 s"
    for unit, scale in TIME_UNITS:
        if abs(s) >= scale:
            return f"{s / scale:.4g} {unit}"
    return f"{s / 1e-9:.3g} ns"


def format_frequency(hz) -> str:
    hz = float(hz)
    for unit, scale in (("GHz", 1e9), ("MHz", 1e6), ("kHz", 1e3)):
        if hz >= scale:
            return f"{hz / scale:.4g} {unit}"
    return f"{hz:.4g} Hz"


def percent_text(cov: float, digits: int = 1, detected: int | None = None,
                 instances: int | None = None) -> str:
    """A coverage (0..1) as a percentage text, rounded to ``digits`` decimals, except that a
    partial coverage never shows as ``100`` nor as ``0`` (it is held at the nearest value
    short of them).  Full and zero coverage print without decimals."""
    if detected is not None and instances is not None:
        full, none = detected >= instances, detected == 0
    else:
        full, none = cov >= 1.0, cov <= 0.0
    if full:
        return "100"
    if none:
        return "0"
    step = 10.0 ** -digits
    v = round(100.0 * cov, digits)
    v = min(max(v, step), 100.0 - step)
    return f"{v:.{digits}f}"
