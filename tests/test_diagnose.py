"""Diagnosis: fail logs → ranked fault candidates, bitmap classes, pictures, bad logs.

Independent paths the checks lean on:

* Fail logs are made by a log generator written here, not by the code under test: it walks
  the exported cycle stream (``export.stream.Plan.vectors``: cycle numbers, addresses, write
  data, expected data, compare mask — the stimulus a tester applies) over the whole array and
  applies each operation to the literal reference semantics (``engine.core.Run.access``, the
  oracle every engine is tested against), recording every compare that fails.  Unknown read
  bits are filled at random, as a real chip would return one value or the other.
* For a sample, the log comes from Icarus Verilog running the testbench and SRAM model that
  ``marchkit export --format hex --stuck-at`` writes (its ``+all_failures`` report).
* The expected behaviour of the diagnosis itself: the injected fault must be in a class that
  matches the log exactly and is ranked first — the single-fault diagnosis criterion of
  march-based diagnosis (Li, Cheng, Huang, Wu, ITC 2001: a fault is located when its syndrome
  equals the observed one).
"""

from __future__ import annotations

import json
import random
import re
import subprocess

import numpy as np
import pytest

from marchkit.diagnose import (CompareTable, bitmap_from_cells, bitmap_from_rc, diagnose, fail_log_csv,
                               parse_fail_log)
from marchkit.engine.core import X, Run
from marchkit.engine.reference import full_context
from marchkit.engine.trace import Tracer
from marchkit.export.stream import Plan
from marchkit.faults import Instance, all_kinds, cell_pairs, parse_pairs, word_pairs
from marchkit.model import make_memory
from marchkit.notation import parse_notation, resolve_test



def need_tool(name: str) -> str:
    """The path of a command-line tool; skipped where it is missing, failing under CI."""
    import os
    import shutil

    path = shutil.which(name)
    if path is None:
        msg = f"{name} is not installed (Debian package iverilog; .ci/run installs it)"
        if os.environ.get("CI"):
            pytest.fail(msg)
        pytest.skip(msg)
    return path


def run_vvp(vvp, cwd, *plusargs):
    r = subprocess.run([need_tool("vvp"), "-n", str(vvp), *plusargs], cwd=cwd, capture_output=True, text=True,
                       timeout=120)
    return r.returncode, r.stdout + r.stderr


def compile_tb(tmp_path, stem="pattern"):
    vvp = tmp_path / f"{stem}.vvp"
    r = subprocess.run([need_tool("iverilog"), "-o", str(vvp), f"{stem}_tb.v", f"{stem}_sram.v"], cwd=tmp_path,
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    return vvp


# ---------------------------------------------------------------------------------------
# the independent log generator


class LogLine:
    def __init__(self, cycle, address, expected, observed):
        self.cycle, self.address, self.expected, self.observed = cycle, address, expected, observed


def generate_log(test, mem, inst, inits, rng):
    """Every failing compare of ``inst`` when the exported stimulus runs on a whole faulty
    array (oracle semantics, ⇕ ascending as exported); unknown read bits at random."""
    plan = Plan(test, mem)
    ctx = full_context(test, mem, plan.sched)
    run = Run(ctx, inst, tuple(inits))
    bits = mem.bits
    out = []
    key = visit = None
    got = None
    for v in plan.vectors():
        if v.action == "idle":
            key = visit = None
            continue
        k = (v.run, v.element, v.op, v.address)
        if (v.run, v.element, v.address) != visit:
            run.fault.visit(run, v.address)  # a new address visit
            visit = (v.run, v.element, v.address)
        if k != key:                         # the first cycle of an operation: apply it
            key = k
            if v.we:
                word = [(v.wdata >> i) & 1 for i in range(bits)]
                run.access(v.address, "w", word, v.cycle)
                got = None
            else:
                word = [(v.expect >> i) & 1 for i in range(bits)]     # the stream fills expect on every read cycle
                got = run.access(v.address, "r", word, v.cycle)
        if v.mask:
            obs = 0
            for i, o in enumerate(got):
                bit = rng.randrange(2) if o == X else o
                obs |= bit << i
            if obs != v.expect:
                out.append(LogLine(v.cycle, v.address, v.expect, obs))
    return out


# ---------------------------------------------------------------------------------------
# round trip: injected fault → log → diagnosis ranks its class first

MEMORIES = [
    dict(words=16, bits=1),
    dict(words=16, bits=2, mux=2),
    dict(words=8, bits=4, order="complement", backgrounds="solid,checkerboard"),
    dict(words=16, bits=2, mux=4, order="gray", scramble_xor=5),
    dict(words=8, bits=2, read_cycles=2, write_cycles=1),
]
TESTS = ["March C-", "March SS", "MATS+", "{⇕(w0); ⇑(r0,w1,r1); Del(20us); ⇓(r1,w0,r0); ⇑(r0,r0)}",
         # back-to-back pairs of every kind, for the dynamic primitives
         "{⇑(w0); ⇑(r0,r0,w0,r0,w1,r1,r1,w1,w1); ⇓(r1,w0,w0,r0,w1,w0,r0); ⇑(w1,r1,w0,w1,r1,w1,w0,r0)}"]


def _kind_groups():
    from fractions import Fraction

    # leakage times short enough for the small arrays here: 100 ns and 300 ns at 100 MHz
    kinds = all_kinds((Fraction(1, 10**7), Fraction(3, 10**7)))
    groups = {
        "single-cell static": [k for k in kinds if k.family == "rules" and k.arity == 1 and k.cls in
                               ("SF", "TF", "WDF", "RDF", "DRDF", "IRF")],
        "coupling static": [k for k in kinds if k.family == "rules" and k.arity == 2 and k.is_primitive],
        "classic": [k for k in kinds if k.cls in ("SAF", "CFin", "CFid")],
        "dynamic": [k for k in kinds if k.cls.startswith("d")],
        "stuck-open": [k for k in kinds if k.family == "sof"],
        "address decoder": [k for k in kinds if k.family == "af"],
        "retention": [k for k in kinds if k.family == "drf"],
    }
    return groups


GROUPS = _kind_groups()
# faults diagnosed per group (undetected ones, which leave an empty log, come on top)
PER_GROUP = {"single-cell static": 80, "coupling static": 90, "classic": 70, "dynamic": 80,
             "stuck-open": 60, "address decoder": 50, "retention": 70}     # 500 in all


def _random_instance(kind, mem, rng):
    """(instance, pair scope to diagnose with)."""
    scope = rng.choice(["neighbours", "all"]) if kind.arity == 2 else "neighbours"
    if kind.family == "af":
        if kind.arity == 1:
            return Instance(kind, (rng.randrange(mem.words),)), scope
        if scope == "all":
            a, b = rng.sample(range(mem.words), 2)
            return Instance(kind, (a, b)), scope
        a, b = word_pairs(mem, parse_pairs("neighbours"))
        i = rng.randrange(a.size)
        return Instance(kind, (int(a[i]), int(b[i]))), scope
    if kind.arity == 1:
        return Instance(kind, (rng.randrange(mem.cells),)), scope
    if scope == "all":
        a, v = rng.sample(range(mem.cells), 2)
        return Instance(kind, (a, v)), scope
    a, v = cell_pairs(mem, parse_pairs("neighbours"))
    i = rng.randrange(a.size)
    return Instance(kind, (int(a[i]), int(v[i]))), scope


def _members(cand):
    return {(k.text, s) for k, s in cand.members()}


# (group, part): the address-decoder group runs in two parts of half the faults each
CHUNKS = [(g, 0) for g in PER_GROUP if g != "address decoder"] + [("address decoder", 0), ("address decoder", 1)]


@pytest.mark.parametrize("group, part", CHUNKS)
def test_the_injected_fault_class_is_ranked_first(group, part):
    from marchkit.diagnose.faillog import FailLogError
    from marchkit.engine.core import n_init_cells

    rng = random.Random(f"diagnose-{group}-{part}")
    kinds = GROUPS[group]
    assert kinds
    parts = sum(1 for g, _ in CHUNKS if g == group)
    want = PER_GROUP[group] // parts
    diagnosed = undetected = 0
    for i in range(6 * want):
        if diagnosed == want:
            break
        spec = TESTS[i % len(TESTS)]
        test = parse_notation(spec) if spec.startswith("{") else resolve_test(spec)
        mem = make_memory(**MEMORIES[(i // len(TESTS)) % len(MEMORIES)], clock="100MHz")
        kind = rng.choice(kinds)
        inst, scope = _random_instance(kind, mem, rng)
        inits = tuple(rng.randrange(2) for _ in range(n_init_cells(kind)))
        lines = generate_log(test, mem, inst, inits, rng)
        text = fail_log_csv(lines, mem)
        if not lines:
            undetected += 1
            with pytest.raises(FailLogError, match="no failing compares"):
                parse_fail_log(text, "gen.csv", mem.words, mem.bits, CompareTable(test, mem))
            continue
        log = parse_fail_log(text, "gen.csv", mem.words, mem.bits, CompareTable(test, mem))
        retention = (kind.tau,) if kind.tau is not None else None
        d = diagnose(test, mem, log, "static,classic,dynamic,retention", scope, retention=retention, hint=False)
        mine = [c for c in d.candidates if (inst.kind.text, inst.sites) in _members(c)]
        assert len(mine) == 1, (spec, mem, inst, inits)       # in exactly one class
        c = mine[0]
        assert c.mismatches == 0 and c.rank == 1, (spec, mem.describe(), inst.text(mem), inits, c.mismatches, c.diffs)
        diagnosed += 1
    assert diagnosed == want, (diagnosed, undetected)


def test_five_hundred_faults_in_all():
    assert sum(PER_GROUP.values()) >= 500
    assert set(PER_GROUP) == set(GROUPS)
    for g in PER_GROUP:        # the parts of a group add up to its count
        parts = sum(1 for h, _ in CHUNKS if h == g)
        assert PER_GROUP[g] % parts == 0


# ---------------------------------------------------------------------------------------
# the trace on projected words gives what the whole array gives


def test_projected_trace_equals_the_whole_array():
    rng = random.Random(7)
    for spec, mem in [("March SS", make_memory(words=16, bits=2, mux=2)),
                      ("March C-", make_memory(words=8, bits=1, order="complement", backgrounds="solid,checkerboard")),
                      ("{⇕(w0); ⇕(r0,w1); ⇓(r1,w0,r0)}", make_memory(words=16, bits=4, mux=4, order="random:3"))]:
        test = parse_notation(spec) if spec.startswith("{") else resolve_test(spec)
        tr = Tracer(test, mem)
        full = tr.full_words()
        for kind in all_kinds():
            if kind.arity > 2:        # not diagnosed (yet): linked faults of three cells, NPSF
                continue
            inst, _ = _random_instance(kind, mem, rng)
            for inits, dirs in tr.scenarios(inst, canonical=False):
                assert tr.compares(inst, inits, dirs) == tr.compares(inst, inits, dirs, words=full), inst.text(mem)


def test_the_trace_agrees_with_the_generator_cycle_by_cycle():
    """Definite fails of the tracer = the fails of the stream-driven generator (no X here)."""
    rng = random.Random(3)
    test = resolve_test("March C-")
    mem = make_memory(words=16, bits=2, mux=2)
    tr = Tracer(test, mem)
    for kind in [k for k in all_kinds() if k.family in ("rules", "af", "drf")][::3]:
        inst, _ = _random_instance(kind, mem, rng)
        from marchkit.engine.core import n_init_cells

        inits = (0,) * n_init_cells(kind)
        got = [(c.cycle, c.address, c.expected, c.observed) for c in tr.compares(inst, inits) if c.definite]
        want = [(x.cycle, x.address, x.expected, x.observed) for x in generate_log(test, mem, inst, inits, rng)]
        assert got == want, inst.text(mem)


# ---------------------------------------------------------------------------------------
# Icarus Verilog: the generated testbench with a stuck-at cell writes the log


def _icarus_log(out, bits):
    lines = []
    for m in re.finditer(r"FAIL at cycle \d+: address ([0-9a-f]+) expected ([0-9a-f]+) read ([0-9a-fxz]+) "
                         r"mask ([0-9a-f]+) \(compared in cycle (\d+)\)", out):     # addresses and data in hex
        addr, exp, obs, _mask, cyc = m.groups()
        lines.append(LogLine(int(cyc), int(addr, 16), int(exp, 16), int(obs.replace("x", "0").replace("z", "0"), 16)))
    return lines


@pytest.mark.parametrize("spec, mem, cells", [
    ("March C-", dict(words=16, bits=4), [(5, 2, 1), (9, 1, 0), (15, 3, 1)]),
    ("March SS", dict(words=16, bits=2, mux=2, order="gray"), [(2, 0, 1), (13, 1, 0)]),
    ("{⇕(w0); ⇑(r0,w1); Del(100ns); ⇓(r1,w0,r0)}", dict(words=8, bits=2, read_cycles=2), [(3, 1, 1), (6, 0, 0)]),
])
def test_icarus_fail_logs_are_diagnosed_as_the_stuck_at_cell(spec, mem, cells, tmp_path, cli):
    from marchkit.export import export

    test = parse_notation(spec) if spec.startswith("{") else resolve_test(spec)
    m = make_memory(**mem)
    export(test, m, str(tmp_path / "pattern.hex"))
    vvp = compile_tb(tmp_path)
    for w, b, v in cells:
        code, out = run_vvp(vvp, tmp_path, f"+stuck_word={w}", f"+stuck_bit={b}", f"+stuck_value={v}", "+all_failures")
        assert code != 0, out
        lines = _icarus_log(out, m.bits)
        assert lines
        log_path = tmp_path / f"fails_{w}_{b}.csv"
        log_path.write_text(fail_log_csv(lines, m))
        argv = ["diagnose", spec, "--words", str(m.words), "--bits", str(m.bits), "--fails", str(log_path),
                "--json", "--no-hint"]
        for k, val in mem.items():
            if k not in ("words", "bits"):
                argv += [f"--{k.replace('_', '-')}", str(val)]
        code, text, err = cli(*argv)
        assert code == 0, err
        res = json.loads(text)
        first = [c for c in res["candidates"] if c["rank"] == 1]
        want = {"kind": f"SA{v}", "cells": [[w, b]]}
        assert any(want in c["members"] for c in first), first
        assert all(c["mismatches"] == 0 for c in first)


# ---------------------------------------------------------------------------------------
# bad logs: positioned errors, exit 2

HEAD = "cycle,address,expected,observed\n"


@pytest.fixture
def good_line():
    test = resolve_test("March C-")
    mem = make_memory(words=16, bits=4)
    tr = Tracer(test, mem)
    from marchkit.faults import SAF

    c = [x for x in tr.compares(Instance(SAF[1], (21,))) if x.definite][0]
    return c


@pytest.mark.parametrize("body, needle, line", [
    ("{c.cycle},5,0,2\n0,5,0,2\n", "cycle 0 is a write", 3),                        # not a compare
    ("{c.cycle},7,0,2\n", "compares address 0x5, not 0x7", 2),                      # another test / order
    ("{c.cycle},25,0,2\n", "address 0x25 is out of range", 2),
    ("{c.cycle},5,10,2\n", "expected data 0x10 is wider than the 4-bit word", 2),
    ("{c.cycle},5,0,1f\n", "observed data 0x1f is wider than the 4-bit word", 2),
    ("{c.cycle},5,f,2\n", "expects 0x0 at address 0x5, the log says 0xf", 2),       # another test / background
    ("{c.cycle},5,0,0\n", "observed equals expected", 2),
    ("{c.cycle},5,0,2\n{c.cycle},5,0,2\n", "listed twice", 3),
    ("999999,5,0,2\n", "beyond the end of the test", 2),
    ("{c.cycle},5,0\n", "a row has 4 fields", 2),
    ("{c.cycle},5,zz,2\n", "'zz' is not a hexadecimal number", 2),
    ("", "lists no failing compares", 1),
])
def test_bad_logs_name_the_line_and_exit_2(body, needle, line, good_line, cli, tmp_path):
    f = tmp_path / "fails.csv"
    f.write_text(HEAD + body.format(c=good_line))
    code, out, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--fails", str(f))
    assert code == 2
    assert f"{f}:{line}:" in err and needle in err, err
    assert "Traceback" not in err


def test_bad_header_jsonl_and_missing_file(cli, tmp_path, good_line):
    f = tmp_path / "a.csv"
    f.write_text("cyc,addr,exp,obs\n1,2,3,4\n")
    code, _, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--fails", str(f))
    assert code == 2 and f"{f}:1:" in err and "header cycle,address,expected,observed" in err
    g = tmp_path / "b.jsonl"
    g.write_text(json.dumps({"cycle": good_line.cycle, "address": "5", "expected": "0", "observed": "2"}) + "\n"
                 + '{"cycle": 1, "address": "5"}\n')
    code, _, err = cli("diagnose", "March C-", "--words", "16", "--bits", "4", "--fails", str(g))
    assert code == 2 and f"{g}:2:" in err and "missing keys expected, observed" in err
    code, _, err = cli("diagnose", "March C-", "--words", "16", "--fails", str(tmp_path / "none.csv"))
    assert code == 2 and "no fail log" in err


def test_a_read_compared_in_its_last_cycle(tmp_path, cli):
    """With two-cycle reads the export compares in the second cycle (its mask column)."""
    test = resolve_test("MATS+")
    mem = make_memory(words=8, bits=1, read_cycles=2)
    plan = Plan(test, mem)
    compares = [v for v in plan.vectors() if v.mask]
    reads_first = [v for v in plan.vectors() if v.re and not v.mask and v.cycle + 1 in {c.cycle for c in compares}]
    assert compares and reads_first
    ct = CompareTable(test, mem)
    c = compares[3]
    assert ct.problem(c.cycle, c.address, c.expect) is None
    r = reads_first[3]
    field, msg = ct.problem(r.cycle, r.address, r.expect)
    assert field == "cycle" and f"compared in its last cycle, {r.cycle + 1}" in msg


# ---------------------------------------------------------------------------------------
# CLI output, JSON contract, the hint, the picture


def _log_for(tmp_path, test, mem, inst, inits=()):
    tr = Tracer(test, mem)
    lines = [c for c in tr.compares(inst, inits) if c.definite]
    p = tmp_path / "fails.csv"
    p.write_text(fail_log_csv(lines, mem))
    return p


def test_json_contract_and_terminal_view(tmp_path, cli, monkeypatch):
    from marchkit.faults import CFID

    monkeypatch.setenv("COLUMNS", "100")
    test = resolve_test("March C-")
    mem = make_memory(words=64, bits=4, mux=2)
    inst = Instance(CFID[1], (4 * 20 + 1, 4 * 21 + 1))    # <0w1;0/1/->: aggressor w20.b1, victim w21.b1
    p = _log_for(tmp_path, test, mem, inst, (0, 0))
    code, text, err = cli("diagnose", "March C-", "--words", "64", "--bits", "4", "--mux", "2",
                          "--fails", str(p), "--json", "--top", "5", "--faults", "static,classic")
    assert code == 0, err
    res = json.loads(text)
    assert set(res) >= {"candidates", "bitmap", "resolution", "hint"}
    c0 = res["candidates"][0]
    assert set(c0) >= {"rank", "mismatches", "members", "predicted", "differences"}
    assert c0["rank"] == 1 and c0["mismatches"] == 0
    for m in c0["members"]:
        assert set(m) == {"kind", "cells"} and m["cells"][-1] == [21, 1]     # victim last
    assert any(m == {"kind": "CFid<↑;1>", "cells": [[20, 1], [21, 1]]}
               for c in res["candidates"] if c["rank"] == 1 for m in c["members"])
    assert res["bitmap"]["class"] == "single cell"
    code, out, err = cli("diagnose", "March C-", "--words", "64", "--bits", "4", "--mux", "2", "--fails", str(p),
                         "--members", "100", "--faults", "static,classic")
    assert code == 0
    assert "single cell" in out and "match the log exactly" in out and "CFid<↑;1> a=w20.b1 v=w21.b1" in out


def test_hint_splits_a_class_with_an_extra_element():
    """MATS+ {⇕(w0); ⇑(r0,w1); ⇓(r1,w0)} (Abadir & Reghbati 1983) targets stuck-at and
    decoder faults; a log of an up-transition fault leaves a large class of single-cell and
    coupling faults that fail the same r1.  The hint names an element that splits it; the
    claim (the sizes of the parts) is re-checked here by simulating every member under the
    extended test directly."""
    from marchkit.diagnose.diagnosis import _extended
    from marchkit.faults import TF

    test = resolve_test("MATS+")
    mem = make_memory(words=16, bits=1)
    inst = Instance(TF[0], (6,))
    tr = Tracer(test, mem)
    lines = [c for c in tr.compares(inst, (0,)) if c.definite]
    log = parse_fail_log(fail_log_csv(lines, mem), "x", 16, 1, CompareTable(test, mem))
    d = diagnose(test, mem, log, "static,classic")
    target = max(d.consistent, key=lambda c: c.size)
    assert ("<0w1/0/->", (6,)) in _members(target) and ("SA0", (6,)) in _members(target)
    assert d.hint["element"] and len(d.hint["split"]) >= 2
    t2 = _extended(test, _ascii(d.hint["element"]))
    assert len(t2.elements) == len(test.elements) + 1
    tr2 = Tracer(t2, mem)
    parts: dict = {}
    for k, sites in target.members():
        sig = frozenset(cs for _, cs in tr2.syndromes(Instance(k, sites)))
        parts[sig] = parts.get(sig, 0) + 1
    assert sorted(parts.values(), reverse=True) == d.hint["split"]
    # an up-transition fault and a stuck-at-0 cell stay together under any element: after the
    # first write of 0 neither cell ever holds 1 again, so no read can tell them apart
    from marchkit.faults import SAF

    assert (frozenset(cs for _, cs in tr2.syndromes(Instance(TF[0], (6,))))
            == frozenset(cs for _, cs in tr2.syndromes(Instance(SAF[0], (6,)))))


def _ascii(pretty: str) -> str:
    return (pretty.replace("⇑", "up").replace("⇓", "down").replace("⇕", "any").replace("Del", "del"))


def test_json_lines_logs_read_like_csv(tmp_path, cli):
    from marchkit.faults import SAF

    test = resolve_test("March C-")
    mem = make_memory(words=32, bits=4)
    tr = Tracer(test, mem)
    lines = [c for c in tr.compares(Instance(SAF[0], (4 * 9 + 3,)), (1,)) if c.definite]
    f = tmp_path / "fails.jsonl"
    f.write_text("".join(json.dumps({"cycle": c.cycle, "address": f"{c.address:02x}", "expected": f"{c.expected:x}",
                                     "observed": f"{c.observed:x}"}) + "\n" for c in lines))
    g = tmp_path / "fails.csv"
    g.write_text(fail_log_csv(lines, mem))
    outs = []
    for path in (f, g):
        code, out, err = cli("diagnose", "March C-", "--words", "32", "--bits", "4", "--fails", str(path), "--json",
                             "--no-hint")
        assert code == 0, err
        res = json.loads(out)
        res.pop("log")
        outs.append(res)
    assert outs[0] == outs[1]
    assert {"kind": "SA0", "cells": [[9, 3]]} in outs[0]["candidates"][0]["members"] + outs[0]["candidates"][1]["members"]


def test_equivalent_kinds_share_a_class():
    """SA1 and the primitive <0/1/-> are the same behaviour (van de Goor & Al-Ars, VTS 2000:
    SA1 = <0/1/->), so they are always in one class."""
    from marchkit.faults import SAF

    test = resolve_test("March C-")
    mem = make_memory(words=16, bits=1)
    tr = Tracer(test, mem)
    lines = [c for c in tr.compares(Instance(SAF[1], (3,)), (0,)) if c.definite]
    log = parse_fail_log(fail_log_csv(lines, mem), "x", 16, 1, CompareTable(test, mem))
    d = diagnose(test, mem, log, hint=False)
    c = [c for c in d.candidates if ("SA1", (3,)) in _members(c)][0]
    assert ("<0/1/->", (3,)) in _members(c)


@pytest.mark.parametrize("ext", ["png", "svg"])
def test_picture(tmp_path, cli, ext):
    from marchkit.faults import AF

    test = resolve_test("March C-")
    mem = make_memory(words=64, bits=4, mux=4)
    p = _log_for(tmp_path, test, mem, Instance(AF[2], (10, 11)))
    pic = tmp_path / f"bm.{ext}"
    code, out, err = cli("diagnose", "March C-", "--words", "64", "--bits", "4", "--mux", "4", "--fails", str(p),
                         "--picture", str(pic), "--no-hint")
    assert code == 0, err
    data = pic.read_bytes()
    assert data.startswith(b"\x89PNG") if ext == "png" else b"<svg" in data
    code, _, err = cli("diagnose", "March C-", "--words", "64", "--bits", "4", "--mux", "4", "--fails", str(p),
                       "--picture", str(tmp_path / "bm.gif"))
    assert code == 2 and ".png or .svg" in err


def test_picture_axes_are_the_physical_array():
    from marchkit.report.bitmap import bitmap_figure

    mem = make_memory(words=64, bits=4, mux=4)
    bm = bitmap_from_cells(mem, [(10, 2)])
    fig = bitmap_figure(bm)
    ax = fig.axes[0]
    assert ax.get_xlim() == (-0.5, mem.columns - 0.5)
    assert ax.get_ylim() == (mem.rows - 0.5, -0.5)           # row 0 at the top
    row, col = mem.place(10, 2)
    offs = ax.collections[0].get_offsets()
    assert (offs[0][0], offs[0][1]) == (col, row)


# ---------------------------------------------------------------------------------------
# bitmap classes (the usual classes of failure analysis; common practice, no source)


def test_bitmap_classes_by_hand():
    mem = make_memory(words=64, bits=4, mux=4)          # 16 rows × 16 columns
    one = bitmap_from_cells(mem, [(5, 1)])
    assert one.kind == "single cell"
    word = bitmap_from_cells(mem, [(5, 0), (5, 1), (5, 3)])
    assert word.kind == "word"
    assert bitmap_from_rc(16, 16, [3, 9], [4, 12]).kind == "cell pair"
    assert "not adjacent" in bitmap_from_rc(16, 16, [3, 9], [4, 12]).detail
    assert "adjacent" in bitmap_from_rc(16, 16, [3, 4], [4, 5]).detail
    assert bitmap_from_rc(16, 16, [7] * 10, list(range(10))).kind == "row"
    assert bitmap_from_rc(16, 16, list(range(16)), [2] * 16).detail.endswith("(the whole column)")
    assert bitmap_from_rc(16, 16, [4, 4, 5, 5, 6], [4, 5, 4, 6, 5]).kind == "cluster"
    rng = np.random.default_rng(1)
    r, c = rng.integers(0, 16, 120), rng.integers(0, 16, 120)
    assert bitmap_from_rc(16, 16, r, c).kind == "whole array"
    multi = bitmap_from_rc(16, 16, [7] * 16 + [1, 12], list(range(16)) + [1, 3])
    assert multi.kind == "multiple" and [p.kind for p in multi.parts] == ["row", "single cell", "single cell"]


def test_bitmap_places_cells_through_the_mux_and_scrambling():
    """DEVELOPERS.md placement: bit b of physical word p sits in row p // mux, column b·mux + p % mux."""
    mem = make_memory(words=32, bits=4, mux=4, scramble_xor=3)
    bm = bitmap_from_cells(mem, [(6, 2)])
    p = 6 ^ 3
    assert (int(bm.r[0]), int(bm.c[0])) == (p // 4, 2 * 4 + p % 4)


def test_many_failing_words_say_no_single_fault_explains(tmp_path):
    test = resolve_test("MATS+")
    mem = make_memory(words=16, bits=1)
    ct = CompareTable(test, mem)
    plan = Plan(test, mem)
    lines = [LogLine(v.cycle, v.address, v.expect, v.expect ^ 1) for v in plan.vectors()
             if v.mask and v.element == 1]
    log = parse_fail_log(fail_log_csv(lines, mem), "x", 16, 1, ct)
    d = diagnose(test, mem, log, hint=False)
    assert any("no single candidate can explain" in n for n in d.notes)
    assert d.bitmap.kind == "column"             # 16 words × 1 bit, mux 1: one column
    assert d.candidates[0].mismatches > 0


def test_the_shipped_example_log(cli, monkeypatch):
    """examples/kestrel_die12_fails.csv is the log of an idempotent coupling fault
    CFid<↑;1> (aggressor w614.b9, victim w613.b9: physical neighbours, one row apart) under
    March C- on the example memory; the README's command must name it in the exact class."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    monkeypatch.chdir(root)
    code, out, err = cli("diagnose", "March C-", "--memory", "examples/kestrel_l1_sram.toml",
                         "--fails", "examples/kestrel_die12_fails.csv", "--json", "--no-hint")
    assert code == 0, err
    res = json.loads(out)
    first = res["candidates"][0]
    assert first["mismatches"] == 0 and first["rank"] == 1
    assert {"kind": "CFid<↑;1>", "cells": [[614, 9], [613, 9]]} in first["members"]
    assert res["resolution"]["classes_left"] == 1
    code, out, err = cli("repair", "--bitmap", "examples/kestrel_die31_bitmap.csv", "--rows", "256", "--cols", "64",
                         "--spare-rows", "4", "--spare-cols", "4", "--json")
    assert code == 0 and json.loads(out)["repairable"]


@pytest.mark.parametrize("scope", ["sample:400:9", "word", "neighbours,word"])
def test_other_pair_scopes_find_the_injected_pair(scope):
    """Aggressors and decoder partners come from the same pair scope as in grading."""
    rng = random.Random(scope)
    test = resolve_test("March SS")
    mem = make_memory(words=16, bits=4, mux=2)
    kinds = [k for k in all_kinds() if k.arity == 2 and not k.cls.startswith("LF") and (k.family == "rules" or "sample" in scope)]
    done = 0
    for _ in range(200):
        kind = rng.choice(kinds)
        if kind.family == "af":
            a, b = word_pairs(mem, parse_pairs(scope))
        else:
            a, b = cell_pairs(mem, parse_pairs(scope))
        i = rng.randrange(a.size)
        inst = Instance(kind, (int(a[i]), int(b[i])))
        from marchkit.engine.core import n_init_cells

        inits = tuple(rng.randrange(2) for _ in range(n_init_cells(kind)))
        lines = generate_log(test, mem, inst, inits, rng)
        if not lines:
            continue
        log = parse_fail_log(fail_log_csv(lines, mem), "x", mem.words, mem.bits, CompareTable(test, mem))
        d = diagnose(test, mem, log, "static,classic,dynamic,retention", scope, hint=False)
        mine = [c for c in d.candidates if (kind.text, inst.sites) in _members(c)]
        assert len(mine) == 1 and mine[0].rank == 1 and mine[0].mismatches == 0, inst.text(mem)
        done += 1
        if done == 12:
            break
    assert done == 12


def test_icarus_log_from_the_exported_stuck_at_testbench(tmp_path, cli, monkeypatch):
    """`marchkit export --format hex --stuck-at W:B:V` writes a testbench whose SRAM model has
    that cell stuck by default; its +all_failures report, turned into a fail log, diagnoses
    as that stuck-at cell (exact match, rank 1)."""
    monkeypatch.chdir(tmp_path)
    code, out, err = cli("export", "March C-", "--words", "32", "--bits", "4", "--mux", "2", "--format", "hex",
                         "-o", "pattern.hex", "--stuck-at", "19:2:1")
    assert code == 0, err
    vvp = compile_tb(tmp_path)
    code, out = run_vvp(vvp, tmp_path, "+all_failures")
    assert code != 0 and "stuck-at-1 cell: address 13 bit 2" in out, out       # word 19 in hex
    m = make_memory(words=32, bits=4, mux=2)
    lines = _icarus_log(out, m.bits)
    (tmp_path / "fails.csv").write_text(fail_log_csv(lines, m))
    code, text, err = cli("diagnose", "March C-", "--words", "32", "--bits", "4", "--mux", "2",
                          "--fails", "fails.csv", "--json", "--no-hint")
    assert code == 0, err
    res = json.loads(text)
    first = [c for c in res["candidates"] if c["rank"] == 1]
    assert all(c["mismatches"] == 0 for c in first)
    assert any({"kind": "SA1", "cells": [[19, 2]]} in c["members"] for c in first)
    assert res["bitmap"]["class"] == "single cell"
