"""Timing: the clock, cycles per operation, and the schedule of a test on a memory.

Everything is counted in whole clock cycles; a delay element lasts ``ceil(seconds × f)``
idle cycles.  The test runs once per data background, one run after the other.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from fractions import Fraction

from ..errors import ModelError

_UNITS = {"hz": 1, "khz": 10**3, "mhz": 10**6, "ghz": 10**9}

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
    import math as _m

    f = float(text)
    if not _m.isfinite(f):
        raise ModelError(f"{what} {(whole or text).strip()!r} is too large")
    return Fraction(text)


def parse_frequency(text: str | float | int, require_unit: bool = False) -> Fraction:
    """``100MHz``, ``1.2 GHz``, ``250e6`` (Hz) → Hz as an exact fraction, between 1 Hz and
    100 GHz.  With ``require_unit`` a bare number is refused (the command line and memory
    files require a unit: ``--clock 200`` is far more likely 200 MHz than 200 Hz)."""
    if isinstance(text, bool):
        raise ModelError(f"clock {text!r} is not a frequency such as 100MHz")
    if isinstance(text, (int, float)):
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
        f = _finite(m.group(1), "clock", text) * _UNITS[(m.group(2) or "hz").lower()]
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
    unit = {"ns": Fraction(1, 10**9), "us": Fraction(1, 10**6), "µs": Fraction(1, 10**6),
            "ms": Fraction(1, 1000), "s": Fraction(1)}[m.group(2)]
    if float(m.group(1)) == 0:
        raise ModelError(f"duration {text.strip()!r} must be longer than zero ({DURATION_LIMITS})")
    d = _finite(m.group(1), "duration", text) * unit
    if not MIN_DURATION <= d <= MAX_DURATION:
        raise ModelError(f"duration {text.strip()!r} is outside {DURATION_LIMITS}")
    return d


def seconds_to_cycles(seconds: Fraction, clock_hz: Fraction) -> int:
    return math.ceil(Fraction(seconds) * clock_hz)


@dataclass(frozen=True)
class Segment:
    """One element (or delay) of one background run, placed in time."""

    run: int
    item: int                   # index in test.items
    element: int | None         # index among the test's elements; None for a delay
    order: str | None           # 'up' | 'down' | 'any' (None for a delay)
    start: int                  # first cycle
    per_address: int            # cycles one address takes (0 for a delay)
    op_offsets: tuple[int, ...]  # cycle offset of each (expanded) op in an address visit
    op_kinds: tuple[str, ...]    # 'r' / 'w' per expanded op
    op_values: tuple[int, ...]   # 0 / 1 per expanded op
    cycles: int                 # cycles of the whole segment


@dataclass(frozen=True)
class Schedule:
    segments: tuple[Segment, ...]
    cycles: int
    ops: int
    clock_hz: Fraction
    runs: int

    @property
    def seconds(self) -> Fraction:
        return Fraction(self.cycles) / self.clock_hz


def schedule(test, mem, runs: int | None = None) -> Schedule:
    """Place every element and delay of ``test`` in time on ``mem``."""
    from .backgrounds import background_names

    if runs is None:
        runs = len(background_names(mem))
    segs: list[Segment] = []
    t = 0
    ops = 0
    for run in range(runs):
        ei = -1
        for ii, item in enumerate(test.items):
            if hasattr(item, "ops"):
                ei += 1
                offs, kinds, vals = [], [], []
                c = 0
                for op in item.expanded():
                    offs.append(c)
                    kinds.append(op.kind)
                    vals.append(op.value)
                    c += mem.read_cycles if op.kind == "r" else mem.write_cycles
                total = c * mem.words
                segs.append(Segment(run, ii, ei, item.order, t, c, tuple(offs), tuple(kinds), tuple(vals), total))
                t += total
                ops += len(offs) * mem.words
            else:
                d = seconds_to_cycles(item.seconds, mem.clock_hz)
                segs.append(Segment(run, ii, None, None, t, 0, (), (), (), d))
                t += d
    return Schedule(tuple(segs), t, ops, mem.clock_hz, runs)
