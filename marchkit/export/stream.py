"""Expansion of a march test on a memory into a stream of clock-cycle vectors.

The stream is produced in blocks (a few tens of thousands of cycles each, column arrays), so
memory use does not grow with the test: nothing holds the whole pattern.

What one cycle carries (the same in every format):

* ``cycle``: 0-based clock cycle; the test lasts ``Schedule.cycles`` cycles, as ``grade``
  reports, and the cycles follow the :func:`marchkit.model.schedule` exactly;
* ``run`` (background run), ``element`` (index among the elements), ``op`` (index of the
  operation in the element, repeats spelled out) and ``action`` (``w0 w1 r0 r1`` or ``idle``);
* ``address``: the logical word address, or the scrambled physical word address
  (:meth:`Memory.physical_word`) when ``physical`` is asked for;
* ``we`` / ``re``: write enable and read strobe, held for every cycle of the operation
  (``write_cycles`` / ``read_cycles``);
* ``wdata``: the data written (``w0`` writes the background word, ``w1`` its complement);
  0 on cycles that do not write;
* ``expect``: the data a read must return; 0 on cycles that do not read;
* ``mask``: the bits compared.  A read is compared in its last cycle only, in every bit,
  except reads that come before the test's first write (they expect nothing and are never
  compared, as in the fault simulators); 0 on all other cycles.

Idle cycles (delays, ``ceil(seconds × clock)`` of them) have ``action`` ``idle``, no element or
op, and all of address, enables and data at 0.

⇕ elements run as ⇑ — the canonical order in which the simulators report first detections.

Pipelined reads (``Memory.read_latency`` L > 0): a read is issued like any operation and the
next operation follows in the next cycle, but its data comes back L cycles after the read's
last cycle.  ``expect`` and ``mask`` then belong to that later cycle (the compare cycle), while
the address, enables and write data on it already belong to the operation issued there; on
the read's own cycles ``expect`` and ``mask`` are 0.  When the test's last compared read is
not followed by L cycles of writes or delays, the stream ends with idle *drain* cycles
(``Schedule.drain``, a :class:`DelayPlan` with ``drain=True``) that carry only those compares.
Writers get the compare of each cycle from :class:`Pipeline` (codes into
:attr:`Plan.cmp_words`); with L = 0 none of this is used and the stream is as above.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator, NamedTuple

import numpy as np

from ..errors import OutputError
from ..model.timing import EXPAND_LIMIT

CHUNK = 1 << 16          # cycles per block (read when a stream starts: tests make it small)


def chunk_size() -> int:
    return CHUNK


def decimal_digits(n: int) -> int:
    return len(str(int(n)))


def next_pow10(n: int) -> int:
    """The smallest power of ten above ``n``: the first number with more decimal digits."""
    return 10 ** decimal_digits(n)


@dataclass(frozen=True)
class ElementPlan:
    """One element of one background run, with the per-cycle tables of an address visit."""

    index: int              # position in the list of segments
    run: int
    item: int               # index in test.items
    element: int            # index among the elements
    order: str              # 'up' | 'down' | 'any' (run as up)
    start: int
    cycles: int
    per_address: int        # P: cycles of one address visit
    # one entry per cycle of an address visit (length P)
    slot_op: np.ndarray     # op index in the element
    slot_value: np.ndarray  # 0 / 1
    slot_we: np.ndarray     # 1 on every cycle of a write
    slot_re: np.ndarray     # 1 on every cycle of a read
    slot_compare: np.ndarray  # 1 on the last cycle of a compared read
    slot_action: tuple[str, ...]  # 'w0', 'r1', ...
    ops: int                # operations per address (repeats spelled out)
    slot_kcode: np.ndarray  # 0 write, 1 read not compared, 2 compared read
    slot_data: np.ndarray   # 3·value + kcode: with 6·class, the index into (word, kcode) tables

    @property
    def down(self) -> bool:
        return self.order == "down"

    is_delay = False


@dataclass(frozen=True)
class DelayPlan:
    index: int
    run: int
    item: int
    start: int
    cycles: int
    seconds: object         # Fraction
    drain: bool = False     # the idle cycles at the end that wait for the last read's data

    is_delay = True


@dataclass(frozen=True)
class LoopedPlan:
    """An element whose address visit is too long to spell out cycle by cycle (more than
    ``EXPAND_LIMIT`` operations): only writers that can loop (STIL) take it, visit by visit,
    each run of copies as a loop."""

    index: int
    run: int
    item: int
    element: int
    order: str
    start: int
    cycles: int
    per_address: int
    runs: tuple              # model.OpRun per operation as written
    compared: tuple          # per run: its reads are compared

    is_delay = False
    looped = True

    @property
    def down(self) -> bool:
        return self.order == "down"


@dataclass(frozen=True)
class HammerPlan:
    """A hammer item: row by row, ``count`` rounds of row activations.  On the memory's port
    an activation is a read cycle (``row_cycle`` cycles) of the first word of the target row,
    with its data not compared; only writers that can loop (STIL) take it."""

    index: int
    run: int
    item: int
    order: str
    start: int
    cycles: int
    per_address: int
    hammer: object           # notation.Hammer
    row_cycle: int

    element = None
    is_delay = False
    looped = True
    runs = ()

    @property
    def down(self) -> bool:
        return self.order == "down"


@dataclass
class LoopedBlock:
    """A whole looped element (see :class:`LoopedPlan`)."""

    seg: LoopedPlan
    start: int
    count: int

    is_idle = False
    looped = True

    @property
    def run(self) -> int:
        return self.seg.run


class OpBlock:
    """Consecutive cycles of one element: column arrays, one entry per cycle.

    When the block is made of whole address visits of several cycles, ``vaddr`` and ``vcls``
    give the address and class once per visit (writers fill such blocks visit by visit) and
    the per-cycle ``address`` and ``cls`` are only made if asked for.
    """

    is_idle = False

    def __init__(self, seg: ElementPlan, start: int, count: int, slot, address=None, cls=None,
                 vaddr=None, vcls=None):
        self.seg = seg
        self.start = start          # first cycle
        self.count = count
        # cycle of the address visit (index into the seg's slot tables); None when an address
        # visit is one cycle (slot 0 throughout)
        self.slot = slot
        self._address = address     # the address as exported (logical or physical)
        self._cls = cls             # background class of the word (plan.words[run][2·class + v])
        self.vaddr = vaddr
        self.vcls = vcls

    @property
    def run(self) -> int:
        return self.seg.run

    @property
    def visits(self) -> int | None:
        """Number of whole visits when the block is given visit by visit, else None."""
        return None if self.vaddr is None else self.vaddr.shape[0]

    @property
    def address(self) -> np.ndarray:
        if self._address is None:
            self._address = np.repeat(self.vaddr, self.seg.per_address)
        return self._address

    @property
    def cls(self) -> np.ndarray:
        if self._cls is None:
            self._cls = np.repeat(self.vcls, self.seg.per_address)
        return self._cls

    def sub(self, i: int, j: int) -> "OpBlock":
        """Cycles i..j-1 of the block (views)."""
        return OpBlock(self.seg, self.start + i, j - i, None if self.slot is None else self.slot[i:j],
                       self.address[i:j], self.cls[i:j])

    def per_slot(self, values: np.ndarray):
        """``values[slot]`` for every cycle (a scalar when every cycle is slot 0)."""
        if self.slot is None:
            return values[0]
        return np.take(values, self.slot)

    @property
    def dsel(self) -> np.ndarray:
        """Index of the data word of each cycle in ``plan.words[run]`` (2·class + value)."""
        return self.cls.astype(np.int64) * 2 + self.per_slot(self.seg.slot_value)

    def data_index(self) -> np.ndarray:
        """Index of each cycle in a table of 3 entries per data word of ``plan.words[run]``
        (write, read, compared read): 6·class + 3·value + kcode."""
        if self.vcls is not None:
            return (self.vcls.astype(np.int64)[:, None] * 6 + self.seg.slot_data[None, :]).reshape(-1)
        return self.cls.astype(np.int64) * 6 + self.per_slot(self.seg.slot_data)

    @property
    def slot_index(self) -> np.ndarray:
        return np.zeros(self.count, np.int64) if self.slot is None else self.slot


@dataclass
class IdleBlock:
    """A whole delay: ``count`` idle cycles from ``start``."""

    seg: DelayPlan
    start: int
    count: int

    is_idle = True

    @property
    def run(self) -> int:
        return self.seg.run


class Vector(NamedTuple):
    """One clock cycle, as plain Python values (see the module text for the fields)."""

    cycle: int
    run: int
    element: int | None
    op: int | None
    action: str
    address: int
    we: int
    re: int
    wdata: int
    expect: int
    mask: int


def _background_classes(mem, name: str):
    """(class index per logical word, data word of each class as an int) for one background."""
    from ..model import background_array

    bg = background_array(mem, name)                       # (words, bits) uint8
    if not bg.any():
        return np.zeros(mem.words, np.uint8), [0]
    if (bg == bg[0]).all():
        return np.zeros(mem.words, np.uint8), [_row_int(bg[0])]
    packed = np.packbits(bg, axis=1, bitorder="little")      # (words, ceil(bits/8))
    del bg
    nb = packed.shape[1]
    if nb <= 8:
        wide = np.zeros((packed.shape[0], 8), np.uint8)
        wide[:, :nb] = packed
        keys = wide.view("<u8").ravel()
        uniq, inv = np.unique(keys, return_inverse=True)
        words = [int(u) for u in uniq]
    else:
        keys = np.ascontiguousarray(packed).view(f"V{nb}").ravel()
        uniq, inv = np.unique(keys, return_inverse=True)
        words = [int.from_bytes(bytes(u), "little") for u in uniq]
    dtype = np.uint8 if len(words) <= 256 else (np.uint16 if len(words) <= 65536 else np.uint32)
    return inv.reshape(-1).astype(dtype), words


def _row_int(row) -> int:
    return int.from_bytes(np.packbits(row, bitorder="little").tobytes(), "little")


class Plan:
    """Everything the expansion of ``test`` on ``mem`` needs, computed once (no vectors)."""

    def __init__(self, test, mem, physical: bool = False):
        from ..model import address_order, background_names, compared_reads, schedule

        self.test = test
        self.mem = mem
        self.physical = bool(physical)
        self.sched = schedule(test, mem)
        self.run_names = background_names(mem)
        order = address_order(mem)
        self.order = order.astype(np.int64)                  # ⇑ sequence of logical words
        if physical:
            self.addr_up = np.asarray(mem.physical_word(self.order), dtype=np.int64)
        else:
            self.addr_up = self.order
        self.all_ones = (1 << mem.bits) - 1
        # per run: class index of the word at each ⇑ position, and words[2k + v]
        self.cls_up: list[np.ndarray] = []
        self.words: list[list[int]] = []
        for name in self.run_names:
            cls, words = _background_classes(mem, name)
            self.cls_up.append(cls[self.order])
            table = []
            for w in words:
                table.extend((w, w ^ self.all_ones))
            self.words.append(table)
        determined = compared_reads(self.sched)
        segs = []
        for si, s in enumerate(self.sched.segments):
            if s.hammer is not None:
                segs.append(HammerPlan(si, s.run, s.item, s.order, s.start, s.cycles, s.per_address,
                                       s.hammer, s.row_cycle))
                continue
            if s.element is None:
                item = test.items[s.item]
                segs.append(DelayPlan(si, s.run, s.item, s.start, s.cycles, item.seconds))
                continue
            if s.ops_per_visit > EXPAND_LIMIT:      # hammer-length repeats: loops only
                from ..model import is_compared

                segs.append(LoopedPlan(si, s.run, s.item, s.element, s.order, s.start, s.cycles,
                                       s.per_address, s.runs,
                                       tuple(r.kind == "r" and is_compared(self.sched, si, r.first) for r in s.runs)))
                continue
            P = s.per_address
            slot_op = np.empty(P, np.int64)
            slot_value = np.empty(P, np.int64)
            slot_we = np.zeros(P, np.int64)
            slot_re = np.zeros(P, np.int64)
            slot_cmp = np.zeros(P, np.int64)
            actions = []
            for k, (off, kind, val) in enumerate(zip(s.op_offsets, s.op_kinds, s.op_values)):
                c = mem.read_cycles if kind == "r" else mem.write_cycles
                slot_op[off:off + c] = k
                slot_value[off:off + c] = val
                if kind == "w":
                    slot_we[off:off + c] = 1
                else:
                    slot_re[off:off + c] = 1
                    if (si, k) in determined:
                        slot_cmp[off + c - 1] = 1
                actions.extend([f"{kind}{val}"] * c)
            kcode = np.where(slot_we == 1, 0, np.where(slot_cmp == 1, 2, 1)).astype(np.int64)
            segs.append(ElementPlan(
                si, s.run, s.item, s.element, s.order, s.start, s.cycles, P, slot_op, slot_value,
                slot_we, slot_re, slot_cmp, tuple(actions), len(s.op_offsets), kcode,
                3 * slot_value + kcode,
            ))
        if self.sched.drain:
            last = self.sched.segments[-1]
            segs.append(DelayPlan(len(segs), last.run, None, last.start + last.cycles, self.sched.drain,
                                  None, drain=True))
        self.segments = tuple(segs)
        self.runs = self.sched.runs
        # pipelined reads: every data word of every run, for the compare codes of Pipeline
        self.latency = int(getattr(mem, "read_latency", 0))
        self.cmp_base = []
        self.cmp_words: list[int] = []
        for words in self.words:
            self.cmp_base.append(len(self.cmp_words))
            self.cmp_words.extend(words)

    # ---- figures ---------------------------------------------------------------------
    @property
    def cycles(self) -> int:
        return self.sched.cycles

    @property
    def seconds(self):
        return self.sched.seconds

    @property
    def address_bits(self) -> int:
        return self.mem.address_bits

    @property
    def bits(self) -> int:
        return self.mem.bits

    @property
    def elements(self) -> int:
        return len(self.test.elements)

    @property
    def max_ops(self) -> int:
        return max((s.ops if hasattr(s, "ops") else sum(r.repeat for r in s.runs)
                    for s in self.segments if not s.is_delay), default=1)

    @property
    def looped(self) -> bool:
        """Some element (or a hammer item) can only be written with loops (STIL)."""
        return any(getattr(s, "looped", False) for s in self.segments)

    def describe(self) -> str:
        from ..notation import format_notation

        m = self.mem
        return (
            f"{self.test.display_name} {format_notation(self.test, ascii=True)} on "
            f"{m.name or 'memory'} {m.words}x{m.bits} ({'physical' if self.physical else 'logical'} addresses, "
            f"order {m.order}, backgrounds {', '.join(self.run_names)}, clock {float(m.clock_hz) / 1e6:g} MHz)"
        )

    # ---- the stream ------------------------------------------------------------------
    def blocks(self, chunk: int | None = None, split10: bool = True) -> Iterator[OpBlock | IdleBlock]:
        """The cycles in order, as blocks.  An :class:`OpBlock` holds whole address visits
        (unless one visit is longer than ``chunk``) and, with ``split10``, is also cut where
        the cycle number reaches a power of ten (so the decimal width of ``cycle`` is the same
        in a block); an :class:`IdleBlock` is a whole delay, however long."""
        chunk = chunk or chunk_size()
        for seg in self.segments:
            if seg.is_delay:
                if seg.cycles:
                    yield IdleBlock(seg, seg.start, seg.cycles)
                continue
            if getattr(seg, "looped", False):
                yield LoopedBlock(seg, seg.start, seg.cycles)
                continue
            yield from self._element_blocks(seg, chunk, split10)

    def _element_blocks(self, seg: ElementPlan, chunk: int, split10: bool = True):
        n = self.mem.words
        P = seg.per_address
        cls_up = self.cls_up[seg.run]

        def piece(p0, p1):
            """(address, class) of ⇑/⇓ positions p0..p1-1, in visiting order (views)."""
            if seg.down:
                return self.addr_up[n - p1:n - p0][::-1], cls_up[n - p1:n - p0][::-1]
            return self.addr_up[p0:p1], cls_up[p0:p1]

        if P > chunk:         # long address visits (many repeats): split each visit
            for p in range(n):
                a, c = piece(p, p + 1)
                for s0 in range(0, P, chunk):
                    s1 = min(P, s0 + chunk)
                    slot = np.arange(s0, s1, dtype=np.int64)
                    yield from self._split(seg, seg.start + p * P + s0, slot,
                                           np.full(s1 - s0, a[0]), np.full(s1 - s0, c[0]), split10)
            return
        per = max(1, chunk // P)              # positions per piece
        tiled = np.tile(np.arange(P, dtype=np.int64), min(per, n)) if P > 1 else None
        for p0 in range(0, n, per):
            p1 = min(n, p0 + per)
            a, c = piece(p0, p1)
            start, count = seg.start + p0 * P, (p1 - p0) * P
            if P == 1:
                yield from self._split(seg, start, None, a, c, split10)
                continue
            slot = tiled[:count]
            if split10 and next_pow10(start) - start < count:     # cut inside a visit
                yield from self._split(seg, start, slot, np.repeat(a, P), np.repeat(c, P), split10)
            else:
                yield OpBlock(seg, start, count, slot, vaddr=a, vcls=c)

    @staticmethod
    def _split(seg, start, slot, address, cls, split10=True):
        """Blocks of these cycles that do not cross a power of ten of the cycle number."""
        count = address.shape[0]
        i = 0
        while i < count:
            j = min(count, next_pow10(start + i) - start) if split10 else count
            yield OpBlock(seg, start + i, j - i, None if slot is None else slot[i:j],
                          address[i:j], cls[i:j])
            i = j

    def vectors(self) -> Iterator[Vector]:
        """The cycles one by one as :class:`Vector` (convenient, slow: for small tests)."""
        pipe = Pipeline(self) if self.latency else None
        cw = self.cmp_words
        for b in self.blocks():
            if b.is_idle:
                head = pipe.idle(b.count) if pipe else ()
                for i, c in enumerate(range(b.start, b.start + b.count)):
                    code = int(head[i]) if i < len(head) else 0
                    yield Vector(c, b.run, None, None, "idle", 0, 0, 0, 0,
                                 cw[code - 1] if code else 0, self.all_ones if code else 0)
                continue
            seg = b.seg
            words = self.words[seg.run]
            slots = b.slot_index
            dsel = b.dsel
            codes = pipe.op(b) if pipe else None
            for i in range(b.count):
                s = int(slots[i])
                d = words[int(dsel[i])]
                we = int(seg.slot_we[s])
                re = int(seg.slot_re[s])
                if pipe is None:
                    expect, mask = (d if re else 0), (self.all_ones if seg.slot_compare[s] else 0)
                else:
                    code = int(codes[i])
                    expect, mask = (cw[code - 1], self.all_ones) if code else (0, 0)
                yield Vector(
                    b.start + i, seg.run, seg.element, int(seg.slot_op[s]), seg.slot_action[s],
                    int(b.address[i]), we, re, d if we else 0, expect, mask,
                )


class Pipeline:
    """The compares of a stream with pipelined reads (``read_latency`` L > 0), block by block.

    A compare code is 0 (nothing compared) or ``1 + i`` with ``plan.cmp_words[i]`` the word
    the read must return, compared in all bits.  Feed the blocks of ``plan.blocks()`` in
    order: :meth:`op` gives, per cycle of an :class:`OpBlock`, the code of the compare on that
    cycle (the read whose data comes back then, issued L cycles earlier and possibly in an
    earlier block); :meth:`idle` gives the codes of the first ``min(L, count)`` cycles of an
    idle block (every later cycle of it compares nothing)."""

    def __init__(self, plan):
        self.plan = plan
        self.lat = plan.latency
        self.carry = np.zeros(self.lat, np.int64)     # codes of the last L cycles issued

    def issued(self, b) -> np.ndarray:
        """Code of the compare each cycle of block ``b`` issues (before the shift)."""
        seg = b.seg
        cmp = b.per_slot(seg.slot_compare)
        codes = (1 + self.plan.cmp_base[seg.run] + b.dsel.astype(np.int64)) * cmp
        return np.broadcast_to(codes, (b.count,)) if np.ndim(codes) == 0 else codes

    def op(self, b) -> np.ndarray:
        return self.feed(self.issued(b))

    def feed(self, issued: np.ndarray) -> np.ndarray:
        """The compares on the cycles that issue ``issued`` (codes per cycle, in order)."""
        n = issued.shape[0]
        full = np.concatenate([self.carry, issued])
        self.carry = full[n:].copy()
        return full[:n]

    def idle(self, count: int) -> np.ndarray:
        head = self.carry[:count].copy()
        self.carry = np.concatenate([self.carry[count:], np.zeros(min(count, self.lat), np.int64)])
        return head


def expand(test, mem, physical: bool = False) -> Iterator[Vector]:
    """The cycle vectors of ``test`` on ``mem``, one by one (a generator)."""
    return Plan(test, mem, physical).vectors()

