"""The grader against published claims, through the library API and `marchkit grade --json`."""

import json
from fractions import Fraction

import pytest

from marchkit.faults import STATIC
from marchkit.grade import grade
from marchkit.model import make_memory
from marchkit.notation import find_in_library, parse_notation


def classes(res):
    return {c.cls: c for c in res.classes}


def grade_json(cli, *argv):
    code, out, err = cli("grade", *argv, "--json")
    assert code == 0, err
    return json.loads(out)


def test_march_ss_detects_all_48_static_primitives(cli):
    # Hamdioui, van de Goor, Rodgers, "March SS: a test for all static simple RAM faults",
    # MTDT 2002 (abstract: 22n, detects all static simple faults).
    data = grade_json(cli, "March SS", "--words", "16", "--faults", "static", "--pairs", "all")
    assert data["test"]["ops_per_cell"] == 22
    assert len(data["primitives"]) == 48
    for p in data["primitives"]:
        assert p["detected"] == p["instances"] > 0, p
    assert data["total"]["coverage"] == 1.0
    # all pairs of n cells: 36·n·(n−1) two-cell instances plus 12·n single-cell ones (issue 3)
    assert data["total"]["instances"] == 36 * 16 * 15 + 12 * 16


def test_intra_word_state_coupling_needs_the_word_backgrounds():
    # Intra-word state coupling <x;y/ȳ/-> needs the two bits of a word at different values,
    # which a solid background never gives; the ⌈log2 B⌉+1 intra-word backgrounds set every
    # pair of bits apart (van de Goor & Tlili, IEEE Trans. Computers 52(10), 2003; rule from
    # memory).  Only the pairs with equal values (half of them) are sensitised by solid data.
    t = find_in_library("March SS")
    word = grade(t, make_memory(8, 4, backgrounds="word"), "CFst", "word")
    solid = grade(t, make_memory(8, 4), "CFst", "word")
    assert word.total.coverage == 1.0
    assert solid.total.coverage == 0.5
    # A word write toggles every bit with the background or none: an aggressor transition
    # with a non-transition write on the victim in the same word only happens between two
    # background runs, so intra-word CFds <0w1;1/0/-> stays mostly undetected (derived).
    ds = grade(t, make_memory(8, 4, backgrounds="word"), "<0w1;1/0/->", "word")
    assert ds.total.coverage < 0.5


def test_march_c_minus_published_classes(cli):
    # van de Goor, Testing Semiconductor Memories, 1991; "Using march tests to test SRAMs",
    # IEEE D&T 1993: March C- detects SAF, TF, AF, CFin, CFid and CFst (unlinked).
    data = grade_json(cli, "March C-", "--words", "16", "--faults", "SAF,TF,AF,CFin,CFid,CFst", "--pairs", "all")
    got = {c["class"]: c for c in data["classes"]}
    assert set(got) == {"SAF", "TF", "AF", "CFin", "CFid", "CFst"}
    for c in got.values():
        assert c["detected"] == c["instances"] > 0, c


def test_mats_plus_detects_saf_and_af(cli):
    # Abadir & Reghbati, "Functional testing of semiconductor random access memories",
    # ACM Computing Surveys 15(3), 1983: MATS+ detects all stuck-at and address-decoder faults.
    data = grade_json(cli, "MATS+", "--words", "32", "--faults", "SAF,AF", "--pairs", "all")
    for c in data["classes"]:
        assert c["coverage"] == 1.0, c


def test_march_c_minus_misses_wdf_and_drdf():
    # Derived from the primitive definitions (van de Goor & Al-Ars, VTS 2000): March C- has no
    # non-transition write and no two reads in a row, so WDF <0w0/1/-> and DRDF <0r0/1/0> are
    # never both sensitised and observed.
    res = grade(find_in_library("March C-"), make_memory(16), "WDF,DRDF", "all")
    c = classes(res)
    assert c["WDF"].detected == 0 and c["DRDF"].detected == 0
    assert "non-transition" in c["WDF"].reason and "two reads" in c["DRDF"].reason


def test_mats_plus_misses_some_transition_faults():
    # MATS+ reads the 1 written by ⇑(r0,w1) but never reads a 0 written over a 1 before it
    # is rewritten... the down transition is caught, the up one too; TF is covered, but
    # MATS+ is known not to cover all coupling faults (van de Goor 1991): check CFid < 100 %.
    res = grade(find_in_library("MATS+"), make_memory(16), "CFid", "all")
    assert 0 < res.total.coverage < 1


def test_published_ordering_on_static():
    # MATS+ < March C- < March SS on static faults (van de Goor 1991; Hamdioui et al. 2002)
    mem = make_memory(32)
    cov = [grade(find_in_library(n), mem, "static", "all").total.coverage for n in ("MATS+", "March C-", "March SS")]
    assert cov[0] < cov[1] < cov[2] == 1.0


@pytest.mark.parametrize("tau_ms,caught", [(5, True), (100, False)])
def test_retention_caught_only_by_a_long_enough_pause(tau_ms, caught):
    # A DRAM-like scenario: cells must be refreshed within tens of ms (common practice, no
    # source).  A 20 ms pause catches a cell that leaks in 5 ms, not one that holds 100 ms.
    t = parse_notation("{⇕(w0); Del(20ms); ⇕(r0,w1); Del(20ms); ⇕(r1)}", name="retention check")
    mem = make_memory(64, clock="100MHz")
    res = grade(t, mem, "DRF", "neighbours", retention=[Fraction(tau_ms, 1000)])
    assert (res.total.coverage == 1.0) is caught
    if not caught:
        assert res.total.detected == 0


def test_retention_depends_on_place_in_the_order_and_clock():
    # without a delay, the gap between two accesses of a cell is the time the element takes
    # for the other addresses; at a slow clock the cells far from the turn-around leak.
    t = parse_notation("{⇑(w0); ⇑(r0,w1); ⇓(r1)}")
    fast = grade(t, make_memory(1024, clock="100MHz"), "DRF", retention=[Fraction(1, 10**5)])
    slow = grade(t, make_memory(1024, clock="10MHz"), "DRF", retention=[Fraction(1, 10**5)])
    assert fast.total.detected < slow.total.detected < slow.total.instances
    # Hand count (one cycle per operation, n = 1024): ⇑(w0) writes position p at cycle p;
    # ⇑(r0,w1) reads it at n+2p and writes 1 at n+2p+1; ⇓(r1) reads it at 3n+(n−1−p).
    # DRF0 waits n+p cycles (≥ n), DRF1 waits 3n−2−3p cycles.
    # 10 µs = 100 cycles at 10 MHz: DRF0 all 1024, DRF1 for p ≤ 990 → 991.
    # 10 µs = 1000 cycles at 100 MHz: DRF0 all 1024, DRF1 for p ≤ 690 → 691.
    assert classes(slow)["DRF"].detected == 1024 + 991
    assert classes(fast)["DRF"].detected == 1024 + 691


def test_counts_json_shape(cli):
    data = grade_json(cli, "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}", "--words", "8", "--bits", "2", "--faults", "all", "--pairs", "all")
    assert set(data) == {"test", "memory", "ops", "cycles", "seconds", "classes", "primitives", "total",
                         "score", "provenance"}
    assert set(data["test"]) == {"name", "notation", "ops_per_cell"}
    assert data["memory"]["words"] == 8 and data["memory"]["bits"] == 2
    assert data["ops"] == 5 * 8 and data["cycles"] == 40
    assert data["seconds"] == pytest.approx(40 / 100e6)
    for c in data["classes"]:
        assert set(c) == {"class", "instances", "detected", "coverage"} and 0 <= c["coverage"] <= 1
    assert sum(c["instances"] for c in data["classes"]) == data["total"]["instances"]


def test_reference_engine_gives_the_same_grade(cli):
    # the older families; the linked, two-cell dynamic and NPSF kinds (a thousand more) are
    # compared instance by instance in tests/test_engine.py and tests/test_faults2.py
    sel = "static,classic,retention,dRDF,dDRDF,dIRF,dTF,dWDF"
    a = grade_json(cli, "March LR", "--words", "5", "--bits", "2", "--faults", sel, "--pairs", "all",
                   "--backgrounds", "solid,checkerboard")
    b = grade_json(cli, "March LR", "--words", "5", "--bits", "2", "--faults", sel, "--pairs", "all",
                   "--backgrounds", "solid,checkerboard", "--engine", "reference")
    assert a.pop("provenance")["engine"] == "fast" and b.pop("provenance")["engine"] == "reference"
    assert a == b


def test_primitive_rows_cover_every_static_primitive():
    res = grade(find_in_library("March C-"), make_memory(8), "static", "all")
    assert [p.fault for p in res.primitives] == [k.text for k in STATIC]


def test_reference_and_fast_agree_on_every_class_row_field():
    # first/complete-by elements and reasons too, not only the counts
    mem = make_memory(5, 2, order="gray", backgrounds="solid,checkerboard")
    sel = "static,classic,retention,dRDF,dDRDF,dIRF,dTF,dWDF"   # the reference is slow on the rest
    for name in ("MATS++", "March C-", "IFA-9", "PMOVI"):
        t = find_in_library(name)
        a = grade(t, mem, sel, "all")
        b = grade(t, mem, sel, "all", engine="reference")
        assert a.classes == b.classes and a.primitives == b.primitives, name
        for c in a.classes:
            if c.detected:
                assert c.first_by is not None and c.first_by <= c.complete_by


def test_every_library_test_catches_the_classes_it_targets():
    # Each library entry lists the fault classes its paper says it targets (partly from
    # memory, see each entry's note); the grader must find them fully detected on a
    # bit-oriented array with all pairs.  A failure here means a wrong notation or target.
    from marchkit.faults import STATIC_CLASSES
    from marchkit.notation import library

    mem = make_memory(12)
    for t in library():
        res = grade(t, mem, "all", "all", retention=[Fraction(1, 1000)])
        cov = {c.cls: c.coverage for c in res.classes}
        wanted = [x for x in t.targets if x in cov]
        if "static" in t.targets:
            wanted += list(STATIC_CLASSES)
        missed = {x: cov[x] for x in wanted if cov[x] < 1}
        assert not missed, (t.name, missed)


def test_forked_workers_give_the_same_counts_as_one_process():
    from marchkit.engine.fast import Engine
    from marchkit.faults import parse_pairs, select_faults

    t = find_in_library("March C-")
    mem = make_memory(16384, 16, mux=4, backgrounds="solid,checkerboard")   # 2^18 cells
    sel = select_faults("static,SOF,AF,DRF", retention=[Fraction(1, 10**5)])
    scope = parse_pairs("neighbours")
    one = Engine(t, mem).grade(sel, scope, workers=1)
    two = Engine(t, mem).grade(sel, scope, workers=2)
    assert [(r.kind.text, r.instances, r.detected, r.complete_by, r.first_by, r.missed_structures) for r in one] == \
           [(r.kind.text, r.instances, r.detected, r.complete_by, r.first_by, r.missed_structures) for r in two]


@pytest.mark.parametrize("pairs", ["all", "neighbours", "word", "sample:40:3"])
def test_named_missed_instances_are_really_missed(pairs):
    # every instance the grader names as undetected is undetected by the literal reference
    from marchkit.engine.reference import reference_verdicts

    t = find_in_library("March C-")
    mem = make_memory(6, 2, order="gray", backgrounds="solid,checkerboard")
    res = grade(t, mem, "all", pairs, examples=3)
    named = [inst for r in res.kinds for inst in r.missed_examples]
    assert named and all(len(r.missed_examples) <= 3 for r in res.kinds)
    for r in res.kinds:
        if r.detected < r.instances:
            assert r.missed_examples, r.kind.text   # every kind with misses names at least one
    verdicts = reference_verdicts(t, mem, named)
    assert not any(d for d, _ in verdicts)


def test_grade_names_missed_instances_in_the_terminal(cli):
    code, out, err = cli("grade", "March C-", "--words", "8", "--faults", "WDF", "--missed", "1")
    assert code == 0 and "some undetected instances" in out and "<0w0/1/-> cell word " in out


def test_too_many_neighbour_pairs_is_refused_clearly():
    from marchkit.errors import EngineLimitError
    from marchkit.faults import cell_pairs, parse_pairs, word_pairs

    mem = make_memory(1 << 23)
    for fn in (cell_pairs, word_pairs):
        with pytest.raises(EngineLimitError, match="neighbour pairs") as e:
            fn(mem, parse_pairs("neighbours"))
        assert e.value.exit_code == 2


def test_many_background_runs_stay_exact():
    # 13 background runs: the per-cell background patterns are numbered, not packed into 2^R
    bg = ",".join(["solid", "checkerboard", "rows", "columns"] + [hex(i) for i in range(1, 10)])
    mem = make_memory(4, 4, backgrounds=bg)
    for name, faults in (("March C-", "CFst,CFds,AF"), ("March C+", "SF,TF,SOF,CFtr")):
        a = grade(find_in_library(name), mem, faults, "all")
        b = grade(find_in_library(name), mem, faults, "all", engine="reference")
        assert a.classes == b.classes and a.primitives == b.primitives


def test_dynamic_read_faults_need_back_to_back_operations():
    # March RAW targets read-after-write dynamic faults (Hamdioui, Al-Ars, van de Goor, VTS 2002;
    # from memory): its w-then-r and r-then-r pairs catch every dRDF and dIRF.  March C-'s
    # elements are (r,w) pairs with no read second, so it catches none (derived from the
    # definitions).
    mem = make_memory(8)
    raw = classes(grade(find_in_library("March RAW"), mem, "dRDF,dIRF", "all"))
    assert raw["dRDF"].coverage == 1.0 and raw["dIRF"].coverage == 1.0
    # March C- has no read second inside an element; only where ⇑(r1,w0) ends on the last
    # address and ⇓(r0,w1) starts there are w0 and r0 back to back: <1w0r0/1/1> and
    # <1w0r0/0/1> on that one cell, nothing else (derived from the definitions)
    cm = classes(grade(find_in_library("March C-"), mem, "dRDF,dIRF", "all"))
    assert cm["dRDF"].detected == 1 and cm["dIRF"].detected == 1
    # the pair must be adjacent inside one visit: {⇕(w0); ⇑(w1); ⇑(r1)} puts a whole element
    # between w1 and r1 of a cell, so <0w1r1/0/0> is missed; ⇑(w1,r1) catches it
    apart = grade(parse_notation("{⇕(w0); ⇑(w1); ⇑(r1)}"), mem, "<0w1r1/0/0>", "all")
    together = grade(parse_notation("{⇕(w0); ⇑(w1,r1)}"), mem, "<0w1r1/0/0>", "all")
    assert apart.total.detected == 0 and together.total.coverage == 1.0


def test_arrays_too_large_for_the_engine_are_refused_before_work(cli):
    # 2^26 words of 1024 bits: refused from the sizes alone (exit 2, a clear message naming the limit)
    code, out, err = cli("grade", "March SS", "--words", str(1 << 26), "--bits", "1024")
    assert code == 2 and "GiB of arrays" in err and "Traceback" not in err


def test_64_mbit_neighbour_counts_need_no_pair_list():
    # the neighbour pairs of a 2^20 x 64 array (more than the 48 M pairs a list may hold) are
    # counted on the grid: closed form 2·(R−1)·C + 2·R·(C−1) + 4·(R−1)·(C−1) ordered pairs for an
    # R × C grid with 8 neighbours (common practice, no source)
    from marchkit.faults import cell_pair_count, parse_pairs

    mem = make_memory(1 << 20, 64)
    R, C = mem.rows, mem.columns
    assert cell_pair_count(mem, parse_pairs("neighbours")) == 2 * (R - 1) * C + 2 * R * (C - 1) + 4 * (R - 1) * (C - 1)
