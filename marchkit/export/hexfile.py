"""``hex``: a Verilog ``$readmemh`` pattern, a self-checking testbench and a behavioural SRAM.

Word layout (one word per line, ``1 + P`` hex digits, ``P = max(ceil(A/4) + 2·ceil(B/4), 8)``
for ``A`` address bits and ``B``-bit data; the first lines are ``//`` comments that repeat
this layout):

* the first (most significant) hex digit is the kind of the word:
  ``1`` a write cycle, ``2`` a read cycle, ``0`` an idle run, ``f`` the end of the pattern;
* write / read cycle: the low ``ceil(B/4)`` digits are the compare mask (0 on writes and on
  cycles that compare nothing), the ``ceil(B/4)`` digits above them the data (write data, or
  the data the read must return), the ``ceil(A/4)`` digits above those the word address;
  digits between the address and the kind are 0.  Bit 0 of each field is its lowest bit.
  An operation of several cycles is that many words (the compare is in the last one);
* idle run: the low 32 bits are the number of idle cycles (1 … 2³²−1; a longer delay is
  several idle words);
* end: the payload is 0.

Pipelined reads (``read_latency`` L > 0) need the expected data on a later cycle than the read,
beside the next operation, so the words get one more field: ``P = max(ceil(A/4) + 3·ceil(B/4),
8)``, from the low end the compare mask, the expected data, the write data, the address; a
write or read word carries the compare that falls in its cycle (L cycles after a read's last
cycle), kind ``3`` is a cycle that issues nothing and only compares (the first L cycles of a
delay, and the drain at the end of the test).  The testbench's SRAM model then has ``LAT``
= L + 1.

Testbench (``NAME_tb.v``) and model (``NAME_sram.v``) are Verilog-2001.  The testbench reads
the pattern with ``$readmemh``, drives one word per clock cycle (an idle word for its count of
cycles) into the model and compares the read data with ``expect`` under ``mask``; it stops
with ``$fatal`` at the first failing compare, printing ``FAIL at cycle N`` where ``N`` is the
cycle the failing read began (the cycle the fault simulators report) and the cycle it was
compared in, or ends with ``PASS: C cycles``.  The log writes cycles (and bit numbers, counts)
in decimal and every address, data word and mask in hexadecimal, zero-padded to the field's
width — as the csv export and the fail logs of ``marchkit diagnose`` do.  Plusargs: ``+pattern=FILE`` (default: the file written with it, in the
current directory), ``+stuck_word=W +stuck_bit=B +stuck_value=V`` (a stuck-at cell in the
model; ``W`` is the address as it is in the pattern, so physical after ``--physical``; W = −1:
fault-free), ``+all_failures`` (report every failing compare, then fail).

The model is the shared behavioural SRAM of :mod:`marchkit.rtl` (``ce = we | re``): on the
rising clock edge a write stores ``d`` at ``a`` and a read loads ``q`` from ``a``; contents
start unknown (``x``).  A stuck-at cell holds its value whatever is written (the one-cell state
primitive ``<1/0/->`` or ``<0/1/->``).  Names copied into comments and strings are escaped
(:func:`marchkit.rtl.comment_text`, :func:`marchkit.rtl.string_literal`).
"""

from __future__ import annotations

import re
from fractions import Fraction

import numpy as np

from .. import __version__
from ..rtl import comment_text, identifier, sram_model, string_literal
from .text import Row, hex_text, hex_width, put_address, put_data, put_rows, put_slotwise, table

MAX_IDLE = (1 << 32) - 1


def layout(plan) -> dict:
    ha = hex_width(plan.address_bits)
    hd = hex_width(plan.bits)
    if getattr(plan, "latency", 0):        # pipelined: write data and expected data apart
        pd = max(ha + 3 * hd, 8)
        return {"ha": ha, "hd": hd, "pd": pd, "digits": 1 + pd, "word_bits": 4 * (1 + pd),
                "mask_lsb": 0, "expect_lsb": 4 * hd, "data_lsb": 8 * hd, "addr_lsb": 12 * hd,
                "fields": 3}
    pd = max(ha + 2 * hd, 8)
    return {"ha": ha, "hd": hd, "pd": pd, "digits": 1 + pd, "word_bits": 4 * (1 + pd),
            "mask_lsb": 0, "data_lsb": 4 * hd, "addr_lsb": 8 * hd, "fields": 2}


def layout_comment(plan, lay) -> str:
    A, B = plan.address_bits, plan.bits
    W = lay["word_bits"]
    if lay["fields"] == 3:
        return "\n".join([
            f"// marchkit {__version__} $readmemh pattern: {comment_text(plan.describe())}",
            f"// {plan.cycles} clock cycles; one {W}-bit word ({lay['digits']} hex digits) per line",
            f"// pipelined reads: the data of a read is compared {plan.latency} cycle(s) after its last cycle",
            f"// bits [{W - 1}:{W - 4}] kind: 1 write cycle, 2 read cycle, 3 compare only, 0 idle run, f end",
            f"// write/read/compare: address [{lay['addr_lsb'] + A - 1}:{lay['addr_lsb']}], "
            f"write data [{lay['data_lsb'] + B - 1}:{lay['data_lsb']}], "
            f"expected data [{lay['expect_lsb'] + B - 1}:{lay['expect_lsb']}], compare mask [{B - 1}:0]",
            "// idle run: number of idle cycles in bits [31:0]",
        ]) + "\n"
    return "\n".join([
        f"// marchkit {__version__} $readmemh pattern: {comment_text(plan.describe())}",
        f"// {plan.cycles} clock cycles; one {W}-bit word ({lay['digits']} hex digits) per line",
        f"// bits [{W - 1}:{W - 4}] kind: 1 write cycle, 2 read cycle, 0 idle run, f end of pattern",
        f"// write/read: address [{lay['addr_lsb'] + A - 1}:{lay['addr_lsb']}], "
        f"data [{lay['data_lsb'] + B - 1}:{lay['data_lsb']}] (write data or expected read data), "
        f"compare mask [{B - 1}:0]",
        "// idle run: number of idle cycles in bits [31:0]",
    ]) + "\n"


def write_hex(plan, f, **_) -> dict:
    lay = layout(plan)
    ha, hd, pd = lay["ha"], lay["hd"], lay["pd"]
    f.write(layout_comment(plan, lay).encode())
    nf = lay["fields"]
    pad = "0" * (pd - ha - nf * hd)
    zd = "0" * hd
    ones = hex_text([plan.all_ones], plan.bits)[0].decode()
    kinds = table([f"1{pad}", f"2{pad}"])
    row = Row().field("kind", 1 + len(pad)).field("address", ha).field("data", nf * hd).lit("\n")
    data_tabs: dict[int, np.ndarray] = {}
    words = 0
    pipe = None
    if nf == 3:                 # pipelined reads: expect and mask come from the Pipeline
        from .stream import Pipeline

        pipe = Pipeline(plan)
        ctexts = [zd + zd] + [w.decode() + ones for w in hex_text(plan.cmp_words, plan.bits)]
        ctab = table(ctexts)
        za = "0" * ha
    for b in plan.blocks():
        if b.is_idle:
            left = b.count
            if pipe is not None:
                head = pipe.idle(left)
                if head.any():          # cycles that only compare the data of earlier reads
                    f.write("".join(f"3{pad}{za}{zd}{ctexts[int(c)]}\n" for c in head).encode())
                    words += len(head)
                    left -= len(head)
            while left:
                n = min(left, MAX_IDLE)
                f.write(f"0{n:0{pd}x}\n".encode())
                left -= n
                words += 1
            continue
        seg = b.seg
        if seg.run not in data_tabs:
            texts = []
            for w in hex_text(plan.words[seg.run], plan.bits):
                w = w.decode()
                if pipe is None:
                    texts += [w + zd, w + zd, w + ones]      # write, read, compared read
                else:                                        # write data; the compare comes later
                    texts += [w + zd + zd, zd * 3, zd * 3]
            data_tabs[seg.run] = table(texts)
        buf = row.buffer(b.count)
        put_slotwise(row, buf, "kind", b, kinds[seg.slot_re])
        put_address(row, buf, "address", b, "hex")
        put_data(row, buf, "data", b, data_tabs[seg.run])
        if pipe is not None:
            put_rows(buf, row.off["data"] + hd, ctab, pipe.op(b))
        f.write(buf)
        words += b.count
    f.write(("f" + "0" * pd + "\n").encode())
    return {"words": words + 1}


def module_name(stem: str) -> str:
    return identifier(stem)


def period_ps(clock_hz: Fraction) -> int:
    return max(4, round(Fraction(10**12) / Fraction(clock_hz)))


def sram_text(plan, sram: str) -> str:
    head = (f"{sram}.v: behavioural synchronous SRAM generated by marchkit {__version__}\n"
            f"for {plan.mem.name or 'memory'} {plan.mem.words}x{plan.mem.bits}.\n"
            "The testbench makes one cell stuck at a value with the stuck_at task (+stuck_word ...).")
    return sram_model(sram, plan.address_bits, plan.bits, plan.mem.words, 1 + getattr(plan, "latency", 0), head)


def testbench_text(plan, tb: str, sram: str, hex_name: str, nwords: int, stuck=None) -> str:
    lay = layout(plan)
    A, B = plan.address_bits, plan.bits
    W = lay["word_bits"]
    sw, sb, sv = stuck if stuck is not None else (-1, 0, 0)
    per = period_ps(plan.mem.clock_hz)
    hex_shown = comment_text(hex_name)
    al, dl = lay["addr_lsb"], lay["data_lsb"]
    lat = getattr(plan, "latency", 0)
    shift = ("\n            for (j = READ_LATENCY; j > 0; j = j - 1)\n                apipe[j] = apipe[j - 1];"
             "\n            apipe[0] = a;\n            cmp_a = apipe[READ_LATENCY];") if lat else ""
    if lay["fields"] == 3:          # pipelined: every word may carry a compare
        el = lay["expect_lsb"]
        cmp = (f"expect = w[{el + B - 1}:{el}];\n                    mask = w[{B - 1}:0];\n                    ")
        k1 = f"a = w[{al + A - 1}:{al}];\n                    d = w[{dl + B - 1}:{dl}];\n                    {cmp}we = 1'b1;"
        k2 = f"a = w[{al + A - 1}:{al}];\n                    {cmp}re = 1'b1;"
        k3 = f"""
                4'h3: begin
                    {cmp}run_cycle;
                end"""
    else:
        k1 = f"a = w[{al + A - 1}:{al}];\n                    d = w[{dl + B - 1}:{dl}];\n                    we = 1'b1;"
        k2 = (f"a = w[{al + A - 1}:{al}];\n                    expect = w[{dl + B - 1}:{dl}];\n"
              f"                    mask = w[{B - 1}:0];\n                    re = 1'b1;")
        k3 = ""
    return f"""// {tb}.v: self-checking testbench generated by marchkit {__version__}
// Replays {hex_shown} ({plan.cycles} cycles of {comment_text(plan.test.display_name)}) against {sram}.v.
//   iverilog -o {tb}.vvp {tb}.v {sram}.v && vvp -n {tb}.vvp
// Plusargs: +pattern=FILE  +stuck_word=W +stuck_bit=B +stuck_value=V (W: the address as in the
// pattern; -1 = fault-free)  +all_failures (report every failing compare).
// Ends with "PASS: N cycles", or $fatal after "FAIL at cycle N" (N: the cycle the failing
// read began).  The log writes cycles, bit numbers and counts in decimal, addresses, data and
// masks in hexadecimal (zero-padded), as the csv export and fail logs do.{f"  Reads are pipelined: the data comes {lat} cycle(s) after the read's last cycle (SRAM LAT = {lat + 1})." if lat else ""}
// Clock period {per} ps{'' if Fraction(10**12) / plan.mem.clock_hz == per else ' (rounded)'}.
`timescale 1ps/1ps
module {tb};
    localparam AW = {A};
    localparam DW = {B};
    localparam WORDS = {plan.mem.words};
    localparam WW = {W};
    localparam NWORDS = {nwords};
    localparam [63:0] CYCLES = 64'd{plan.cycles};
    localparam READ_CYCLES = {plan.mem.read_cycles};
    localparam READ_LATENCY = {lat};
    localparam PERIOD = {per};
    localparam HALF = PERIOD / 2;
    localparam STROBE = (PERIOD * 3) / 4;
    localparam STUCK_WORD = {sw};
    localparam STUCK_BIT = {sb};
    localparam STUCK_VALUE = {sv};

    reg [WW-1:0] pattern [0:NWORDS-1];
    reg clk;
    reg [AW-1:0] a;
    reg [DW-1:0] d;
    reg [AW-1:0] sa;        // the stuck cell's address, printed in hex
    reg [AW-1:0] cmp_a;     // the address of the read compared in this cycle (pipelined reads)
    reg [AW-1:0] apipe [0:{lat}];   // addresses of the last READ_LATENCY + 1 cycles
    integer j;
    reg [DW-1:0] expect;
    reg [DW-1:0] mask;
    reg we;
    reg re;
    wire [DW-1:0] q;
    reg [8*1024-1:0] file;
    reg [WW-1:0] w;
    reg [63:0] cycle;
    reg [63:0] first_fail;
    reg [31:0] count;
    integer i, sw, sb, sv, failures, all, done;

    {sram} #(.AW(AW), .DW(DW), .WORDS(WORDS)) dut (
        .clk(clk), .ce(we | re), .we(we), .a(a), .d(d), .q(q)
    );

    task run_cycle;
        begin{shift}
            #(HALF) clk = 1'b1;
            #(STROBE - HALF);
            if (((q ^ expect) & mask) !== {{DW{{1'b0}}}}) begin
                failures = failures + 1;
                if (failures == 1)
                    first_fail = cycle - (READ_CYCLES - 1) - READ_LATENCY;
                if (all || failures == 1)
                    $display("FAIL at cycle %0d: address %h expected %h read %h mask %h (compared in cycle %0d)",
                             cycle - (READ_CYCLES - 1) - READ_LATENCY, {"cmp_a" if lat else "a"}, expect, q, mask, cycle);
                if (!all)
                    $fatal(1, "FAILED: first failing compare at cycle %0d", first_fail);
            end
            #(PERIOD - STROBE) clk = 1'b0;
            cycle = cycle + 1;
        end
    endtask

    initial begin
        if (!$value$plusargs("pattern=%s", file))
            file = {string_literal(hex_name)};
        sw = STUCK_WORD;
        sb = STUCK_BIT;
        sv = STUCK_VALUE;
        if ($value$plusargs("stuck_word=%d", sw)) ;
        if ($value$plusargs("stuck_bit=%d", sb)) ;
        if ($value$plusargs("stuck_value=%d", sv)) ;
        all = $test$plusargs("all_failures");
        dut.clear;
        if (sw >= 0)
            dut.stuck_at(sw, sb, sv[0]);
        if (sw >= 0) begin
            sa = sw;
            $display("stuck-at-%0d cell: address %h bit %0d", sv, sa, sb);
        end
        $readmemh(file, pattern);
        clk = 1'b0;
        cycle = 0;
        failures = 0;
        done = 0;
        for (i = 0; i < NWORDS && !done; i = i + 1) begin
            w = pattern[i];
            a = {{AW{{1'b0}}}};
            d = {{DW{{1'b0}}}};
            expect = {{DW{{1'b0}}}};
            mask = {{DW{{1'b0}}}};
            we = 1'b0;
            re = 1'b0;
            case (w[WW-1:WW-4])
                4'h0: begin
                    count = w[31:0];
                    repeat (count) run_cycle;
                end
                4'h1: begin
                    {k1}
                    run_cycle;
                end
                4'h2: begin
                    {k2}
                    run_cycle;
                end{k3}
                4'hf: done = 1;
                default: $fatal(1, "pattern word %0d is not a pattern word: %h", i, w);
            endcase
        end
        if (!done)
            $fatal(1, "the pattern has no end word");
        if (cycle != CYCLES)
            $fatal(1, "replayed %0d cycles, the pattern has %0d", cycle, CYCLES);
        if (failures)
            $fatal(1, "FAILED: %0d failing compares, the first at cycle %0d", failures, first_fail);
        $display("PASS: %0d cycles", cycle);
        $finish;
    end
endmodule
"""
