"""Verilog text shared by the stimulus exporter (``export/hexfile.py``) and the BIST generator
(``bist``): safe quoting of user-given names, and the behavioural SRAM model with fault
injection.  A leaf: imports nothing from marchkit.

Names (test names, memory names, file names) come from users and files.  Copied raw into
Verilog they could end a comment and inject code (``"x\\nmodule pwn; ... endmodule\\n//"``).
Every name therefore goes through :func:`comment_text` (one line of printable ASCII, for ``//``
comments and for the comment lines of a ``$readmemh`` file) or :func:`string_literal` (a
Verilog string with ``\\`` escapes).

The SRAM model (:func:`sram_model`) is a synchronous single-port memory: on a rising edge with
``ce`` a write (``we``) stores ``d`` at ``a``, otherwise a read loads the word, presented on
``q`` ``LAT`` edges later (``LAT`` ≥ 1; with ``LAT`` = 1, ``q`` holds until the next read).
Contents start unknown (``x``).  The testbench configures at most one fault with the model's
tasks before the first edge; the semantics are those of DEVELOPERS.md ("Semantics"):

* ``set_rule(i, code)`` / ``set_cells(aw, ab, vw, vb)``: up to two static fault primitives
  ``<S/F/R>`` / ``<Sa;Sv/F/R>`` (van de Goor & Al-Ars, VTS 2000) acting together on one
  aggressor cell ``(aw, ab)`` and one victim cell ``(vw, vb)``.  Conditions are judged on the
  values before the operation; the victim then holds F (overriding what the write put there),
  a read of the victim returns R; state conditions act at :func:`settle` and after every
  operation.  ``code`` bits: [0] two-cell, [1] aggressor value, [3:2] aggressor operation
  (0 none, 1 write, 2 read), [4] value written to the aggressor, [5] victim value, [7:6]
  victim operation, [8] value written to the victim, [9] F, [10] R given, [11] R.
* ``set_af(type, a, b, value)``: address-decoder fault on words ``a``/``b``: type 0 ``none``
  (address a selects no cell; a read returns ``value`` in every bit), 1 ``alias`` (address b
  selects cell a), 2 ``multi`` (address a selects cells a and b), 3 ``cross`` (both addresses
  select both cells).  A read of several cells returns their bitwise AND; a write writes all.
* ``set_sof(word, bit)``: stuck-open cell — writes do not reach it; a read returns, for that
  bit, the sense amplifier's previous value (the last value read in that bit; unknown first).
* ``set_drf(word, bit, value, tau)``: data-retention fault — the cell, holding ``value``, has
  lost it when its word is accessed ``tau`` or more cycles after its last access (or after
  cycle 0); ``now`` counts the cycles (the testbench sets it to 0 in the test's first cycle).
* ``stuck_at(word, bit, value)``: the stuck-at cell of the exporter's testbench (a one-cell
  state primitive ``<1/0/->`` or ``<0/1/->``).
* ``set_cell(word, bit, value)`` sets an initial value; ``settle`` applies the state
  primitives once (as at the start of a test); ``clear`` makes the memory fault-free and
  unknown again (call it first: without it the model is fault-free, contents unknown).
"""

from __future__ import annotations

import re

_SAFE = re.compile(r"[^ !#-\[\]-~]")       # printable ASCII except '"' and '\'


def _esc(ch: str) -> str:
    o = ord(ch)
    if o < 0x100:
        return f"\\x{o:02x}"
    if o < 0x10000:
        return f"\\u{o:04x}"
    return f"\\U{o:08x}"


def comment_text(text) -> str:
    """``text`` as one line of printable ASCII, safe in a ``//`` comment (Verilog source or
    ``$readmemh`` file): newlines, other control and non-ASCII characters, quotes and
    backslashes are written as ``\\xNN`` / ``\\uNNNN`` escapes."""
    return _SAFE.sub(lambda m: _esc(m.group(0)), str(text))


def string_literal(text) -> str:
    """A Verilog string literal (with its quotes) holding ``text``: quotes, backslashes and
    every byte outside printable ASCII written as ``\\"``, ``\\\\`` and octal ``\\ooo``
    escapes (IEEE 1364-2005 §3.6), so nothing can end the string early."""
    out = []
    for b in str(text).encode("utf-8"):
        c = chr(b)
        if c == '"':
            out.append('\\"')
        elif c == "\\":
            out.append("\\\\")
        elif 0x20 <= b < 0x7F:
            out.append(c)
        else:
            out.append(f"\\{b:03o}")
    return '"' + "".join(out) + '"'


def identifier(stem: str, prefix: str = "m_") -> str:
    """A plain Verilog identifier made from ``stem`` (other characters become ``_``)."""
    s = re.sub(r"[^A-Za-z0-9_]", "_", str(stem))
    if not s or not (s[0].isalpha() or s[0] == "_"):
        s = prefix + s
    return s


# ---- fault codes (the testbench's side of set_rule) --------------------------------------

_OPS = {None: 0, "w": 1, "r": 2}


def rule_code(rule) -> int:
    """The 12-bit code of a static primitive for ``set_rule`` (a
    :class:`marchkit.faults.primitives.Rule`-like object: ``agg``/``vic`` conditions with
    ``pre``, ``op``, ``val``; ``f``; ``r``).  Dynamic primitives have no code."""
    if getattr(rule, "then", None) is not None:
        raise ValueError("dynamic primitives are not injected by the SRAM model")
    a, v = rule.agg, rule.vic
    code = 0
    if a is not None:
        code |= 1 | (a.pre << 1) | (_OPS[a.op] << 2) | ((a.val or 0) << 4)
    code |= (v.pre << 5) | (_OPS[v.op] << 6) | ((v.val or 0) << 8) | (rule.f << 9)
    if rule.r is not None:
        code |= (1 << 10) | (rule.r << 11)
    return code


AF_TYPES = {"none": 0, "alias": 1, "multi": 2, "cross": 3}


def sram_model(module: str, aw: int, dw: int, words: int, lat: int = 1, header: str = "") -> str:
    """Verilog-2001 text of the behavioural SRAM with fault injection (see the module text).

    ``module`` must be a plain identifier (see :func:`identifier`); ``header`` is comment text
    (already made safe with :func:`comment_text`, one or more lines without ``//``)."""
    if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", module):
        raise ValueError(f"{module!r} is not a plain Verilog identifier")
    head = "".join(f"// {comment_text(line)}\n" for line in header.splitlines()) if header else ""
    return head + f"""// Behavioural synchronous single-port SRAM with fault injection (marchkit).
// Rising edge with ce: a write (we) stores d at a, otherwise a read loads the word, shown on q
// LAT edges later.  Contents start unknown.  Faults: see the tasks below (set before the
// first edge): static primitives <S/F/R> and <Sa;Sv/F/R> (van de Goor & Al-Ars, VTS 2000),
// address-decoder faults (none / alias / multi / cross, AND on multi-cell reads), stuck-at.
`timescale 1ps/1ps
module {module} #(parameter AW = {aw}, DW = {dw}, WORDS = {words}, LAT = {lat}) (
    input  wire          clk,
    input  wire          ce,
    input  wire          we,
    input  wire [AW-1:0] a,
    input  wire [DW-1:0] d,
    output wire [DW-1:0] q
);
    reg [DW-1:0] cells [0:WORDS-1];
    reg [DW-1:0] pipe [0:LAT-1];
    reg [DW-1:0] out;
    // fault configuration: kind 0 none, 1 primitives, 2 address decoder, 3 stuck-open,
    // 4 data retention
    integer kind;
    reg [DW-1:0] sa;             // sense amplifier: the last word read
    reg drf_value;
    integer drf_tau, drf_last;
    reg [63:0] now;              // cycle count (set by the testbench)
    integer nrules;
    reg [11:0] rules [0:1];
    integer agg_word, agg_bit, vic_word, vic_bit;
    integer af_type, af_a, af_b;
    reg af_value;
    reg post_valid, post_value, pre_a, pre_v;
    integer i;

    assign q = pipe[LAT-1];

    task clear;
        begin
            kind = 0;
            nrules = 0;
            agg_word = 0; agg_bit = 0; vic_word = 0; vic_bit = 0;
            af_type = 0; af_a = 0; af_b = 0; af_value = 1'b0;
            sa = {{DW{{1'bx}}}};
            drf_value = 1'b0; drf_tau = 0; drf_last = 0;
            now = 64'd0;
            for (i = 0; i < WORDS; i = i + 1)
                cells[i] = {{DW{{1'bx}}}};
            for (i = 0; i < LAT; i = i + 1)
                pipe[i] = {{DW{{1'bx}}}};
        end
    endtask

    task set_rule;
        input integer idx;
        input [11:0] code;
        begin
            kind = 1;
            rules[idx] = code;
            if (idx + 1 > nrules)
                nrules = idx + 1;
        end
    endtask

    task set_cells;
        input integer aw_, ab_, vw_, vb_;
        begin
            agg_word = aw_; agg_bit = ab_; vic_word = vw_; vic_bit = vb_;
        end
    endtask

    task set_af;
        input integer t, x, y;
        input v;
        begin
            kind = 2;
            af_type = t; af_a = x; af_b = y; af_value = v;
        end
    endtask

    task set_sof;
        input integer w, b;
        begin
            kind = 3;
            vic_word = w; vic_bit = b;
        end
    endtask

    task set_drf;
        input integer w, b;
        input v;
        input integer tau;
        begin
            kind = 4;
            vic_word = w; vic_bit = b; drf_value = v; drf_tau = tau; drf_last = 0;
        end
    endtask

    task set_cell;
        input integer w, b;
        input v;
        begin
            cells[w][b] = v;
        end
    endtask

    task stuck_at;
        input integer w, b;
        input v;
        begin
            // <1/0/-> (stuck at 0) or <0/1/-> (stuck at 1): victim value !v, F = v
            set_rule(0, {{1'b0, 1'b0, v, 1'b0, 2'b00, ~v, 5'b0}});
            set_cells(w, b, w, b);
        end
    endtask

    // state primitives (no operation): applied at the start and after every operation
    task settle;
        integer k;
        reg [11:0] r;
        begin
            if (kind == 1)
                for (k = 0; k < nrules; k = k + 1) begin
                    r = rules[k];
                    if (r[3:2] == 2'd0 && r[7:6] == 2'd0 && cells[vic_word][vic_bit] === r[5]
                        && (!r[0] || cells[agg_word][agg_bit] === r[1]))
                        cells[vic_word][vic_bit] = r[9];
                end
        end
    endtask

    // one operation on the faulty memory; out: the word a read returns
    task access;
        input [AW-1:0] addr;
        input wr;
        input [DW-1:0] data;
        integer k;
        reg [11:0] r;
        reg [1:0] opk;
        begin
            out = {{DW{{1'bx}}}};
            opk = wr ? 2'd1 : 2'd2;
            if (kind == 2) begin
                if (wr) begin
                    if (af_type == 0 && addr == af_a) ;
                    else if (af_type == 1 && addr == af_b) cells[af_a] = data;
                    else if ((af_type == 2 && addr == af_a) || (af_type == 3 && (addr == af_a || addr == af_b))) begin
                        cells[af_a] = data;
                        cells[af_b] = data;
                    end else
                        cells[addr] = data;
                end else begin
                    if (af_type == 0 && addr == af_a) out = {{DW{{af_value}}}};
                    else if (af_type == 1 && addr == af_b) out = cells[af_a];
                    else if ((af_type == 2 && addr == af_a) || (af_type == 3 && (addr == af_a || addr == af_b)))
                        out = cells[af_a] & cells[af_b];
                    else
                        out = cells[addr];
                end
            end else if (kind == 3) begin
                if (wr) begin
                    pre_v = cells[vic_word][vic_bit];
                    cells[addr] = data;
                    if (addr == vic_word)
                        cells[vic_word][vic_bit] = pre_v;
                end else begin
                    out = cells[addr];
                    if (addr == vic_word)
                        out[vic_bit] = sa[vic_bit];
                end
            end else if (kind == 4) begin
                if (addr == vic_word) begin
                    if (cells[vic_word][vic_bit] === drf_value && now - drf_last >= drf_tau)
                        cells[vic_word][vic_bit] = ~drf_value;
                    drf_last = now;
                end
                if (wr)
                    cells[addr] = data;
                else
                    out = cells[addr];
            end else begin
                if (!wr)
                    out = cells[addr];
                post_valid = 1'b0;
                post_value = 1'b0;
                if (kind == 1) begin
                    pre_v = cells[vic_word][vic_bit];
                    pre_a = cells[agg_word][agg_bit];
                    for (k = 0; k < nrules; k = k + 1) begin
                        r = rules[k];
                        if (!r[0]) begin
                            // one cell: the operation on the victim, holding the victim value
                            if (r[7:6] == opk && addr == vic_word && pre_v === r[5]
                                && (!wr || data[vic_bit] === r[8])) begin
                                post_valid = 1'b1; post_value = r[9];
                                if (!wr && r[10]) out[vic_bit] = r[11];
                            end
                        end else if (r[3:2] != 2'd0) begin
                            // the operation on the aggressor, the victim holding its value
                            if (r[3:2] == opk && addr == agg_word && pre_a === r[1] && pre_v === r[5]
                                && (!wr || data[agg_bit] === r[4])) begin
                                post_valid = 1'b1; post_value = r[9];
                            end
                        end else if (r[7:6] != 2'd0) begin
                            // the operation on the victim, the aggressor holding its value
                            if (r[7:6] == opk && addr == vic_word && pre_v === r[5] && pre_a === r[1]
                                && (!wr || data[vic_bit] === r[8])) begin
                                post_valid = 1'b1; post_value = r[9];
                                if (!wr && r[10]) out[vic_bit] = r[11];
                            end
                        end
                    end
                end
                if (wr)
                    cells[addr] = data;
                if (post_valid)
                    cells[vic_word][vic_bit] = post_value;
                settle;
            end
            if (!wr)
                sa = out;
        end
    endtask

    always @(posedge clk) begin
        now <= now + 64'd1;
        if (ce) begin
            access(a, we, d);
            if (!we)
                pipe[0] <= out;
        end
        for (i = 1; i < LAT; i = i + 1)
            pipe[i] <= pipe[i - 1];
    end
endmodule
"""
