"""``stil``: IEEE 1450-1999 STIL.

The file has, in this order, the ``STIL 1.0`` statement, a ``Header``, ``Signals``,
``SignalGroups``, one ``Timing`` block with one ``WaveformTable`` (named ``cycle``, period =
one clock cycle), a ``PatternBurst``, a ``PatternExec`` and one ``Pattern`` (``march``).

Signals (one per bit; a group lists its bits most significant first):

========  =====  ================================================================
group     type   meaning
========  =====  ================================================================
``CLK``   In     clock: low at the start of the cycle, rises at half the period
``ADDR``  In     ``ADR[0]`` … ``ADR[A-1]``: the word address (logical or physical)
``DIN``   In     ``DI[0]`` … ``DI[B-1]``: write data (0 when not writing)
``WE``    In     write enable (1 on every cycle of a write)
``RE``    In     read strobe (1 on every cycle of a read)
``DOUT``  Out    ``DO[0]`` … ``DO[B-1]``: compared at three quarters of the period:
                 ``H``/``L`` expect 1/0, ``X`` is not compared
========  =====  ================================================================

Every cycle is one ``V`` statement that assigns every group (inputs ``0``/``1`` drive
low/high, ``CLK`` is ``P``: one pulse); a read is compared (``H``/``L``) in its last cycle
only, other cycles have ``X`` on ``DOUT``.  An idle run of two cycles or more (a delay) is
``Loop N { V { … } }``.  ``Ann`` annotations mark each background run, element and delay.
The number of cycles (a ``Loop`` counting ``N``) equals ``Schedule.cycles``.

With pipelined reads (``read_latency`` L > 0) ``DOUT`` carries ``H``/``L`` on the compare cycle,
L cycles after the read's last cycle, in the ``V`` of whatever is issued then (``X`` on the
read's own cycles); the first L cycles of an idle run after reads are written as single
``V`` statements, and the pattern may end with idle drain cycles (annotated) that only compare.
"""

from __future__ import annotations

import re
from fractions import Fraction

import numpy as np

from .. import __version__
from .text import Row, bin_text, put_address, put_data, put_rows, table

WFT = "cycle"
PATTERN = "march"


def time_text(seconds: Fraction) -> str:
    """A STIL time expression in ns: exact when it has at most 9 decimals, else 6 decimals."""
    ns = Fraction(seconds) * 10**9
    for places in range(10):
        scaled = ns * 10**places
        if scaled.denominator == 1:
            n = scaled.numerator
            if places == 0:
                return f"'{n}ns'"
            s = f"{n // 10**places}.{n % 10**places:0{places}d}"
            return f"'{s}ns'"
    return f"'{float(ns):.6f}ns'"


def ann_text(s: str) -> str:
    """Annotation text that every STIL reader takes (no '*', quotes or non-ASCII)."""
    s = s.replace("*", "^").replace('"', "'")
    return re.sub(r"[^A-Za-z0-9_ (){}\[\]<>^,;:.=+\-/'#%&!?|~@$]", "_", s)


def quoted(s: str) -> str:
    return '"' + re.sub(r'[^ -~]|["\\]', "_", s) + '"'


def bus(prefix: str, n: int) -> str:
    return "+".join(f"{prefix}[{i}]" for i in range(n - 1, -1, -1))


def _pins(plan):
    from .pins import PinMap

    return getattr(plan, "pins", None) or PinMap()


def _wf(active: str) -> str:
    """The waveform of a logical 0/1 enable: an active-low pin is driven high for 0."""
    return "D/U" if active == "high" else "U/D"


def _pin_text(pm) -> str:
    parts = [f"write enable active {pm.write_enable_active}", f"read enable active {pm.read_enable_active}"]
    if pm.chip_enable:
        parts.append(f"chip enable {pm.chip_enable} active {pm.chip_enable_active}, inactive on idle cycles")
    if pm.byte_enables:
        parts.append(f"byte enables {pm.byte_enables} ({pm.byte_bits} bits each) active {pm.byte_enables_active} on writes")
    parts.append(f"compare strobe at {pm.strobe:g} of the period")
    return "; ".join(parts)


def header(plan) -> str:
    mem = plan.mem
    pm = _pins(plan)
    A, B = plan.address_bits, plan.bits
    nbe = pm.byte_count(B)
    period = Fraction(1) / mem.clock_hz
    sigs = [f"    {pm.clock} In;"]
    sigs += [f"    {pm.address}[{i}] In;" for i in range(A)]
    sigs += [f"    {pm.data_in}[{i}] In;" for i in range(B)]
    sigs += [f"    {pm.write_enable} In;", f"    {pm.read_enable} In;"]
    if pm.chip_enable:
        sigs.append(f"    {pm.chip_enable} In;")
    sigs += [f"    {pm.byte_enables}[{i}] In;" for i in range(nbe)]
    sigs += [f"    {pm.data_out}[{i}] Out;" for i in range(B)]
    sig_text = "\n".join(sigs)
    groups = [f"    ADDR = '{bus(pm.address, A)}';", f"    DIN = '{bus(pm.data_in, B)}';",
              f"    DOUT = '{bus(pm.data_out, B)}';"]
    if nbe:
        groups.append(f"    BEN = '{bus(pm.byte_enables, nbe)}';")
    group_text = "\n".join(groups)
    waves = [f"            {pm.clock} {{ P {{ '0ns' D; {time_text(period / 2)} U; }} }}",
             "            ADDR { 01 { '0ns' D/U; } }",
             "            DIN { 01 { '0ns' D/U; } }",
             f"            {pm.write_enable} {{ 01 {{ '0ns' {_wf(pm.write_enable_active)}; }} }}",
             f"            {pm.read_enable} {{ 01 {{ '0ns' {_wf(pm.read_enable_active)}; }} }}"]
    if pm.chip_enable:
        waves.append(f"            {pm.chip_enable} {{ 01 {{ '0ns' {_wf(pm.chip_enable_active)}; }} }}")
    if nbe:
        waves.append(f"            BEN {{ 01 {{ '0ns' {_wf(pm.byte_enables_active)}; }} }}")
    strobe = period * Fraction(pm.strobe).limit_denominator(10**6)
    waves.append(f"            DOUT {{ LHX {{ '0ns' X; {time_text(strobe)} L/H/X; }} }}")
    wave_text = "\n".join(waves)
    exact = (Fraction(period) * 10**18).denominator == 1          # at most 9 decimals of ns
    period_note = "" if exact else f"; the clock period is {time_text(period)[1:-1]} rounded"
    lat_note = (f"; pipelined reads: DOUT is compared {plan.latency} cycle(s) after the read's last cycle"
                if plan.latency else "")
    pin_note = "" if pm.is_default else f"\n    Ann {{* pins: {ann_text(_pin_text(pm))} *}}"
    return f"""STIL 1.0;

Header {{
    Title {quoted(f"marchkit: {plan.test.display_name} on {mem.name or 'memory'}")};
    Source {quoted(f"marchkit {__version__}")};
    Ann {{* {ann_text(plan.describe())} *}}
    Ann {{* {plan.cycles} cycles in {plan.runs} background run(s){period_note}{lat_note} *}}{pin_note}
}}

Signals {{
{sig_text}
}}

SignalGroups {{
{group_text}
}}

Timing {{
    WaveformTable {WFT} {{
        Period {time_text(period)};
        Waveforms {{
{wave_text}
        }}
    }}
}}

PatternBurst {PATTERN}_burst {{
    PatList {{ {PATTERN}; }}
}}

PatternExec {{
    PatternBurst {PATTERN}_burst;
}}

Pattern {PATTERN} {{
    W {WFT};
"""


def write_stil(plan, f, **_) -> dict:
    from ..notation.printer import format_item

    A, B = plan.address_bits, plan.bits
    pm = _pins(plan)
    nbe = pm.byte_count(B)
    f.write(header(plan).encode())
    zeros_a = "0" * A
    zero_d, x_d = "0" * B, "X" * B
    we, re_ = pm.write_enable, pm.read_enable

    def extra(active: int, write: int) -> str:
        out = f" {pm.chip_enable}={active};" if pm.chip_enable else ""
        return out + (f" BEN={str(write) * nbe};" if nbe else "")

    idle_v = f"V {{ {pm.clock}=P; ADDR={zeros_a}; DIN={zero_d}; {we}=0; {re_}=0;{extra(0, 0)} DOUT={x_d}; }}"
    # "DIN=...; WE=.; RE=.; DOUT=...;" comes from one table per background run
    probe = f"{zero_d}; {we}=1; {re_}=0;{extra(1, 1)} DOUT={x_d};"
    row = (Row().lit(f"    V {{ {pm.clock}=P; ADDR=").field("address", A).lit("; DIN=")
           .field("data", len(probe)).lit(" }\n"))
    data_tabs: dict[int, np.ndarray] = {}
    vectors = loops = 0
    last_run = None
    pipe = None
    if plan.latency:            # pipelined reads: DOUT comes from the Pipeline
        from .stream import Pipeline

        pipe = Pipeline(plan)
        ctexts = [x_d] + [t.decode() for t in bin_text(plan.cmp_words, B, b"LH")]
        ctab = table(ctexts)
        doff = row.off["data"] + len(probe) - B - 1          # DOUT's value in the data field
    for b in plan.blocks():
        seg = b.seg
        if seg.run != last_run:
            f.write(f"    Ann {{* run {seg.run}: background {ann_text(plan.run_names[seg.run])} *}}\n".encode())
            last_run = seg.run
        if getattr(b, "looped", False):
            writer = _write_hammer if seg.element is None else _write_looped
            v, lo = writer(plan, seg, f, x_d, zero_d, extra, pipe)
            vectors += v
            loops += lo
            continue
        if b.is_idle:
            if getattr(seg, "drain", False):
                what = f"read latency {plan.latency}: waiting for the last read's data"
            else:
                what = ann_text(format_item(plan.test.items[seg.item], ascii=True))
            f.write(f"    Ann {{* {what}: {b.count} idle cycles *}}\n".encode())
            count = b.count
            if pipe is not None:
                head = pipe.idle(count)
                if head.any():
                    f.write("".join(f"    {idle_v[:-len(x_d) - 3]}{ctexts[int(c)]}; }}\n" for c in head).encode())
                    vectors += len(head)
                    count -= len(head)
            if count == 1:
                f.write(f"    {idle_v}\n".encode())
            elif count:
                f.write(f"    Loop {count} {{ {idle_v} }}\n".encode())
                loops += 1
            vectors += 1 if count else 0
            continue
        if b.start == seg.start:
            el = plan.test.elements[seg.element]
            note = " run as up" if seg.order == "any" else ""
            f.write(f"    Ann {{* element {seg.element} {ann_text(format_item(el, ascii=True))}{note} *}}\n".encode())
        if seg.run not in data_tabs:
            words = plan.words[seg.run]
            d01 = bin_text(words, B)
            dhl = bin_text(words, B, b"LH")
            texts = []
            for d, hl in zip(d01, dhl):
                d, hl = d.decode(), hl.decode()
                if pipe is not None:
                    hl = x_d            # the compare comes L cycles later (overwritten below)
                texts += [f"{d}; {we}=1; {re_}=0;{extra(1, 1)} DOUT={x_d};",
                          f"{zero_d}; {we}=0; {re_}=1;{extra(1, 0)} DOUT={x_d};",
                          f"{zero_d}; {we}=0; {re_}=1;{extra(1, 0)} DOUT={hl};"]
            data_tabs[seg.run] = table(texts)
        buf = row.buffer(b.count)
        put_address(row, buf, "address", b, "bin")
        put_data(row, buf, "data", b, data_tabs[seg.run])
        if pipe is not None:
            put_rows(buf, doff, ctab, pipe.op(b))
        f.write(buf)
        vectors += b.count
    f.write(b"}\n")
    return {"vectors": vectors, "loops": loops}


def _dout_text(plan, x_d):
    """The DOUT text of a compare code (0: nothing compared, X)."""
    cw, B = plan.cmp_words, plan.bits

    def dout(code: int) -> str:
        return format(cw[code - 1], f"0{B}b").replace("0", "L").replace("1", "H") if code else x_d
    return dout


def _copies(parts, heads, issued, repeat, pipe, lat, dout) -> tuple[int, int]:
    """``repeat`` copies of the cycles ``heads`` (compare codes ``issued``) appended to
    ``parts``: with pipelined reads the first copies are written out until the compares in
    flight have landed, the rest is one ``Loop`` whose body is the same for every copy (it
    compares what the copy L cycles earlier issued, the same operation).  (vectors, loops)."""
    vectors = loops = 0
    explicit = 0 if pipe is None else min(repeat, -(-lat // len(heads)))
    for _ in range(explicit):
        got = pipe.feed(issued)
        parts += [f"    V {{ {h} DOUT={dout(int(c))}; }}\n" for h, c in zip(heads, got)]
        vectors += len(heads)
    looped = repeat - explicit
    if looped:
        got = pipe.feed(issued) if pipe is not None else issued
        one = [f"V {{ {h} DOUT={dout(int(c))}; }}" for h, c in zip(heads, got)]
        if looped == 1:
            parts += [f"    {v}\n" for v in one]
        else:
            parts.append(f"    Loop {looped} {{ " + " ".join(one) + " }\n")
            loops += 1
        vectors += len(one)
    return vectors, loops


def _write_hammer(plan, seg, f, x_d, zero_d, extra, pipe=None):
    """A hammer item, row by row: ``Loop count { … }`` around one round, each activation a
    read of the first word of the target row (its data not compared).  With pipelined reads
    the first rounds are written out until the compares still in flight have landed."""
    from ..notation.printer import format_item

    mem = plan.mem
    A = plan.address_bits
    pm = _pins(plan)
    clk, we, re_ = pm.clock, pm.write_enable, pm.read_enable
    h = seg.hammer
    f.write(f"    Ann {{* hammer {ann_text(format_item(h, ascii=True))}: each activation a read, not "
            f"compared, {seg.row_cycle} cycle(s) *}}\n".encode())

    dout = _dout_text(plan, x_d)

    R, mux = mem.rows, mem.mux
    lat = plan.latency
    vectors = loops = 0
    for p in range(R):
        row = R - 1 - p if seg.down else p
        heads = []
        for k in h.offsets:
            tp = ((row + k) % R) * mux            # the first word of the target row
            a = tp if plan.physical else int(mem.logical_word(tp))
            heads += [f"{clk}=P; ADDR={format(a, f'0{A}b')}; DIN={zero_d}; {we}=0; {re_}=1;{extra(1, 0)}"] \
                * seg.row_cycle
        parts: list = []
        v, lo = _copies(parts, heads, np.zeros(len(heads), np.int64), h.count, pipe, lat, dout)
        vectors += v
        loops += lo
        f.write("".join(parts).encode())
    return vectors, loops


def _write_looped(plan, seg, f, x_d, zero_d, extra, pipe=None):
    """An element with hammer-length repeats, visit by visit, each run of copies of an
    operation as ``Loop N { ... }`` around the vectors of one copy (so the file grows with
    the number of addresses, not with the repeat count).

    With pipelined reads (``pipe``) a copy's compare lands L cycles later: the first
    ``ceil(L / cycles of a copy)`` copies of a run are written out (they carry the compares of
    what came before), then the rest is one loop whose body is the same for every copy (it
    compares the copy issued L cycles earlier, the same operation on the same word)."""
    from ..notation.printer import format_item

    mem = plan.mem
    pm = _pins(plan)
    A, B = plan.address_bits, plan.bits
    el = plan.test.elements[seg.element]
    note = " run as up" if seg.order == "any" else ""
    f.write(f"    Ann {{* element {seg.element} {ann_text(format_item(el, ascii=True))}{note} *}}\n".encode())
    n = mem.words
    words = plan.words[seg.run]
    cls_up = plan.cls_up[seg.run]
    base = plan.cmp_base[seg.run]
    lat = plan.latency
    vectors = loops = 0
    clk, we, re_ = pm.clock, pm.write_enable, pm.read_enable

    dout = _dout_text(plan, x_d)

    for p in range(n):
        i = n - 1 - p if seg.down else p
        addr = format(int(plan.addr_up[i]), f"0{A}b")
        cls = int(cls_up[i])
        parts = []
        for r, compared in zip(seg.runs, seg.compared):
            word = words[2 * cls + r.value]
            d = format(word, f"0{B}b")
            if r.kind == "w":
                heads = [f"{clk}=P; ADDR={addr}; DIN={d}; {we}=1; {re_}=0;{extra(1, 1)}"] * r.each
            else:
                heads = [f"{clk}=P; ADDR={addr}; DIN={zero_d}; {we}=0; {re_}=1;{extra(1, 0)}"] * r.each
            issued = np.zeros(r.each, np.int64)
            if r.kind == "r" and compared:
                issued[-1] = 1 + base + 2 * cls + r.value
            v, lo = _copies(parts, heads, issued, r.repeat, pipe, lat, dout)
            vectors += v
            loops += lo
        f.write("".join(parts).encode())
    return vectors, loops
