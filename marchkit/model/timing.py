"""Timing: the clock, cycles per operation, and the schedule of a test on a memory.

Everything is counted in whole clock cycles; a delay element lasts ``ceil(seconds × f)``
idle cycles.  The test runs once per data background, one run after the other.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction


from ..units import parse_duration, parse_frequency, seconds_to_cycles  # noqa: F401  (re-exported)


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


def compared_reads(sched) -> set[tuple[int, int]]:
    """(segment index, op index) of the reads whose value is compared: those after the test's
    first write (reads before it expect nothing, the cells never having been written)."""
    out = set()
    seen_write = False
    for si, seg in enumerate(sched.segments):
        for k, kind in enumerate(seg.op_kinds):
            if kind == "w":
                seen_write = True
            elif seen_write:
                out.add((si, k))
    return out


def op_cycle(seg, k: int, pos):
    """Cycle of op ``k`` of segment ``seg`` at position ``pos`` of the order the segment runs in
    (``pos`` an int or an integer numpy array)."""
    return seg.start + pos * seg.per_address + seg.op_offsets[k]
