"""Timing: the clock, cycles per operation, and the schedule of a test on a memory.

Everything is counted in whole clock cycles; a delay element lasts ``ceil(seconds × f)``
idle cycles.  The test runs once per data background, one run after the other.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from fractions import Fraction


from ..units import (CLOCK_LIMITS, DURATION_LIMITS, MAX_CLOCK_HZ, MAX_DURATION,  # noqa: F401  (re-exported)
                     MIN_CLOCK_HZ, MIN_DURATION, parse_duration, parse_frequency, seconds_to_cycles)

EXPAND_LIMIT = 1 << 16      # operations per address visit the spelled-out views may hold


@dataclass(frozen=True)
class OpRun:
    """``repeat`` back-to-back copies of one operation in an address visit."""

    kind: str                   # 'r' | 'w'
    value: int                  # 0 | 1
    repeat: int
    offset: int                 # cycle offset of the first copy in the visit
    each: int                   # cycles of one copy
    first: int                  # index of the first copy among the visit's operations

    @property
    def end(self) -> int:
        return self.offset + self.repeat * self.each


@dataclass(frozen=True)
class Segment:
    """One element (or delay) of one background run, placed in time.

    ``runs`` is the closed form (one entry per operation as written, repeats as counts);
    ``op_offsets``/``op_kinds``/``op_values`` spell the repeats out and exist only for
    visits of at most :data:`EXPAND_LIMIT` operations (the time-dependent DRAM families and
    the exporter work from ``runs``; the other families grade an equivalent shorter test).
    """

    run: int
    item: int                   # index in test.items
    element: int | None         # index among the test's elements; None for a delay
    order: str | None           # 'up' | 'down' | 'any' (None for a delay)
    start: int                  # first cycle
    per_address: int            # cycles one address takes (0 for a delay)
    runs: tuple[OpRun, ...]     # the operations of one address visit, repeats as counts
    cycles: int                 # cycles of the whole segment
    hammer: object = None       # the notation's Hammer item for a hammer segment (element None)

    @property
    def is_delay(self) -> bool:
        return self.element is None and self.hammer is None

    @property
    def row_cycle(self) -> int:
        """Cycles of one activation of a hammer segment (``per_address`` / activations)."""
        return self.per_address // self.hammer.activations_per_row if self.hammer else 0

    @property
    def ops_per_visit(self) -> int:
        return sum(r.repeat for r in self.runs)

    @cached_property
    def _expanded(self):
        n = self.ops_per_visit
        if n > EXPAND_LIMIT:
            from ..errors import EngineLimitError

            raise EngineLimitError(
                f"an address visit of {n:,} operations is only handled in closed form "
                f"(at most {EXPAND_LIMIT:,} are spelled out)"
            )
        offs, kinds, vals = [], [], []
        for r in self.runs:
            for i in range(r.repeat):
                offs.append(r.offset + i * r.each)
                kinds.append(r.kind)
                vals.append(r.value)
        return tuple(offs), tuple(kinds), tuple(vals)

    @property
    def op_offsets(self) -> tuple[int, ...]:
        """Cycle offset of each (expanded) op in an address visit."""
        return self._expanded[0]

    @property
    def op_kinds(self) -> tuple[str, ...]:
        """'r' / 'w' per expanded op."""
        return self._expanded[1]

    @property
    def op_values(self) -> tuple[int, ...]:
        """0 / 1 per expanded op."""
        return self._expanded[2]


@dataclass(frozen=True)
class Schedule:
    segments: tuple[Segment, ...]
    cycles: int
    ops: int
    clock_hz: Fraction
    runs: int
    drain: int = 0              # idle cycles at the end for the last read's data (read_latency)

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
                oruns = []
                c = 0
                k = 0
                for op in item.ops:
                    each = mem.read_cycles if op.kind == "r" else mem.write_cycles
                    oruns.append(OpRun(op.kind, op.value, op.repeat, c, each, k))
                    c += each * op.repeat
                    k += op.repeat
                total = c * mem.words
                segs.append(Segment(run, ii, ei, item.order, t, c, tuple(oruns), total))
                t += total
                ops += k * mem.words
            elif hasattr(item, "offsets"):        # a hammer item: activations, no element
                rc = max(mem.read_cycles, mem.write_cycles)        # one row cycle
                per = rc * item.activations_per_row
                segs.append(Segment(run, ii, None, item.order, t, per, (), per * mem.rows, item))
                t += per * mem.rows
            else:
                d = seconds_to_cycles(item.seconds, mem.clock_hz)
                segs.append(Segment(run, ii, None, None, t, 0, (), d))
                t += d
    drain = read_drain(segs, mem, t)
    return Schedule(tuple(segs), t + drain, ops, mem.clock_hz, runs, drain)


def read_drain(segs, mem, end: int) -> int:
    """Cycles the test lasts beyond ``end`` (the end of its last operation or delay) so that
    the data of its last compared read is back: a pipelined memory (``read_latency`` L > 0)
    returns a read's data L cycles after the read's last cycle while the next operations are
    already issued, so only the last compared read can need L extra (idle) cycles — fewer
    when writes or a delay follow it.  0 for L = 0."""
    lat = getattr(mem, "read_latency", 0)
    if not lat:
        return 0
    fw = None
    for si, seg in enumerate(segs):
        w = next((r for r in seg.runs if r.kind == "w"), None)
        if w is not None:
            fw = (si, w.first)
            break
    for si in range(len(segs) - 1, -1, -1):
        reads = [r for r in segs[si].runs if r.kind == "r"]
        if reads:
            r = reads[-1]
            if fw is None or (si, r.first + r.repeat - 1) < fw:
                return 0                  # the last read is not compared
            seg = segs[si]
            last = seg.start + (mem.words - 1) * seg.per_address + r.end - 1   # its last cycle
            return max(0, last + lat + 1 - end)
    return 0


def compare_cycle(mem, issue: int) -> int:
    """The cycle a read that begins at ``issue`` is compared in (what a tester's fail log
    shows): its last cycle, plus the read latency of a pipelined memory."""
    return issue + mem.read_cycles - 1 + getattr(mem, "read_latency", 0)


def first_write(sched) -> tuple[int, int] | None:
    """(segment index, op index) of the test's first write, or None."""
    for si, seg in enumerate(sched.segments):
        for r in seg.runs:
            if r.kind == "w":
                return si, r.first
    return None


def compared_reads(sched) -> set[tuple[int, int]]:
    """(segment index, op index) of the reads whose value is compared: those after the test's
    first write (reads before it expect nothing, the cells never having been written).
    Segments whose visits are too long to spell out (:data:`EXPAND_LIMIT`) are left out: ask
    :func:`is_compared` about them."""
    out = set()
    fw = first_write(sched)
    if fw is None:
        return out
    for si, seg in enumerate(sched.segments):
        if seg.ops_per_visit > EXPAND_LIMIT:
            continue
        for r in seg.runs:
            if r.kind == "r":
                out.update((si, k) for k in range(r.first, r.first + r.repeat) if (si, k) > fw)
    return out


def is_compared(sched, si: int, k: int) -> bool:
    """Whether read ``k`` of segment ``si`` is compared (closed form of :func:`compared_reads`)."""
    fw = first_write(sched)
    return fw is not None and (si, k) > fw


def op_cycle(seg, k: int, pos):
    """Cycle of op ``k`` of segment ``seg`` at position ``pos`` of the order the segment runs in
    (``pos`` an int or an integer numpy array)."""
    for r in seg.runs:                   # closed form: no spelled-out repeats
        if r.first <= k < r.first + r.repeat:
            return seg.start + pos * seg.per_address + r.offset + (k - r.first) * r.each
    raise IndexError(k)
