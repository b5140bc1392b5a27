"""Pipelined read latency (``Memory.read_latency``, ``--read-latency``, memory-file key
``read_latency``): a read is issued in one cycle like any operation, the next operation
follows in the next cycle, and the read's data is valid — and compared — L cycles after the
read's last cycle.

Checks against things outside the project:
* the definition of a pipelined read latency (common practice, no source): the stream with
  latency L is the stream without latency with every compare moved L cycles later, plus idle
  cycles at the end until the last read's data is back — written out by hand for MATS+ and
  derived from the latency-0 stream for other tests;
* STIL read back with the independent parser semi-ate-stil, VCD with the independent reader
  vcdvcd (pin names and active-low enables as IEEE 1364 values);
* Icarus Verilog runs the exported testbench against its SRAM model with ``LAT`` = L + 1
  pipeline stages: fault free it passes, with a stuck-at cell it fails at the cycle the literal
  reference simulator reports, compared L cycles after the read's last cycle;
* a fail log written by that Icarus run (what a tester's fail log shows: compare cycles) is
  diagnosed as the stuck-at cell, and a coupling fault's log made independently is diagnosed
  as that coupling fault.

MATS+ is Abadir & Reghbati, ACM Comput. Surv. 1983, as in the table of the encyclopedic page
"March algorithm" (Wikipedia).  Memories and names are invented demo data.
"""

from __future__ import annotations

import csv
import io
import json
import math
import re

import pytest

from marchkit.export import Plan, export
from marchkit.model import make_memory, schedule
from marchkit.notation import parse_notation, resolve_test

from test_export import compile_tb, expected_stil, need_module, run_vvp, stil_vectors

MATS_PLUS = "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}"

# MATS+ on 3 one-bit words with a read latency of 2, written out by hand: each read's compare
# (expect, mask) is 2 cycles after the read, beside the operation issued then; the last read
# (cycle 13) is compared in cycle 15, one idle cycle after the last write.
MATS_PLUS_3x1_LAT2 = """\
cycle,run,element,op,action,we,re,address,wdata,expect,mask
0,0,0,0,w0,1,0,0,0,0,0
1,0,0,0,w0,1,0,1,0,0,0
2,0,0,0,w0,1,0,2,0,0,0
3,0,1,0,r0,0,1,0,0,0,0
4,0,1,1,w1,1,0,0,1,0,0
5,0,1,0,r0,0,1,1,0,0,1
6,0,1,1,w1,1,0,1,1,0,0
7,0,1,0,r0,0,1,2,0,0,1
8,0,1,1,w1,1,0,2,1,0,0
9,0,2,0,r1,0,1,2,0,0,1
10,0,2,1,w0,1,0,2,0,0,0
11,0,2,0,r1,0,1,1,0,1,1
12,0,2,1,w0,1,0,1,0,0,0
13,0,2,0,r1,0,1,0,0,1,1
14,0,2,1,w0,1,0,0,0,0,0
15,0,,,idle,0,0,0,0,1,1
"""


def test_mats_plus_with_latency_2_written_out_by_hand(tmp_path):
    out = tmp_path / "p.csv"
    export(parse_notation(MATS_PLUS), make_memory(3, 1, read_latency=2), str(out))
    assert out.read_text() == MATS_PLUS_3x1_LAT2
    jl = tmp_path / "p.jsonl"
    export(parse_notation(MATS_PLUS), make_memory(3, 1, read_latency=2), str(jl))
    rows = [json.loads(x) for x in jl.read_text().splitlines()]
    want = list(csv.DictReader(io.StringIO(MATS_PLUS_3x1_LAT2)))
    assert [(r["cycle"], r["action"], r["expect"], r["mask"]) for r in rows] == \
        [(int(w["cycle"]), w["action"], w["expect"], w["mask"]) for w in want]


CASES = [
    # test, memory (without latency)
    (MATS_PLUS, dict(words=8, bits=2)),                                     # ends with a write
    ("{⇕(w0); ⇑(r0,w1); Del(30ns); ⇓(r1,w0,r0)}", dict(words=4, bits=3, read_cycles=2,
                                                     backgrounds="solid,checkerboard")),
    ("{⇑(w1); ⇓(r1^3); Del(10ns); ⇑(r1,r1)}", dict(words=5, bits=1, write_cycles=2)),   # ends with reads
    ("{⇑(r0); ⇑(w0); ⇓(r0)}", dict(words=4, bits=2)),                      # a read before the first write
    ("March C-", dict(words=16, bits=4, order="gray", backgrounds="word")),
]


def _compares(vectors):
    return {v.cycle: (v.expect, v.mask) for v in vectors if v.mask}


@pytest.mark.parametrize("lat", [1, 2, 5])
@pytest.mark.parametrize("spec, mem", CASES)
def test_latency_moves_every_compare_later_and_nothing_else(spec, mem, lat):
    """The definition (common practice, no source), against the latency-0 stream."""
    t = parse_notation(spec) if spec.startswith("{") else resolve_test(spec)
    plain = list(Plan(t, make_memory(**mem)).vectors())
    piped = list(Plan(t, make_memory(**mem, read_latency=lat)).vectors())
    t0 = len(plain)
    want = {c + lat: em for c, em in _compares(plain).items()}
    assert _compares(piped) == want
    last = max(want, default=-1)
    assert len(piped) == max(t0, last + 1) == schedule(t, make_memory(**mem, read_latency=lat)).cycles
    for a, b in zip(plain, piped):       # commands unchanged
        assert (a.cycle, a.run, a.element, a.op, a.action, a.address, a.we, a.re, a.wdata) == \
            (b.cycle, b.run, b.element, b.op, b.action, b.address, b.we, b.re, b.wdata)
    assert all(v.action == "idle" and not v.we and not v.re for v in piped[t0:])   # the drain
    assert all(v.expect == 0 for v in piped if not v.mask)


@pytest.mark.parametrize("spec, mem", CASES[:3])
def test_stil_with_latency_passes_an_independent_parser(spec, mem, tmp_path):
    t = parse_notation(spec)
    m = make_memory(**mem, read_latency=3)
    out = tmp_path / "p.stil"
    export(t, m, str(out))
    got = stil_vectors(out)                                 # semi-ate-stil: syntax and semantics
    flat = [vec for n, vec in got for _ in range(n)]
    plan = Plan(t, m)
    assert len(flat) == plan.cycles
    assert flat == list(expected_stil(plan))
    # DOUT strobes exactly where the latency-0 file strobes, three cycles later
    plain = [vec for n, vec in stil_vectors(_export(t, make_memory(**mem), tmp_path / "q.stil")) for _ in range(n)]
    strobes = {i: v["DOUT"] for i, v in enumerate(plain) if set(v["DOUT"]) != {"X"}}
    assert {i: v["DOUT"] for i, v in enumerate(flat) if set(v["DOUT"]) != {"X"}} == \
        {i + 3: d for i, d in strobes.items()}
    assert "pipelined reads: DOUT is compared 3 cycle(s) after the read's last cycle" in out.read_text()


def _export(t, m, path, **kw):
    export(t, m, str(path), **kw)
    return path


def test_vcd_with_latency_and_a_pin_map_reads_back_with_vcdvcd(tmp_path):
    """Pin names and active-low enables in VCD, read back with vcdvcd (IEEE 1364 values:
    an active-low enable is 0 when active)."""
    import bisect

    from marchkit.export.pins import pin_map
    from marchkit.export.vcd import timescale

    vcdvcd = need_module("vcdvcd")
    t = parse_notation("{⇕(w0); ⇑(r0,w1); Del(30ns); ⇓(r1,w0,r0)}")
    m = make_memory(words=8, bits=4, read_latency=2, backgrounds="solid,checkerboard")
    pm = pin_map({"clock": "CK", "address": "A_BUS", "data_in": "DIN_P", "data_out": "QOUT",
                  "write_enable": "WEB", "write_enable_active": "low", "chip_enable": "CSB",
                  "chip_enable_active": "low", "byte_enables": "BWEB", "byte_bits": 2, "byte_enables_active": "low"})
    out = _export(t, m, tmp_path / "p.vcd", pins=pm)
    v = vcdvcd.VCDVCD(str(out))
    names = {"CK", "A_BUS", "WEB", "RE", "DIN_P", "QOUT", "QOUT_mask", "run", "element", "op", "CSB", "BWEB"}
    assert set(v.signals) == {f"pattern.{n}" for n in names}
    _, half, _ = timescale(m.clock_hz)
    tv = {n: v[f"pattern.{n}"].tv for n in names}
    idx = {n: [x for x, _ in tv[n]] for n in names}

    def at(n, time):
        return int(tv[n][bisect.bisect_right(idx[n], time) - 1][1], 2)

    plan = Plan(t, m)
    for vec in plan.vectors():
        t0 = math.floor(2 * vec.cycle * half)
        assert at("A_BUS", t0) == vec.address and at("DIN_P", t0) == vec.wdata
        assert at("WEB", t0) == 1 - vec.we and at("RE", t0) == vec.re            # WEB active low
        assert at("CSB", t0) == (1 if vec.action == "idle" else 0)               # chip select: low on operations
        assert at("BWEB", t0) == (0 if vec.we else 3)                             # 4 bits / 2 per byte enable
        assert at("QOUT", t0) == vec.expect and at("QOUT_mask", t0) == vec.mask
    assert v.endtime == math.floor(2 * plan.cycles * half)


def test_a_pin_map_still_refused_for_csv(cli, tmp_path):
    code, out, err = cli("export", MATS_PLUS, "--words", "4", "-o", str(tmp_path / "p.csv"), "--pins", "clock=CK")
    assert code == 2 and "applies to --format stil and vcd" in err


# ---- Icarus Verilog --------------------------------------------------------------------------

ICARUS = [
    ("March C-", dict(words=16, bits=4), 2, [(5, 2, 1), (0, 0, 0), (15, 3, 1)]),
    ("{⇕(w0); ⇑(r0,w1); Del(20ns); ⇓(r1,w0,r0)}", dict(words=8, bits=2, read_cycles=2, write_cycles=2,
                                                     backgrounds="solid,checkerboard"), 3, [(3, 1, 1), (6, 0, 0)]),
]


@pytest.mark.parametrize("spec, mem, lat, cells", ICARUS)
def test_icarus_pipelined_sram_passes_and_fails_at_the_right_cycle(spec, mem, lat, cells, tmp_path):
    from marchkit.engine.reference import reference_verdicts
    from marchkit.faults import SAF, Instance

    t = parse_notation(spec) if spec.startswith("{") else resolve_test(spec)
    m = make_memory(**mem, read_latency=lat)
    export(t, m, str(tmp_path / "pattern.hex"))
    assert f"LAT = {lat + 1})" in (tmp_path / "pattern_sram.v").read_text()
    vvp = compile_tb(tmp_path)
    code, out = run_vvp(vvp, tmp_path)
    assert code == 0 and f"PASS: {schedule(t, m).cycles} cycles" in out, out
    verdicts = reference_verdicts(t, m, [Instance(SAF[v], sites=(w * m.bits + b,)) for w, b, v in cells])
    for (w, b, v), (det, where) in zip(cells, verdicts):
        assert det
        code, out = run_vvp(vvp, tmp_path, f"+stuck_word={w}", f"+stuck_bit={b}", f"+stuck_value={v}")
        assert code != 0, out
        found = re.search(r"FAIL at cycle (\d+): address ([0-9a-f]+) .*\(compared in cycle (\d+)\)", out)
        assert found, out
        issue, addr, cmp = int(found.group(1)), int(found.group(2), 16), int(found.group(3))
        assert issue == where.cycle and addr == w
        assert cmp == where.cycle + m.read_cycles - 1 + lat


def _icarus_fail_log(out, m):
    from marchkit.diagnose import fail_log_csv

    class Line:
        def __init__(self, cycle, address, expected, observed):
            self.cycle, self.address, self.expected, self.observed = cycle, address, expected, observed

    lines = [Line(int(c), int(a, 16), int(e, 16), int(o.replace("x", "0").replace("z", "0"), 16))
             for a, e, o, c in re.findall(r"FAIL at cycle \d+: address ([0-9a-f]+) expected ([0-9a-f]+) read "
                                          r"([0-9a-fxz]+) mask [0-9a-f]+ \(compared in cycle (\d+)\)", out)]
    return fail_log_csv(lines, m), lines


def test_an_icarus_fail_log_of_a_latency_2_memory_diagnoses_the_stuck_cell(tmp_path, cli):
    m = make_memory(words=16, bits=4, read_latency=2)
    export(resolve_test("March C-"), m, str(tmp_path / "pattern.hex"))
    vvp = compile_tb(tmp_path)
    code, out = run_vvp(vvp, tmp_path, "+stuck_word=9", "+stuck_bit=1", "+stuck_value=0", "+all_failures")
    assert code != 0, out
    text, lines = _icarus_fail_log(out, m)
    assert len(lines) > 1
    (tmp_path / "fails.csv").write_text(text)
    code, res, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--read-latency", "2",
                         "--fails", str(tmp_path / "fails.csv"), "--json", "--no-hint")
    assert code == 0, err
    first = [c for c in json.loads(res)["candidates"] if c["rank"] == 1]
    assert all(c["mismatches"] == 0 for c in first)
    assert any({"kind": "SA0", "cells": [[9, 1]]} in c["members"] for c in first)
    # the same log read as if the memory had no latency does not fit the test: refused, exit 2
    code, res, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4",
                         "--fails", str(tmp_path / "fails.csv"), "--json", "--no-hint")
    assert code == 2 and "is the log from another test, memory or address order?" in err, err


def test_a_coupling_fault_log_with_latency_diagnoses_the_pair(tmp_path, cli):
    """The log comes from the independent generator of test_diagnose (the exported stream run
    on the whole faulty array) on the memory without latency, every cycle moved 2 later — the
    definition of the latency; the diagnosis on the latency-2 memory finds the injected pair."""
    import random

    from marchkit.diagnose import fail_log_csv
    from marchkit.faults import CFID, Instance
    from test_diagnose import generate_log

    test = resolve_test("March C-")
    plain = make_memory(words=32, bits=2, mux=2)
    inst = Instance(CFID[1], (2 * 12 + 1, 2 * 13 + 1))    # <0w1;0/1/->: aggressor w12.b1, victim w13.b1
    lines = generate_log(test, plain, inst, (0, 0), random.Random(5))
    assert lines
    for x in lines:
        x.cycle += 2
    p = tmp_path / "fails.csv"
    p.write_text(fail_log_csv(lines, plain))
    code, res, err = cli("diagnose", "March C-", "--words", "32", "--bits", "2", "--mux", "2", "--read-latency", "2",
                         "--fails", str(p), "--json", "--no-hint", "--faults", "static,classic")
    assert code == 0, err
    first = [c for c in json.loads(res)["candidates"] if c["rank"] == 1]
    assert all(c["mismatches"] == 0 for c in first)
    assert any({"kind": "CFid<↑;1>", "cells": [[12, 1], [13, 1]]} in c["members"] for c in first)


def test_fail_log_cycles_that_are_not_compares_name_the_latency(tmp_path, cli):
    m = make_memory(words=16, bits=4, read_latency=2)
    plan = Plan(resolve_test("March C-"), m)
    vec = list(plan.vectors())
    cmp = next(v for v in vec if v.mask)
    write = next(v for v in vec if v.we and v.cycle > 20)
    p = tmp_path / "fails.csv"
    # two cycles after a write nothing comes back
    p.write_text(f"cycle,address,expected,observed\n{write.cycle + 2},{write.address:x},{0:x},{1:x}\n")
    code, out, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--read-latency", "2",
                         "--fails", str(p))
    assert code == 2, err
    assert (f"cycle {write.cycle + 2} is not a compare: 2 cycles earlier (read latency), cycle {write.cycle} "
            "is a write") in err, err
    p.write_text(f"cycle,address,expected,observed\n1,{cmp.address:x},0,1\n")
    code, out, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--read-latency", "2",
                         "--fails", str(p))
    assert code == 2 and "comes before the data of any read (read latency 2 cycles)" in err, err


# ---- command line: options, memory file, limits, figures ---------------------------------------

@pytest.mark.parametrize("value, needle", [("-1", "-1 is outside 0 to 64"), ("65", "65 is outside 0 to 64"),
                                           ("two", "'two' is not a whole number")])
def test_bad_latency_options_exit_2_before_any_work(value, needle, cli):
    code, out, err = cli("grade", "March C-", "--words", "16", "--read-latency", value)
    assert code == 2 and needle in err and "Traceback" not in err and out == ""


@pytest.mark.parametrize("line, needle", [
    ("read_latency = -3", "read latency must be 0 to 64 clock cycles (got -3)"),
    ("read_latency = 100", "read latency must be 0 to 64 clock cycles (got 100)"),
    ('read_latency = "2"', "read_latency has the wrong type (str)"),
    ("read_latncy = 2", "did you mean 'read_latency'?"),
])
def test_memory_file_latency_is_checked_with_its_position(line, needle, cli, tmp_path):
    p = tmp_path / "kestrel_pipe.toml"
    p.write_text(f'[memory]\nwords = 16\nbits = 4\n{line}\n')
    code, out, err = cli("grade", "March C-", "--memory", str(p))
    assert code == 2 and needle in err, err
    assert f"{p}:4:1: error:" in err


def test_grade_and_export_report_the_drained_cycles(cli, tmp_path, monkeypatch):
    """MATS+ on 16 words is 80 cycles; with latency 3 its last read (r1 at address 0) is
    followed by one write, so the test waits 2 more cycles: 82 (by hand)."""
    monkeypatch.setenv("COLUMNS", "80")
    p = tmp_path / "kestrel_pipe.toml"
    p.write_text('[memory]\nwords = 16\nread_latency = 3\n')
    code, out, err = cli("grade", "MATS+", "--memory", str(p), "--faults", "SAF")
    assert code == 0, err
    assert "reads pipelined, data 3 cycles later" in out
    flat = " ".join(out.split())
    assert "82 cycles (2 waiting for the last read's data)" in flat
    code, out, err = cli("export", "MATS+", "--memory", str(p), "-o", str(tmp_path / "p.csv"))
    assert code == 0 and "82 cycles" in out, err
    code, out, err = cli("grade", "MATS+", "--memory", str(p), "--faults", "SAF", "--read-latency", "0")
    assert code == 0 and "80 cycles" in out and "pipelined" not in out


def _flat_strobes(path):
    """(cycle, DOUT) of every strobing vector of a STIL file read with semi-ate-stil (loop
    bodies of one V each here, so a (count, V) entry is that V count times)."""
    out, c = [], 0
    for n, vec in stil_vectors(path):
        if set(vec["DOUT"]) != {"X"}:
            out.extend((c + i, vec["DOUT"]) for i in range(n))
        c += n
    return out, c


@pytest.mark.parametrize("lat", [1, 3])
def test_hammer_repeats_with_latency_loop_in_stil(lat, cli, tmp_path):
    """r0^70000 is written as loops (more than 65,536 operations per visit); with pipelined
    reads every strobe is the latency-0 strobe moved ``lat`` cycles later (the definition),
    read back with semi-ate-stil, and the file stays small."""
    spec = "{⇑(w0); ⇑(r0^70000); ⇓(w1,r1)}"
    plain, piped = tmp_path / "h0.stil", tmp_path / f"h{lat}.stil"
    code, _, err = cli("export", spec, "--words", "4", "--bits", "2", "-o", str(plain), "--pins", "clock=CK")
    assert code == 0, err
    code, out, err = cli("export", spec, "--words", "4", "--bits", "2", "--read-latency", str(lat),
                         "-o", str(piped), "--pins", "clock=CK")
    assert code == 0, err
    s0, n0 = _flat_strobes(plain)
    s1, n1 = _flat_strobes(piped)
    assert len(s0) == 4 * 70000 + 4
    assert s1 == [(c + lat, d) for c, d in s0]
    assert n1 == n0 + lat                # the test ends with a read: L more cycles
    # the first L copies of each run are written out, the rest is one loop
    assert piped.stat().st_size < 20000 and f"Loop {70000 - lat} {{ V {{ CK=P;" in piped.read_text()


def test_bist_takes_the_memory_latency_as_its_default(cli, tmp_path):
    code, out, err = cli("bist", "MATS+", "--words", "16", "--bits", "4", "--read-latency", "2",
                         "-o", str(tmp_path / "mb"))
    assert code == 0, err
    # MATS+ on 16 words: 80 cycles; the last read is followed by one write, so 81 (by hand)
    assert "read latency 2: LAT 3; done rises 3 cycles after the last operation; grade and export count 81 " \
        "cycles" in " ".join(out.split())
    assert re.search(r"#\(parameter AW = 4, DW = 4, LAT = 3\)", (tmp_path / "mb" / "mbist.v").read_text())


def test_bist_on_a_pipelined_memory_passes_and_finds_a_stuck_cell_in_icarus(cli, tmp_path):
    """The controller with LAT = read latency + 1 (Icarus Verilog): fault free it passes; a
    stuck-at cell is first caught at the cycle the literal reference simulator reports."""
    import subprocess

    from marchkit.engine.reference import reference_verdicts
    from marchkit.faults import SAF, Instance
    from test_export import need_tool

    iverilog = need_tool("iverilog")
    code, out, err = cli("bist", "March C-", "--words", "16", "--bits", "4", "--read-latency", "2",
                         "-o", str(tmp_path / "mb"), "--quiet")
    assert code == 0, err
    d = tmp_path / "mb"
    r = subprocess.run([iverilog, "-o", "s.vvp", "mbist_tb.v", "mbist.v"], cwd=d, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    code, out = run_vvp(d / "s.vvp", d)
    assert code == 0 and "PASS" in out, out
    m = make_memory(16, 4, read_latency=2)
    (det, where), = reference_verdicts(resolve_test("March C-"), m, [Instance(SAF[1], (5 * 4 + 2,))])
    code, out = run_vvp(d / "s.vvp", d, "+stuck_word=5", "+stuck_bit=2", "+stuck_value=1")
    assert det and f"stuck-at-1 cell: address 5 bit 2: detected, first at cycle {where.cycle} (address 5, bits 4)" in out


def test_a_pin_name_taken_by_a_vcd_variable_is_refused_before_writing(cli, tmp_path):
    out = tmp_path / "p.vcd"
    code, text, err = cli("export", MATS_PLUS, "--words", "4", "-o", str(out), "--pins", "data_out=QB,write_enable=QB_mask")
    assert code == 2 and "pins: the name 'QB_mask' is taken in VCD" in err and not out.exists()
