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


def parse_frequency(text: str | float | int) -> Fraction:
    """``100MHz``, ``1.2 GHz``, ``250e6`` (Hz) → Hz as an exact fraction."""
    if isinstance(text, (int, float)):
        f = Fraction(str(text))
    else:
        m = re.fullmatch(r"\s*([0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?)\s*([kKmMgG]?[hH][zZ])?\s*", text)
        if not m:
            raise ModelError(f"clock {text!r} is not a frequency such as 100MHz")
        f = Fraction(m.group(1)) * _UNITS[(m.group(2) or "hz").lower()]
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
