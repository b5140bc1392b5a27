"""The self-checking testbench ``DIR/<top>_tb.v``: the controller, the shared behavioural SRAM
with fault injection (:func:`marchkit.rtl.sram_model`, module ``<top>_sram``) and a driver.

Without plusargs the testbench runs the test once on a fault-free memory and checks that the
controller passes, that it is busy for exactly the test's cycles (plus the read latency) and
presents exactly the test's memory operations; it prints ``PASS: N cycles`` or stops with
``$fatal``.

``+faults=FILE`` runs one scenario per line of FILE (hex, 40 digits; ``//`` comments and blank
lines skipped) from reset, each on a fresh memory, and prints for each
``scenario I fail F cycle C addr A bits B`` (C, A, B only meaningful when F is 1).  Scenario
word (:func:`scenario_word`):

* ``[3:0]`` 0 fault-free, 1 fault primitives, 2 address-decoder fault;
* primitives: ``[4]`` a second primitive, ``[16:5]`` / ``[28:17]`` their codes
  (:func:`marchkit.rtl.rule_code`), ``[29]`` / ``[30]`` the initial values of the aggressor /
  victim cell, ``[95:64]`` aggressor word, ``[127:96]`` victim word, ``[143:128]`` aggressor
  bit, ``[159:144]`` victim bit (a one-cell fault gives the victim twice);
* address decoder: ``[32:31]`` type (0 none, 1 alias, 2 multi, 3 cross), ``[33]`` the value a
  read of an unselected address returns, ``[95:64]`` word a, ``[127:96]`` word b;
* ``[3:0]`` 3 stuck-open cell, 4 data-retention fault: ``[127:96]`` word, ``[159:144]`` bit,
  ``[30]`` initial value (4 only), ``[33]`` the value the cell loses, ``[63:34]`` τ in cycles.

Cells the fault does not involve start unknown (``x``); a read of an unknown value never
mismatches (the comparator's ``if`` treats ``x`` as false), as in the fault simulators.

``+stuck_word=W +stuck_bit=B +stuck_value=V`` runs the test once with that cell stuck at V and
prints ``... detected, first at cycle C (address A, bits B)`` or ``... not detected``.

One number base per quantity, in every line the testbench prints: cycles, bit numbers, counts
and scenario numbers in decimal; addresses and data (``fail_bits``) in hexadecimal, zero-padded
to the bus width — as the csv export and fail logs write them.  (Plusargs are read in decimal.)

``+program=FILE`` (``program`` style) loads another program into the instruction memory first;
``+cycles=N +ops=N`` give its figures for the fault-free check.
"""

from __future__ import annotations

from fractions import Fraction

from .. import __version__
from ..rtl import comment_text, sram_model
from .ir import BistIR

SCENARIO_DIGITS = 40


def scenario_word(kind: int = 0, rules=(), inits=(0, 0), agg=(0, 0), vic=(0, 0),
                  af_type: int = 0, af_value: int = 0, words=(0, 0), drf_value: int = 0,
                  tau: int = 0) -> str:
    """One line of a ``+faults`` file (see the module text)."""
    w = kind & 0xF
    if kind in (3, 4):
        w |= vic[0] << 96 | vic[1] << 144 | (inits[1] & 1) << 30
        if kind == 4:
            if not 0 <= tau < (1 << 30):
                raise ValueError("tau out of range")
            w |= (drf_value & 1) << 33 | tau << 34
    if kind == 1:
        codes = list(rules)
        if not 1 <= len(codes) <= 2:
            raise ValueError("one or two primitives")
        w |= (len(codes) - 1) << 4
        w |= codes[0] << 5
        if len(codes) == 2:
            w |= codes[1] << 17
        w |= (inits[0] & 1) << 29 | (inits[1] & 1) << 30
        w |= agg[0] << 64 | vic[0] << 96 | agg[1] << 128 | vic[1] << 144
    elif kind == 2:
        w |= af_type << 31 | (af_value & 1) << 33 | words[0] << 64 | words[1] << 96
    return f"{w:0{SCENARIO_DIGITS}x}"


def period_ps(clock_hz) -> int:
    return max(4, round(Fraction(10**12) / Fraction(clock_hz)))


def testbench(ir: BistIR, top: str, style: str, lat: int = 1) -> str:
    per = period_ps(ir.clock_hz)
    sram = f"{top}_sram"
    reload = ""
    if style == "program":
        reload = """        if ($value$plusargs("program=%s", file)) begin
            $readmemh(file, dut.u_program.words);
            $display("program %0s", file);
        end
"""
    first = 0
    for st in ir.steps:
        if not st.is_delay:
            break
        first += st.cycles
    fill = restored = restored_fmt = restored_arg = ""
    if ir.transparent:
        words32 = (ir.dw + 31) // 32
        rnd = "{" + ", ".join(["$random(seed)"] * words32) + "}"
        fill = f"""            // transparent test: the memory holds data of its own (+seed=N), kept in shadow
            for (w = 0; w < WORDS; w = w + 1) begin
                mem.cells[w] = {rnd};
                shadow[w] = mem.cells[w];
            end
"""
        restored = """            same = 1;
            for (w = 0; w < WORDS; w = w + 1)
                if (mem.cells[w] !== shadow[w]) same = 0;
            if (!same)
                $fatal(1, "FAILED: the transparent test did not restore the memory's contents");
            $display("contents restored");
"""
        restored_fmt = " restored %0d"
        restored_arg = ", same"
    head = "".join(f"// {comment_text(x)}\n" for x in (
        f"{top}_tb.v: self-checking testbench generated by marchkit {__version__}",
        f"for {top}.v ({style} style): {ir.test_name} {ir.notation}",
        f"on {ir.memory_name} {ir.words}x{ir.dw}; {ir.cycles} cycles, {ir.ops} operations per test.",
    ))
    return head + f"""//   iverilog -o {top}_tb.vvp {top}_tb.v {top}.v && vvp -n {top}_tb.vvp
// Fault-free (no plusargs): checks the first operation comes in the cycle after start, the
// test's cycles and operations, no fail; prints "PASS: N cycles" or stops with $fatal.
// +faults=FILE: one scenario per line (fault primitives, address-decoder faults, initial values;
//   the layout is in marchkit/bist/testbench.py), prints "scenario I fail F cycle C addr A bits B".
// +stuck_word=W +stuck_bit=B +stuck_value=V: one stuck-at cell (logical word W); prints whether
//   and where the controller detected it.
// +program=FILE: load another program first (program style); +cycles=N +ops=N: its figures
//   for the fault-free check.  Clock period {per} ps.
`timescale 1ps/1ps
module {top}_tb;
    localparam AW = {ir.aw};
    localparam DW = {ir.dw};
    localparam WORDS = {ir.words};
    localparam LAT = {lat};
    reg [31:0] CYCLES, OPS, TIMEOUT;      // the test's figures (+cycles=N +ops=N for another program)
    reg [31:0] FIRST;                     // cycle of the first operation (+first=N; 0 unless a delay comes first)
    reg [31:0] first_ce;
    reg busy_at_0;
    localparam PERIOD = {per};

    reg clk, rst_n, start;
    wire busy, done, fail, mem_ce, mem_we;
    wire [AW-1:0] fail_addr, mem_addr;
    reg [AW-1:0] stuck_a;                 // the stuck cell's address, printed in hex like fail_addr
    wire [DW-1:0] fail_bits, mem_wdata, mem_rdata;
    wire [31:0] fail_cycle;

    {top} #(.AW(AW), .DW(DW), .LAT(LAT)) dut (
        .clk(clk), .rst_n(rst_n), .start(start), .busy(busy), .done(done), .fail(fail),
        .fail_addr(fail_addr), .fail_bits(fail_bits), .fail_cycle(fail_cycle),
        .mem_ce(mem_ce), .mem_we(mem_we), .mem_addr(mem_addr), .mem_wdata(mem_wdata),
        .mem_rdata(mem_rdata)
    );
    {sram} #(.AW(AW), .DW(DW), .WORDS(WORDS), .LAT(LAT)) mem (
        .clk(clk), .ce(mem_ce), .we(mem_we), .a(mem_addr), .d(mem_wdata), .q(mem_rdata)
    );

    always #(PERIOD / 2) clk = ~clk;

    reg [8*1024-1:0] file;
    reg [{SCENARIO_DIGITS * 4 - 1}:0] sc;
    reg [31:0] busy_cycles, ops, waited;
    integer fd, got, n, bad, w, seed, same, sw, sb, sv;
    reg [DW-1:0] shadow [0:WORDS-1];

    // one test from reset; the SRAM has been configured
    task run_test;
        begin
            rst_n = 1'b0;
            start = 1'b0;
            @(negedge clk) rst_n = 1'b1;
            @(negedge clk) start = 1'b1;
            @(negedge clk) start = 1'b0;
            mem.now = 64'd0;                  // cycle 0: the test's first cycle
            busy_cycles = 0;
            ops = 0;
            waited = 0;
            busy_at_0 = busy;                 // the cycle after start: cycle 0
            first_ce = 32'hffffffff;
            while (!done && waited < TIMEOUT) begin
                if (busy) busy_cycles = busy_cycles + 1;
                if (mem_ce) ops = ops + 1;
                if (mem_ce && first_ce == 32'hffffffff) first_ce = waited;
                @(negedge clk) waited = waited + 1;
            end
        end
    endtask

    task configure;
        begin
            mem.clear;
{fill}            if (sc[3:0] == 4'd1) begin
                mem.set_rule(0, sc[16:5]);
                if (sc[4]) mem.set_rule(1, sc[28:17]);
                mem.set_cells(sc[95:64], sc[143:128], sc[127:96], sc[159:144]);
                mem.set_cell(sc[95:64], sc[143:128], sc[29]);
                mem.set_cell(sc[127:96], sc[159:144], sc[30]);
                mem.settle;
            end else if (sc[3:0] == 4'd2)
                mem.set_af(sc[32:31], sc[95:64], sc[127:96], sc[33]);
            else if (sc[3:0] == 4'd3)
                mem.set_sof(sc[127:96], sc[159:144]);
            else if (sc[3:0] == 4'd4) begin
                mem.set_drf(sc[127:96], sc[159:144], sc[33], sc[63:34]);
                mem.set_cell(sc[127:96], sc[159:144], sc[30]);
            end
        end
    endtask

    initial begin
        clk = 1'b0;
        rst_n = 1'b0;
        start = 1'b0;
        bad = 0;
        seed = 1;
        if ($value$plusargs("seed=%d", seed)) ;
        CYCLES = 32'd{ir.cycles};
        OPS = 32'd{ir.ops};
        if ($value$plusargs("cycles=%d", CYCLES)) ;
        if ($value$plusargs("ops=%d", OPS)) ;
        FIRST = 32'd{first};
        if ($value$plusargs("first=%d", FIRST)) ;
        TIMEOUT = CYCLES + LAT + 16;
{reload}        if ($value$plusargs("stuck_word=%d", sw)) begin
            sb = 0;
            sv = 0;
            if ($value$plusargs("stuck_bit=%d", sb)) ;
            if ($value$plusargs("stuck_value=%d", sv)) ;
            sc = {{{SCENARIO_DIGITS * 4}{{1'b0}}}};
            configure;
            mem.stuck_at(sw, sb, sv[0]);
            run_test;
            if (!done)
                $fatal(1, "FAILED: not done after %0d cycles", waited);
            stuck_a = sw;
            if (fail)
                $display("stuck-at-%0d cell: address %h bit %0d: detected, first at cycle %0d (address %h, bits %h)",
                         sv, stuck_a, sb, fail_cycle, fail_addr, fail_bits);
            else
                $display("stuck-at-%0d cell: address %h bit %0d: not detected", sv, stuck_a, sb);
        end else if ($value$plusargs("faults=%s", file)) begin
            fd = $fopen(file, "r");
            if (fd == 0)
                $fatal(1, "cannot open %0s", file);
            n = 0;
            while (!$feof(fd)) begin
                got = $fscanf(fd, "%h\\n", sc);
                if (got == 1) begin
                    configure;
                    run_test;
{"                    same = 1;" + chr(10) + "                    for (w = 0; w < WORDS; w = w + 1) if (mem.cells[w] !== shadow[w]) same = 0;" + chr(10) if ir.transparent else ""}                    if (!done) begin
                        $display("scenario %0d timeout", n);
                        bad = bad + 1;
                    end else
                        $display("scenario %0d fail %0d cycle %0d addr %h bits %h{restored_fmt}", n, fail, fail_cycle, fail_addr, fail_bits{restored_arg});
                    n = n + 1;
                end else begin
                    got = $fgetc(fd);          // skip a comment or blank line
                    while (got != "\\n" && got != -1)
                        got = $fgetc(fd);
                end
            end
            $fclose(fd);
            if (bad)
                $fatal(1, "%0d scenarios did not finish", bad);
            $display("DONE: %0d scenarios", n);
        end else begin
            sc = {{{SCENARIO_DIGITS * 4}{{1'b0}}}};
            configure;
            run_test;
            if (!done)
                $fatal(1, "FAILED: not done after %0d cycles", waited);
            if (fail)
                $fatal(1, "FAILED: a fault-free memory failed at cycle %0d, address %h, bits %h", fail_cycle, fail_addr, fail_bits);
            if (!busy_at_0 || first_ce != FIRST)
                $fatal(1, "FAILED: the first operation came in cycle %0d after start, not %0d", first_ce, FIRST);
            if (busy_cycles != CYCLES + LAT)
                $fatal(1, "FAILED: busy for %0d cycles, the test takes %0d (+ %0d read latency)", busy_cycles, CYCLES, LAT);
            if (ops != OPS)
                $fatal(1, "FAILED: %0d memory operations, the test has %0d", ops, OPS);
{restored}            $display("PASS: %0d cycles", CYCLES);
        end
        $finish;
    end
endmodule

""" + sram_model(sram, ir.aw, ir.dw, ir.words, lat, f"{sram}: the memory under test (marchkit.rtl).")
