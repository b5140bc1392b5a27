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


# limits every clock and duration is checked against before any work (stated in --help)
MIN_CLOCK_HZ = 1
MAX_CLOCK_HZ = 10**11                 # 100 GHz
MIN_DURATION = Fraction(1, 10**9)     # 1 ns
MAX_DURATION = Fraction(10**4)        # 10 000 s (2.8 hours)
MAX_NUMBER_TEXT = 40                  # characters in one number
CLOCK_LIMITS = "1Hz to 100GHz"
DURATION_LIMITS = "1ns to 10000s"

_NUMBER = r"([0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?|\.[0-9]+(?:[eE][+-]?[0-9]+)?)"


def _finite(text: str, what: str, whole: str | None = None) -> Fraction:
    """A decimal number text as an exact fraction, refusing absurd exponents quickly (the
    float conversion says inf / 0 long before Fraction would expand 10^9999999)."""
    f = float(text)
    if not math.isfinite(f):
        raise ModelError(f"{what} {(whole or text).strip()!r} is too large")
    return Fraction(text)


def parse_frequency(text: str | float | int, require_unit: bool = False) -> Fraction:
    """``100MHz``, ``1.2 GHz``, ``250e6`` (Hz) → Hz as an exact fraction, between 1 Hz and
    100 GHz.  With ``require_unit`` a bare number is refused (the command line and memory
    files require a unit: ``--clock 200`` is far more likely 200 MHz than 200 Hz)."""
    if isinstance(text, bool):
        raise ModelError(f"clock {text!r} is not a frequency such as 100MHz")
    if isinstance(text, Fraction):
        f = text
    elif isinstance(text, (int, float)):
        if require_unit:
            raise ModelError(f"clock {text!r} has no unit; write it with one, e.g. \"{text}MHz\"")
        if isinstance(text, float) and not math.isfinite(text):
            raise ModelError(f"clock {text!r} is not a finite frequency")
        f = Fraction(str(text)) if isinstance(text, float) else Fraction(text)
    else:
        if len(text) > MAX_NUMBER_TEXT:
            raise ModelError(f"clock {text[:20]!r}… is too long for a frequency such as 100MHz")
        m = re.fullmatch(r"\s*" + _NUMBER + r"\s*([kKmMgG]?[hH][zZ])?\s*", text)
        if not m:
            raise ModelError(f"clock {text!r} is not a frequency such as 100MHz")
        if require_unit and not m.group(2):
            raise ModelError(f"clock {text!r} has no unit; write it with one, e.g. {text.strip()}MHz "
                             "(Hz, kHz, MHz, GHz)")
        if float(m.group(1)) == 0:
            raise ModelError("the clock frequency must be positive")
        f = _finite(m.group(1), "clock", text) * _FREQ_UNITS[(m.group(2) or "hz").lower()]
    if f <= 0:
        raise ModelError("the clock frequency must be positive")
    if not MIN_CLOCK_HZ <= f <= MAX_CLOCK_HZ:
        raise ModelError(f"clock {text!r} is outside the range marchkit models ({CLOCK_LIMITS})")
    return f


def parse_duration(text: str) -> Fraction:
    """``10ms``, ``64 us``, ``2s`` → seconds, between 1 ns and 10 000 s."""
    text = str(text)
    if len(text) > MAX_NUMBER_TEXT:
        raise ModelError(f"{text[:20]!r}… is too long for a duration such as 10ms")
    m = re.fullmatch(r"\s*" + _NUMBER + r"\s*(ns|us|µs|ms|s)\s*", text)
    if not m:
        raise ModelError(f"{text!r} is not a duration such as 10ms (a number and ns, us, ms or s)")
    unit = SECONDS_PER_UNIT[m.group(2).replace("µs", "us")]
    if float(m.group(1)) == 0:
        raise ModelError(f"duration {text.strip()!r} must be longer than zero ({DURATION_LIMITS})")
    d = _finite(m.group(1), "duration", text) * unit
    if not MIN_DURATION <= d <= MAX_DURATION:
        raise ModelError(f"duration {text.strip()!r} is outside {DURATION_LIMITS}")
    return d


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
