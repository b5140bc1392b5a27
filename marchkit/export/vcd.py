"""``vcd``: IEEE 1364 value change dump.

Variables (all in scope ``pattern``, type ``wire``):

============  ======  ==============================================================
variable      width   meaning
============  ======  ==============================================================
``clk``       1       0 from the start of each cycle, 1 from half the period on
``address``   A       word address (logical or physical)
``we``        1       write enable
``re``        1       read strobe
``wdata``     B       write data (0 when not writing)
``expect``    B       data a read must return (0 when not reading)
``mask``      B       bits compared (all ones on the last cycle of a compared read)
``run``       *       background run
``element``   *       element index (``x`` on idle cycles)
``op``        *       op index in the element (``x`` on idle cycles)
============  ======  ==============================================================

(*: as many bits as the largest value needs.)

With a pin map (the memory file's ``[pins]`` or ``export --pins``, :mod:`.pins`) the signals
take the pin names — ``clk`` → ``clock``, ``address`` → ``address``, ``we``/``re`` →
``write_enable``/``read_enable``, ``wdata`` → ``data_in``, ``expect`` → ``data_out`` (the
value the data-out pins must show), ``mask`` → ``data_out`` + ``_mask`` — and an optional chip
enable (1 bit, active on operation cycles) and byte enables (one bit per ``byte_bits`` data
bits, active on writes) are added.  Enables are written as the pin's electrical value: an
active-low pin is ``0`` when active.  ``run``, ``element`` and ``op`` keep their names.

With pipelined reads (``read_latency`` L > 0) ``expect`` and ``mask`` are on the compare
cycle, L cycles after the read's last cycle (see :mod:`.stream`); the file may end with idle
drain cycles that only compare.

Cycle ``c`` starts at time ``c·T`` (T the
clock period) and the inputs change there; ``clk`` rises at ``c·T + T/2``.  The time unit is
the coarsest of 1/10/100 s … fs that makes half a period a whole number; if none does, it is
1 fs and times are rounded down.  The last timestamp, ``cycles·T``, is the end of the test.

The declarations and the ``$dumpvars`` of cycle 0 are written by pyvcd; the value changes
after that are written by marchkit in blocks (only values that change), in the same syntax.
"""

from __future__ import annotations

import io
from fractions import Fraction

import numpy as np

from .. import __version__
from ..errors import OutputError
from .stream import chunk_size
from .text import Row, bin_text, dec_widths, strip_mask, table

UNITS = (("s", 0), ("ms", 3), ("us", 6), ("ns", 9), ("ps", 12), ("fs", 15))


def timescale(clock_hz: Fraction) -> tuple[str, Fraction, bool]:
    """(timescale text, half period in that unit, exact?)."""
    half = Fraction(1) / (2 * Fraction(clock_hz))
    for unit, exp in UNITS:
        for mag in (100, 10, 1):
            step = Fraction(mag, 10**exp)
            h = half / step
            if h.denominator == 1:
                return f"{mag} {unit}", h, True
    return "1 fs", half * 10**15, False


def bits_for(n: int) -> int:
    return max(1, int(n).bit_length())


class _Signals:
    """The value texts and per-cycle value codes of the variables after ``clk``."""

    def __init__(self, plan):
        self.plan = plan
        self.A, self.B = plan.address_bits, plan.bits
        self.RW = bits_for(plan.runs - 1)
        self.EW = bits_for(plan.elements - 1)
        self.OW = bits_for(plan.max_ops - 1)
        # data values over all runs -> ids (0 is the zero word)
        values = {0: 0}
        self.vid = []
        for words in plan.words:
            self.vid.append(np.array([values.setdefault(w, len(values)) for w in words], np.int64))
        self.values = sorted(values, key=values.get)
        # pipelined reads: compare code (stream.Pipeline) -> value id
        self.cvid = np.array([0] + [values[w] for w in plan.cmp_words], np.int64)
        pm = getattr(plan, "pins", None)
        self.pins = pm if pm is not None and not pm.is_default else None
        self.NBE = self.pins.byte_count(self.B) if self.pins else 0
        self.names = NAMES + (("ce",) if self.pins and self.pins.chip_enable else ()) + (("ben",) if self.NBE else ())

    def widths(self):
        return (self.A, 1, 1, self.B, self.B, self.B, self.RW, self.EW, self.OW) + \
            ((1,) if "ce" in self.names else ()) + ((self.NBE,) if self.NBE else ())

    def var_names(self) -> dict:
        """The name each variable has in the file: the pin map's, or the plain default."""
        pm = self.pins
        if pm is None:
            return {n: n for n in ("clk",) + self.names}
        names = {"clk": pm.clock, "address": pm.address, "we": pm.write_enable, "re": pm.read_enable,
                 "wdata": pm.data_in, "expect": pm.data_out, "mask": pm.data_out + "_mask", "run": "run",
                 "element": "element", "op": "op", "ce": pm.chip_enable, "ben": pm.byte_enables}
        shown = [names[n] for n in ("clk",) + self.names]
        dup = sorted({n for n in shown if shown.count(n) > 1})
        if dup:
            raise OutputError(f"pins: the name {dup[0]!r} is taken in VCD (the variables run, element, op and "
                              f"{pm.data_out}_mask, the compare mask, are added); choose another")
        return names

    def low(self, name) -> bool:
        """True for an enable whose pin is active low (written inverted)."""
        pm = self.pins
        if pm is None:
            return False
        return {"we": pm.write_enable_active, "re": pm.read_enable_active, "ce": pm.chip_enable_active,
                "ben": pm.byte_enables_active}.get(name, "high") == "low"


NAMES = ("address", "we", "re", "wdata", "expect", "mask", "run", "element", "op")


class _Writer:
    """The value changes after cycle 0, in blocks.

    Two ways to build them.  The general one lays every variable out in every cycle and
    drops, with a byte mask, the ones that did not change (and the zeros in front of the
    times); exact, but slow per byte.  The fast one handles whole address visits of an
    element: which variables change from one cycle of a visit to the next is fixed by the
    element, so a visit has one layout and a run of visits is a plain table of text.  (At the
    start of a visit the address, and the data when a write or read is involved and the
    background has several words, are written even if unchanged: that is allowed, and keeps
    the layout fixed.)  The first visit of each element, visits whose times gain a digit and
    the first cycle of an idle run take the general way.
    """

    def __init__(self, plan, f, ids, sig, half):
        self.plan, self.f, self.ids, self.sig = plan, f, ids, sig
        self.q, self.r = divmod(half.numerator, half.denominator)
        self.d = half.denominator
        kmax = 2 * plan.cycles + 2
        if kmax * max(self.q, self.r, 1) >= 2**62:
            raise OutputError("this test is too long for VCD timestamps at this clock's time resolution")
        self.DT = len(str(int(self.ts(np.array([kmax]))[0])))
        B = sig.B
        bins = lambda vals, width: table(bin_text(vals, width))       # noqa: E731
        en = lambda name, w=1: table([b"1" * w, b"0" * w] if sig.low(name) else [b"0" * w, b"1" * w])  # noqa: E731
        self.names = sig.names
        self.tab = {
            "address": None,
            "we": en("we"), "re": en("re"),
            "wdata": bins(sig.values, B), "expect": bins(sig.values, B),
            "mask": bins([0, plan.all_ones], B),
            "run": bins(range(plan.runs), sig.RW),
            "element": table(bin_text(range(plan.elements), sig.EW) + [b"x" * sig.EW]),
            "op": table(bin_text(range(plan.max_ops), sig.OW) + [b"x" * sig.OW]),
            "ce": en("ce"), "ben": en("ben", max(sig.NBE, 1)),
        }
        self.width = dict(zip(self.names, sig.widths()))
        self.pipe = None
        if plan.latency:            # pipelined reads: expect/mask from the Pipeline, cycle by cycle
            from .stream import Pipeline

            self.pipe = Pipeline(plan)
        self.prev = None
        self._general_row()
        self._visit_rows: dict = {}
        self._idle_rows: dict = {}

    def ts(self, k):
        if self.r == 0:
            return k * self.q
        return k * self.q + (k * self.r) // self.d

    def part(self, name) -> str:
        """The text of a value change of ``name`` with the value left out (as a format)."""
        w = self.width[name]
        return ("{}" if w == 1 else "b{}") + (f"{self.ids[name]}\n" if w == 1 else f" {self.ids[name]}\n")

    def value_text(self, name, code) -> bytes:
        if name == "address":
            return bin_text([int(code)], self.width["address"])[0]
        return bytes(self.tab[name][int(code)])

    # ---- codes: what identifies each variable's value in a cycle -----------------------
    def op_codes(self, b):
        seg = b.seg
        slot = b.slot_index
        we = np.take(seg.slot_we, slot)
        re = np.take(seg.slot_re, slot)
        v = np.take(self.sig.vid[seg.run], b.dsel)
        n = b.count
        expect, mask = v * re, np.take(seg.slot_compare, slot)
        if self.pipe is not None:
            cmp = self.pipe.op(b)
            expect, mask = np.take(self.sig.cvid, cmp), (cmp > 0).astype(np.int64)
        return (np.asarray(b.address, np.int64), we, re, v * we, expect, mask,
                np.full(n, seg.run, np.int64), np.full(n, seg.element, np.int64), np.take(seg.slot_op, slot)) + \
            self._extra(np.ones(n, np.int64), we)

    def idle_codes(self, run, n, cmp=None):
        z = np.zeros(n, np.int64)
        expect, mask = (z, z) if cmp is None else (np.take(self.sig.cvid, cmp), (cmp > 0).astype(np.int64))
        return (z, z, z, z, expect, mask, np.full(n, run, np.int64), np.full(n, self.plan.elements, np.int64),
                np.full(n, self.plan.max_ops, np.int64)) + self._extra(z, z)

    def _extra(self, ce, ben):
        """Codes of the chip enable and byte enables, when the pin map has them."""
        return ((ce,) if "ce" in self.names else ()) + ((ben,) if "ben" in self.names else ())

    # ---- the general way ---------------------------------------------------------------
    def _general_row(self):
        row = Row()
        row.lit("#").field("t0", self.DT).lit(f"\n0{self.ids['clk']}\n")
        ends = [row.size]
        for name in self.names:
            w = self.width[name]
            if w == 1:
                row.field(name, 1).lit(f"{self.ids[name]}\n")
            else:
                row.lit("b").field(name, w).lit(f" {self.ids[name]}\n")
            ends.append(row.size)
        row.lit("#").field("t1", self.DT).lit(f"\n1{self.ids['clk']}\n")
        ends.append(row.size)
        widths = np.diff([0] + ends)
        self.grow, self.gwidths = row, widths

    def general(self, c0: int, codes) -> None:
        n = codes[0].shape[0]
        row = self.grow
        buf = row.buffer(n)
        k = np.arange(c0, c0 + n, dtype=np.int64) * 2
        t0, t1 = self.ts(k), self.ts(k + 1)
        row.put_dec(buf, "t0", t0)
        row.put_dec(buf, "t1", t1)
        for name, cd in zip(self.names, codes):
            if name == "address":
                row.put_bin(buf, name, cd)
            else:
                row.put(buf, name, self.tab[name], cd)
        changed = np.ones((n, len(self.names) + 2), bool)
        for j, cd in enumerate(codes):
            p0 = self.prev[j] if self.prev is not None else cd[0]
            changed[0, j + 1] = cd[0] != p0
            changed[1:, j + 1] = cd[1:] != cd[:-1]
        if c0 == 0:
            changed[0, :-1] = False          # cycle 0 is in $dumpvars
        self.prev = [cd[-1] for cd in codes]
        keep = np.repeat(changed, self.gwidths, axis=1)
        for name, tv in (("t0", t0), ("t1", t1)):
            off = row.off[name]
            m = np.empty((n, self.DT), bool)
            strip_mask(m, 0, self.DT, tv)
            keep[:, off:off + self.DT] &= m
        self.f.write(buf[keep])

    # ---- idle runs ---------------------------------------------------------------------
    def idle(self, run: int, start: int, count: int) -> None:
        if self.pipe is not None:
            head = self.pipe.idle(count)
            if head.any():                    # the data of reads issued before the idle run
                self.general(start, self.idle_codes(run, len(head), head))
                start, count = start + len(head), count - len(head)
                if not count:
                    return
        self.general(start, self.idle_codes(run, 1))
        c, end = start + 1, start + count
        while c < end:
            e = min(end, c + chunk_size())
            k = np.arange(c, e, dtype=np.int64) * 2
            t0, t1 = self.ts(k), self.ts(k + 1)
            d0, d1 = dec_widths(t0), dec_widths(t1)
            cuts = np.flatnonzero((d0[1:] != d0[:-1]) | (d1[1:] != d1[:-1])) + 1
            for i, j in zip(np.r_[0, cuts], np.r_[cuts, e - c]):
                key = (int(d0[i]), int(d1[i]))
                if key not in self._idle_rows:
                    self._idle_rows[key] = (Row().lit("#").field("t0", key[0]).lit(f"\n0{self.ids['clk']}\n#")
                                            .field("t1", key[1]).lit(f"\n1{self.ids['clk']}\n"))
                row = self._idle_rows[key]
                buf = row.buffer(j - i)
                row.put_dec(buf, "t0", t0[i:j])
                row.put_dec(buf, "t1", t1[i:j])
                self.f.write(buf)
            c = e

    # ---- elements ------------------------------------------------------------------------
    def visit_layout(self, seg, D: int):
        """Row of one whole address visit of ``seg`` with times of ``D`` digits:
        (row, data fields [(field, slot, name)])."""
        key = (seg.index, D)
        if key in self._visit_rows:
            return self._visit_rows[key]
        if any(k[0] != seg.index for k in self._visit_rows):
            self._visit_rows.clear()          # one element at a time: bounded memory
        P = seg.per_address
        single = len(self.plan.words[seg.run]) <= 2          # one background word
        clk = self.ids["clk"]
        row = Row()
        fields = []
        flags = [("we", seg.slot_we), ("re", seg.slot_re), ("mask", seg.slot_compare), ("op", seg.slot_op)]
        if "ben" in self.names:
            flags.append(("ben", seg.slot_we))
        for s in range(P):
            p = (s - 1) % P
            row.lit("#").field(f"t0_{s}", D).lit(f"\n0{clk}\n")
            if s == 0:
                row.lit("b").field("address", self.width["address"]).lit(f" {self.ids['address']}\n")
            for name, en in flags:
                if en[s] != en[p]:
                    code = int(en[s])
                    row.lit(self.part(name).format(self.value_text(name, code).decode()))
            for name, en in (("wdata", seg.slot_we), ("expect", seg.slot_re)):
                if single:      # one data word: the values are known
                    vid = self.sig.vid[seg.run]
                    emit = (vid[seg.slot_value[s]] * en[s]) != (vid[seg.slot_value[p]] * en[p])
                elif s > 0:     # same word: the value changes if on/off or w0/w1 changes
                    emit = not (en[s] == en[p] and (not en[s] or seg.slot_value[s] == seg.slot_value[p]))
                else:           # a new word: whenever a write (read) is involved
                    emit = bool(en[s] or en[p])
                if emit:
                    fname = f"{name}_{s}"
                    row.lit("b").field(fname, self.sig.B).lit(f" {self.ids[name]}\n")
                    fields.append((fname, s, name))
            row.lit("#").field(f"t1_{s}", D).lit(f"\n1{clk}\n")
        self._visit_rows[key] = (row, fields)
        return self._visit_rows[key]

    def element(self, b) -> None:
        seg = b.seg
        P = seg.per_address
        if self.pipe is not None:             # pipelined reads: the general way throughout
            self.general(b.start, self.op_codes(b))
            return
        if b.slot is not None and (b.count % P or int(b.slot[0]) != 0):
            self.general(b.start, self.op_codes(b))       # part of a very long visit
            return
        V = b.count // P
        v0 = 0
        if b.start == seg.start:                          # first visit: after another element
            self.general(b.start, self.op_codes(b.sub(0, P)))
            v0 = 1
        if v0 >= V:
            return
        first = b.start + np.arange(v0, V, dtype=np.int64) * P      # first cycle of each visit
        t_first = self.ts(2 * first[[0, -1]])
        t_last = self.ts(2 * (first[[0, -1]] + P - 1) + 1)
        if len(set(dec_widths(np.r_[t_first, t_last]).tolist())) == 1:   # one width throughout
            d_first = np.full(first.shape[0], len(str(int(t_first[0]))))
            good = np.ones(first.shape[0], bool)
        else:
            d_first = dec_widths(self.ts(2 * first))
            d_last = dec_widths(self.ts(2 * (first + P - 1) + 1))
            good = d_first == d_last
        # runs of visits with one digit count (and visits that change it, one by one)
        key = np.where(good, d_first, -1 - np.arange(first.shape[0]))
        cuts = np.flatnonzero(key[1:] != key[:-1]) + 1
        vid = self.sig.vid[seg.run]
        for i, j in zip(np.r_[0, cuts], np.r_[cuts, first.shape[0]]):
            va, vb = v0 + i, v0 + j
            if not good[i]:
                self.general(b.start + va * P, self.op_codes(b.sub(va * P, vb * P)))
                continue
            row, fields = self.visit_layout(seg, int(d_first[i]))
            n = vb - va
            buf = row.buffer(n)
            c = first[i:j]
            for s in range(P):
                k = 2 * (c + s)
                row.put_dec(buf, f"t0_{s}", self.ts(k))
                row.put_dec(buf, f"t1_{s}", self.ts(k + 1))
            if b.visits is not None:
                row.put_bin(buf, "address", b.vaddr[va:vb])
                cls = b.vcls[va:vb].astype(np.int64)
            else:
                rows0 = np.arange(va, vb) * P                  # row of slot 0 of each visit
                row.put_bin(buf, "address", np.take(b.address, rows0))
                cls = np.take(b.cls, rows0).astype(np.int64)
            for fname, s, name in fields:
                on = seg.slot_we[s] if name == "wdata" else seg.slot_re[s]
                if on:
                    row.put(buf, fname, self.tab[name], np.take(vid, 2 * cls + int(seg.slot_value[s])))
                else:
                    row.put(buf, fname, self.tab[name], 0)
            self.f.write(buf)
            last = b.sub(vb * P - 1, vb * P)
            self.prev = [cd[-1] for cd in self.op_codes(last)]


def vcd_text(s: str) -> str:
    """User text (test and memory names) made safe inside a VCD ``$comment``: IEEE 1364
    ends a section at the keyword ``$end``, so no ``$`` may pass, and readers split on
    blanks and lines, so control characters become spaces."""
    return "".join("S" if c == "$" else (" " if (ord(c) < 32 or ord(c) == 127) else c) for c in s)


def write_vcd(plan, f, **_) -> dict:
    from vcd import VCDWriter

    sig = _Signals(plan)
    ts_text, half, exact = timescale(plan.mem.clock_hz)
    first = next(iter(plan.vectors()), None)
    head = io.StringIO()
    comment = vcd_text(plan.describe()) + f"; {plan.cycles} cycles"
    if not exact:
        comment += "; half a clock period is not a whole number of fs: times are rounded down"
    w = VCDWriter(head, timescale=ts_text, date="", comment=comment, version=f"marchkit {__version__}")
    idle0 = first is None or first.action == "idle"
    elec = lambda name, v, width=1: ((1 << width) - 1) * (1 - v if sig.low(name) else v)   # noqa: E731
    we0 = first.we if first else 0
    init = dict(
        clk=0, address=first.address if first else 0, we=elec("we", we0),
        re=elec("re", first.re if first else 0), wdata=first.wdata if first else 0,
        expect=first.expect if first else 0, mask=first.mask if first else 0,
        run=first.run if first else 0,
        element="x" if idle0 else first.element, op="x" if idle0 else first.op,
        ce=elec("ce", 0 if idle0 else 1), ben=elec("ben", we0, max(sig.NBE, 1)),
    )
    ids = {}
    shown = sig.var_names()
    for name, width in zip(("clk",) + sig.names, (1,) + sig.widths()):
        var = w.register_var("pattern", shown[name], "wire", size=width, init=init[name])
        ids[name] = var.ident
    out = _Writer(plan, f, ids, sig, half)      # checks the time range before anything is written
    w.flush()
    f.write(head.getvalue().encode())
    for b in plan.blocks(split10=False):
        if b.is_idle:
            out.idle(b.run, b.start, b.count)
        else:
            out.element(b)
    end = out.ts(np.array([2 * plan.cycles], np.int64))[0]
    f.write(f"#{int(end)}\n0{ids['clk']}\n".encode())
    return {"cycles": plan.cycles, "timescale": ts_text}
