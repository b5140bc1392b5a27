"""Lowering: a march test on a memory → the BIST program IR that every back end reads.

The IR is a short list of steps, the same for every background run (the hardware repeats it
once per run, as the schedule does):

* :class:`OpStep` — one operation of a march element (write or read, value 0/1 = background or
  its complement, a repeat count, whether a read is compared in the first run and in later
  runs, whether it is the element's last operation, the element's direction);
* :class:`DelayStep` — a delay element as a number of idle clock cycles at the memory's clock
  (``ceil(seconds × f)``; a delay of 0 cycles is left out; longer than 2³² cycles is split).

Beside the steps: the address generator (:class:`AddressOrder`), one :class:`Background` per
run (a data word made of three constants and two parity bits of the cell's physical place),
the memory's timing (cycles per read and write) and the figures the controller must reproduce
(cycles, operations).  The back ends (``fsm``, ``program``) read only this.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from fractions import Fraction

from ..errors import InputError

MAX_REPEAT_BITS = 16          # OpStep.repeat ≤ 2^16 (the notation's limit is 65536)
MAX_DELAY = 1 << 32           # cycles in one DelayStep
MAX_CYCLES = (1 << 32) - 1    # fail_cycle is a 32-bit output


class BistError(InputError):
    """A test or memory the BIST generator cannot build (exit status 2)."""


@dataclass(frozen=True)
class OpStep:
    write: bool
    value: int
    repeat: int
    compare_first: bool       # a read compared in the first run (it comes after the first write)
    compare_later: bool       # a read compared in the later runs (the test writes at all)
    last_op: bool             # the last operation of its element (the visit ends here)
    down: bool                # the element runs ⇓ (⇕ runs ⇑, as the exported stimulus does)
    element: int              # index among the test's elements
    first: int                # index of the element's first step
    notation_order: str = ""  # the element's order as written (up / down / any)

    is_delay = False


@dataclass(frozen=True)
class DelayStep:
    cycles: int               # 1 … 2^32

    is_delay = True


@dataclass(frozen=True)
class Background:
    """Data word ``w0`` writes at logical address ``a`` in one run:
    ``const ^ (row_mask if rowpar(a) else 0) ^ (slot_mask if slotpar(a) else 0)`` where
    ``rowpar`` / ``slotpar`` are the parities of the physical row and of the word's slot in the
    row (model.geometry: row ``p // mux``, slot ``p % mux`` of the physical word ``p``)."""

    name: str
    const: int
    row_mask: int
    slot_mask: int


@dataclass(frozen=True)
class AddressOrder:
    """The ⇑ sequence as a function of the position ``i`` (⇓ visits position ``n−1−i``), or for
    ``random`` an LFSR walked forwards (⇑) and backwards (⇓) that skips the states beyond the
    last word: address = state − 1 (model.orders: the maximal LFSR of ``width`` bits from the
    seed, its states above ``n`` left out)."""

    kind: str                 # linear | complement | gray | stride | random
    arg: int = 0
    width: int = 0            # random: LFSR bits
    taps: tuple[int, ...] = ()    # random: 1-based tap positions (XOR feedback into bit 0)
    up_first: int = 0         # random: state of the first ⇑ address
    down_first: int = 0       # random: state of the first ⇓ address (the last ⇑ one)
    skip: int = 1             # random: at most this many LFSR steps from one address to the next


@dataclass(frozen=True)
class BistIR:
    test_name: str
    memory_name: str
    notation: str
    steps: tuple
    backgrounds: tuple[Background, ...]
    order: AddressOrder
    words: int
    aw: int
    dw: int
    read_cycles: int
    write_cycles: int
    clock_hz: Fraction
    mux_log2: int | None      # None: the backgrounds need no physical parity
    scramble_bits: tuple[int, ...] | None
    scramble_xor: int
    cycles: int               # the whole test, all runs (= Schedule.cycles)
    ops: int                  # memory operations (= Schedule.ops)
    transparent: bool = False     # run 0 predicts the signature, run 1 tests (Nicolaidis 1996)

    @property
    def runs(self) -> int:
        return len(self.backgrounds)

    @property
    def seconds(self) -> Fraction:
        return Fraction(self.cycles) / self.clock_hz

    def physical_bit(self, i: int) -> tuple[int | None, int]:
        """(logical address bit or None, XOR constant) giving bit ``i`` of the physical word."""
        src = i if self.scramble_bits is None else self.scramble_bits[i]
        if src >= self.aw:
            return None, (self.scramble_xor >> i) & 1
        return src, (self.scramble_xor >> i) & 1

    def describe(self) -> str:
        return (f"{self.test_name} {self.notation} on {self.memory_name} {self.words}x{self.dw}, "
                f"order {self.order.kind}{':' + str(self.order.arg) if self.order.kind == 'stride' else ''}, "
                f"{self.runs} background run{'s' if self.runs != 1 else ''} "
                f"({', '.join(b.name for b in self.backgrounds)}), {self.read_cycles}/{self.write_cycles} "
                f"cycles per read/write, clock {float(self.clock_hz) / 1e6:g} MHz")


def _pow2(n: int) -> bool:
    return n > 0 and n & (n - 1) == 0


def lower_order(mem) -> AddressOrder:
    from ..model import parse_order

    kind, arg = parse_order(mem.order)
    if kind in ("linear", "complement"):
        return AddressOrder(kind)
    if kind in ("gray", "stride"):
        if not _pow2(mem.words):
            raise BistError(
                f"address order {mem.order}: the BIST address generator makes it for a power-of-two "
                f"number of words only ({mem.words} words); use linear or complement, or a "
                "power-of-two memory")
        return AddressOrder(kind, int(arg or 0))
    return _lfsr_order(mem.words, int(arg))


def lfsr_next(state: int, width: int, taps) -> int:
    fb = 0
    for t in taps:
        fb ^= state >> (t - 1)
    return ((state << 1) | (fb & 1)) & ((1 << width) - 1)


def lfsr_prev(state: int, width: int, taps) -> int:
    """The state before ``state`` (the feedback includes the top bit: tap ``width``)."""
    top = state & 1
    for t in taps:
        if t != width:
            top ^= (state >> t) & 1
    return (state >> 1) | (top << (width - 1))


@lru_cache(maxsize=16)
def _lfsr_order(n: int, seed: int) -> AddressOrder:
    from ..model.orders import LFSR_TAPS

    k = max(2, n.bit_length())
    if k not in LFSR_TAPS:
        raise BistError(f"address order random: no LFSR of {k} bits")
    taps = tuple(LFSR_TAPS[k])
    if max(taps) != k:
        raise BistError(f"address order random: the {k}-bit LFSR's taps do not include bit {k}")
    period = (1 << k) - 1
    start = seed % period + 1
    # walk the cycle once (2^k − 1 ≤ 2n − 1 states): the first and last valid states in the
    # ⇑ order and the longest run of skipped states
    s, first, last, gap, run = start, None, None, 0, 0
    for _ in range(period):
        if s <= n:
            if first is None:
                first = s
            last = s
            gap = max(gap, run)
            run = 0
        else:
            run += 1
        s = lfsr_next(s, k, taps)
    return AddressOrder("random", seed, k, taps, first, last, gap + 1)


def lower_backgrounds(mem) -> tuple[tuple[Background, ...], int | None]:
    from ..model import background_names

    dw = mem.bits
    ones = (1 << dw) - 1
    out = []
    need_place = False
    for name in background_names(mem):
        if name == "solid":
            out.append(Background(name, 0, 0, 0))
        elif name.startswith("0x"):
            out.append(Background(name, int(name, 16), 0, 0))
        else:
            need_place = True
            # bit b sits in column b·mux + slot: its parity is (b·mux) mod 2 XOR the slot's
            col_const = 0 if mem.mux % 2 == 0 else sum(1 << b for b in range(dw) if b % 2)
            if name == "checkerboard":
                out.append(Background(name, col_const, ones, ones))
            elif name == "rows":
                out.append(Background(name, 0, ones, 0))
            elif name == "columns":
                out.append(Background(name, col_const, 0, ones))
            else:                                   # pragma: no cover (model checks names)
                raise BistError(f"background {name!r} is not known to the BIST generator")
    mux_log2 = None
    if need_place:
        if not _pow2(mem.mux):
            raise BistError(
                f"backgrounds by physical place (checkerboard, rows, columns) need a power-of-two "
                f"column mux for the BIST data generator (mux {mem.mux})")
        mux_log2 = mem.mux.bit_length() - 1
    return tuple(out), mux_log2


def transparent_test(test):
    """Nicolaidis's transformation (IEEE Trans. Computers 45(10), 1996) of a march test into a
    transparent one: the initialising element (writes only) is removed, every value is taken
    relative to the memory's contents ``c`` (``0`` means ``c`` if the removed element wrote 0),
    and an element ``⇑(r1,w0)`` is appended when the test would leave the contents inverted.
    Every remaining element must begin with a read: the write data of a visit is made from what
    its reads returned.  Returns the transformed :class:`MarchTest`."""
    import dataclasses

    from ..notation import Delay, Element, Op

    items = list(test.items)
    first = next((i for i, it in enumerate(items) if not isinstance(it, Delay)), None)
    if first is None:
        raise BistError("the test has no operation")
    base = 0
    if all(op.kind == "w" for op in items[first].ops):
        base = items[first].ops[-1].value
        del items[first]
    out, state = [], base
    for it in items:
        if isinstance(it, Delay):
            out.append(it)
            continue
        if it.ops[0].kind != "r":
            raise BistError(
                "transparent test: every element after the initialising one must begin with a read "
                f"(its write data is made from what the read returned); {it.order}({','.join(o.text for o in it.ops)}) does not")
        out.append(dataclasses.replace(it, ops=tuple(dataclasses.replace(o, value=o.value ^ base) for o in it.ops)))
        for o in it.ops:
            if o.kind == "w":
                state = o.value
    if not any(isinstance(it, Element) for it in out):
        raise BistError("transparent test: nothing is left after the initialising element")
    if state != base:
        out.append(Element("up", (Op("r", 1), Op("w", 0))))
    return dataclasses.replace(test, items=tuple(out), name=(test.display_name + " (transparent)"))


def lower(test, mem, transparent: bool = False) -> BistIR:
    """The IR of ``test`` on ``mem``; :class:`BistError` when the hardware cannot run it.

    ``transparent``: the test transformed by :func:`transparent_test`, run twice — run 0
    predicts the signature of the reads (writes are idle cycles), run 1 tests and restores."""
    from ..model import schedule, with_changes
    from ..notation import Delay, format_notation

    if test.hammers:
        raise BistError("the controller has no row-activation step, so a test with a hammer item cannot "
                        "be built into it; grade the test, or export it as stil for a tester")
    order = lower_order(mem)
    if transparent:
        from ..model import background_names

        if background_names(mem) != ["solid"]:
            raise BistError("transparent test: the memory's contents take the place of the data "
                            "background; give --backgrounds solid (one run)")
        test = transparent_test(test)
        backgrounds, mux_log2 = (Background("prediction", 0, 0, 0), Background("test", 0, 0, 0)), None
        sched = schedule(test, with_changes(mem, backgrounds=("solid", "solid")))
    else:
        backgrounds, mux_log2 = lower_backgrounds(mem)
        sched = schedule(test, mem)
    if sched.cycles > MAX_CYCLES:
        raise BistError(
            f"the test takes {sched.cycles:,} cycles; fail_cycle has 32 bits (at most {MAX_CYCLES:,})")
    any_write = any(op.kind == "w" for el in test.elements for op in el.ops)
    steps: list = []
    seen_write = False
    ei = -1
    for item in test.items:
        if isinstance(item, Delay):
            left = math.ceil(Fraction(item.seconds) * mem.clock_hz)
            while left > 0:
                n = min(left, MAX_DELAY)
                steps.append(DelayStep(n))
                left -= n
            continue
        ei += 1
        first = len(steps)
        down = item.order == "down"
        for k, op in enumerate(item.ops):
            write = op.kind == "w"
            cmp_first = (not write) and (seen_write or transparent)
            cmp_later = (not write) and (any_write or transparent)
            steps.append(OpStep(write, op.value, op.repeat, cmp_first, cmp_later,
                                k == len(item.ops) - 1, down, ei, first, item.order))
            seen_write = seen_write or write
    if not steps:
        raise BistError("the test has no operation")
    for s in steps:
        if not s.is_delay and s.repeat > (1 << MAX_REPEAT_BITS):
            raise BistError(f"repeat count {s.repeat} is more than the controller's {1 << MAX_REPEAT_BITS}")
    # the last step ends the program; a delay-only tail is fine
    return BistIR(
        test_name=test.display_name, memory_name=mem.name or "memory",
        notation=format_notation(test, ascii=True), steps=tuple(steps), backgrounds=backgrounds,
        order=order, words=mem.words, aw=mem.address_bits, dw=mem.bits,
        read_cycles=mem.read_cycles, write_cycles=mem.write_cycles, clock_hz=mem.clock_hz,
        mux_log2=mux_log2, scramble_bits=mem.scramble_bits, scramble_xor=mem.scramble_xor,
        cycles=sched.cycles - sched.drain,     # the controller adds its own LAT at the end
        ops=sched.ops - (sum(s.repeat for s in steps if not s.is_delay and s.write) * mem.words if transparent else 0),
        transparent=transparent,
    )


def replay(ir: BistIR):
    """The operations the IR makes, in order, as (cycle, run, logical address, write, data,
    compared) — a software model of the controller (for tests and for the program listing).

    A generator; slow (one Python step per operation): for small memories."""
    n = ir.words
    t = 0
    for run in range(ir.runs):
        for idx, s in _items(ir.steps):
            if s[0].is_delay:
                t += s[0].cycles
                continue
            ops = s
            down = ops[0].down
            for i in range(n):
                pos = n - 1 - i if down else i
                a = address_at(ir, pos)
                bg = background_word(ir, run, a)
                for op in ops:
                    for _ in range(op.repeat):
                        data = bg ^ (((1 << ir.dw) - 1) if op.value else 0)
                        cmp = (not op.write) and (op.compare_first if run == 0 else op.compare_later)
                        yield t, run, a, op.write, data, cmp
                        t += ir.write_cycles if op.write else ir.read_cycles


def _items(steps):
    i = 0
    while i < len(steps):
        s = steps[i]
        if s.is_delay:
            yield i, (s,)
            i += 1
            continue
        j = i
        while not steps[j].last_op:
            j += 1
        yield i, tuple(steps[i:j + 1])
        i = j + 1


def address_at(ir: BistIR, pos: int) -> int:
    """Logical address at ⇑ position ``pos`` (what the hardware computes)."""
    n, aw = ir.words, ir.aw
    k = ir.order.kind
    if k == "linear":
        return pos
    if k == "complement":
        return n - 1 - (pos >> 1) if pos & 1 else pos >> 1
    if k == "gray":
        return pos ^ (pos >> 1)
    if k == "random":
        return _random_walk(ir.order, n)[pos]
    i = ir.order.arg
    lo = pos & ((1 << (aw - i)) - 1)
    return (lo << i) | (pos >> (aw - i))


@lru_cache(maxsize=16)
def _random_walk(o: AddressOrder, n: int) -> list[int]:
    """The ⇑ addresses as the hardware makes them: from ``up_first``, each next address at most
    ``skip`` LFSR steps on (checked), and the ⇓ walk from ``down_first`` backwards must be its
    exact reverse (checked)."""
    up = [o.up_first]
    while len(up) < n:
        s = up[-1]
        for _ in range(o.skip):
            s = lfsr_next(s, o.width, o.taps)
            if s <= n:
                break
        assert s <= n, "skip chain too short"
        up.append(s)
    down = [o.down_first]
    while len(down) < n:
        s = down[-1]
        for _ in range(o.skip):
            s = lfsr_prev(s, o.width, o.taps)
            if s <= n:
                break
        assert s <= n, "skip chain too short"
        down.append(s)
    assert down == up[::-1]
    return [s - 1 for s in up]


def background_word(ir: BistIR, run: int, a: int) -> int:
    b = ir.backgrounds[run]
    w = b.const
    if ir.mux_log2 is not None:
        m = ir.mux_log2

        def pbit(i):
            if i >= ir.aw:
                return 0
            src, x = ir.physical_bit(i)
            return (0 if src is None else (a >> src) & 1) ^ x

        if pbit(m):
            w ^= b.row_mask
        if m > 0 and pbit(0):
            w ^= b.slot_mask
    return w
