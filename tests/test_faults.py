"""Tests for the fault catalogue: the static fault primitives, the classic models, fault
selections, pair scopes and instance counts.

Each check against something outside the project names its source in a comment; facts of
the trade are marked "common practice, no source", values recalled are marked "from memory".
"""

from __future__ import annotations

import itertools
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from marchkit.errors import FaultSpecError
from marchkit.faults import NPSF_CLASSES
from marchkit.faults import (
    AF,
    CFID,
    CFIN,
    CFST,
    COUPLING_CLASSES,
    DEFAULT_RETENTION,
    SAF,
    SINGLE_CLASSES,
    SOF,
    STATIC,
    STATIC_CLASSES,
    TF,
    Cond,
    Rule,
    all_kinds,
    cell_pairs,
    drf_kinds,
    enumerate_instances,
    format_seconds,
    instance_count,
    parse_pairs,
    parse_rule,
    primitive,
    select_faults,
    word_pairs,
)
from marchkit.model import make_memory, neighbour_edges

PROPERTY = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# The static fault primitives of one and two cells, with their classes, as listed by
# A. J. van de Goor and Z. Al-Ars, "Functional memory faults: a formal notation and a
# taxonomy", VTS 2000 (the same list is the target set of S. Hamdioui, A. J. van de Goor,
# M. Rodgers, "March SS: a test for all static simple RAM faults", MTDT 2002).
# Written out here from memory of those papers' tables, in their ASCII form.
PUBLISHED = {
    "SF": ["<0/1/->", "<1/0/->"],
    "TF": ["<0w1/0/->", "<1w0/1/->"],
    "WDF": ["<0w0/1/->", "<1w1/0/->"],
    "RDF": ["<0r0/1/1>", "<1r1/0/0>"],
    "DRDF": ["<0r0/1/0>", "<1r1/0/1>"],
    "IRF": ["<0r0/0/1>", "<1r1/1/0>"],
    "CFst": ["<0;0/1/->", "<0;1/0/->", "<1;0/1/->", "<1;1/0/->"],
    "CFds": ["<0w0;0/1/->", "<0w0;1/0/->", "<0w1;0/1/->", "<0w1;1/0/->",
             "<1w0;0/1/->", "<1w0;1/0/->", "<1w1;0/1/->", "<1w1;1/0/->",
             "<0r0;0/1/->", "<0r0;1/0/->", "<1r1;0/1/->", "<1r1;1/0/->"],
    "CFtr": ["<0;0w1/0/->", "<0;1w0/1/->", "<1;0w1/0/->", "<1;1w0/1/->"],
    "CFwd": ["<0;0w0/1/->", "<0;1w1/0/->", "<1;0w0/1/->", "<1;1w1/0/->"],
    "CFrd": ["<0;0r0/1/1>", "<0;1r1/0/0>", "<1;0r0/1/1>", "<1;1r1/0/0>"],
    "CFdrd": ["<0;0r0/1/0>", "<0;1r1/0/1>", "<1;0r0/1/0>", "<1;1r1/0/1>"],
    "CFir": ["<0;0r0/0/1>", "<0;1r1/1/0>", "<1;0r0/0/1>", "<1;1r1/1/0>"],
}
PUBLISHED_TEXTS = [t for texts in PUBLISHED.values() for t in texts]


# ---- the static primitives ------------------------------------------------------------

def test_48_static_primitives():
    # 12 single-cell + 36 two-cell static primitives (van de Goor & Al-Ars, VTS 2000)
    assert len(STATIC) == 48
    assert sum(k.arity == 1 for k in STATIC) == 12
    assert sum(k.arity == 2 for k in STATIC) == 36
    assert len({k.text for k in STATIC}) == 48


def test_class_sizes():
    # SF 2, TF 2, WDF 2, RDF 2, DRDF 2, IRF 2; CFst 4, CFds 12, CFtr 4, CFwd 4, CFrd 4,
    # CFdrd 4, CFir 4 (van de Goor & Al-Ars, VTS 2000)
    want = {"SF": 2, "TF": 2, "WDF": 2, "RDF": 2, "DRDF": 2, "IRF": 2,
            "CFst": 4, "CFds": 12, "CFtr": 4, "CFwd": 4, "CFrd": 4, "CFdrd": 4, "CFir": 4}
    got = {c: sum(k.cls == c for k in STATIC) for c in STATIC_CLASSES}
    assert got == want
    assert set(SINGLE_CLASSES) == {"SF", "TF", "WDF", "RDF", "DRDF", "IRF"}
    assert set(COUPLING_CLASSES) == {"CFst", "CFds", "CFtr", "CFwd", "CFrd", "CFdrd", "CFir"}


def test_canonical_texts_as_published():
    # canonical text and class of every primitive (van de Goor & Al-Ars, VTS 2000)
    got = {k.text: k.cls for k in STATIC}
    want = {t: c for c, texts in PUBLISHED.items() for t in texts}
    assert got == want
    for t in ("<0w1/0/->", "<0r0/1/0>", "<1;0w1/0/->", "<0w0;1/0/->"):   # quoted in issue 3
        assert t in got
    for k in STATIC:
        assert k.text.isascii() and " " not in k.text
        assert k.is_primitive and k.family == "rules" and len(k.rules) == 1
        assert str(k) == k.text


@pytest.mark.parametrize("text", PUBLISHED_TEXTS)
def test_parse_rule_round_trips(text):
    rule = parse_rule(text)
    assert rule.text == text
    assert parse_rule(rule.text) == rule
    assert primitive(text) is next(k for k in STATIC if k.text == text)
    # the fields mean what the <S/F/R> notation says (van de Goor & Al-Ars, VTS 2000)
    s, f, r = text[1:-1].split("/")
    assert rule.f == int(f)
    assert rule.r == (None if r == "-" else int(r))
    assert (rule.agg is None) == (";" not in s)
    assert rule.vic.text == s.split(";")[-1]


def test_parse_rule_tolerates_blanks():
    assert parse_rule("  < 1 ; 0w1 / 0 / - > ").text == "<1;0w1/0/->"
    assert parse_rule("<1;0w1/0/->") == Rule(Cond(0, "w", 1), 0, None, Cond(1))


@pytest.mark.parametrize(
    "text",
    [
        "0w1/0/-",            # no brackets
        "<0w1/0/-",           # unclosed
        "<>",
        "<2/0/->",            # not a binary value
        "<0w2/0/->",
        "<0x1/0/->",          # unknown operation
        "<0W1/0/->",          # operations are lower case
        "<0w1/0>",            # R missing
        "<0w1/0/-/->",
        "<0w1/0/1>",          # R given although the victim is not read
        "<0r0/1/->",          # victim read but no R
        "<0r1/0/0>",          # a read of a 0 cell is 0r0
        "<1;0r1/0/0>",
        "<0w1;1w0/1/->",      # two operations: not static
        "<0r0;1r1/0/0>",
        "<0;1;0w1/0/->",      # three cells
        "<0/1/2>",
        "<0/0/->",            # the fault-free behaviour: no fault at all
        "<0w1/1/->",
        "<0r0/0/0>",
        "<1;0w0/0/->",
        "<0w1;1/1/->",
        "",
    ],
)
def test_parse_rule_rejects_malformed(text):
    with pytest.raises(FaultSpecError):
        parse_rule(text)


def _all_texts():
    """Every text the <S/F/R> grammar allows for one or two cells, sense or nonsense."""
    conds = ["0", "1"] + [f"{a}{op}{b}" for a in "01" for op in "wr" for b in "01"]
    tails = [f"/{f}/{r}>" for f in "01" for r in "01-"]
    for v in conds:
        for t in tails:
            yield f"<{v}{t}"
            for a in conds:
                yield f"<{a};{v}{t}"


def test_the_48_are_all_static_primitives():
    # the taxonomy is complete: with at most one operation, every deviation of one or two
    # cells from fault-free behaviour is one of the 12 + 36 (van de Goor & Al-Ars, VTS 2000)
    accepted = set()
    for text in _all_texts():
        try:
            accepted.add(parse_rule(text).text)
        except FaultSpecError:
            pass
    assert accepted == set(PUBLISHED_TEXTS)


# ---- the classic models ----------------------------------------------------------------

def test_classic_models():
    # SAF (2), TF (2), SOF, four address-decoder fault types, CFin (2: up and down
    # transitions), CFid (4), CFst (4) (van de Goor, Testing Semiconductor Memories, 1991;
    # from memory)
    assert [k.text for k in SAF] == ["SA0", "SA1"]
    assert [r.text for k in SAF for r in k.rules] == ["<1/0/->", "<0/1/->"]
    assert {k.text for k in TF} == {"<0w1/0/->", "<1w0/1/->"}
    assert len(SOF) == 1 and SOF[0].family == "sof"
    assert len(AF) == 4 and len({k.af for k in AF}) == 4
    assert len(CFIN) == 2 and len(CFID) == 4 and len(CFST) == 4
    # CFin: an aggressor transition inverts the victim, whatever it holds (from memory)
    assert {r.text for r in CFIN[0].rules} == {"<0w1;0/1/->", "<0w1;1/0/->"}
    assert {r.text for r in CFIN[1].rules} == {"<1w0;0/1/->", "<1w0;1/0/->"}
    # CFid <↑;0>: an up transition of the aggressor forces the victim to 0 (from memory)
    idem = {k.text: k.rules[0].text for k in CFID}
    assert idem == {"CFid<↑;0>": "<0w1;1/0/->", "CFid<↑;1>": "<0w1;0/1/->",
                    "CFid<↓;0>": "<1w0;1/0/->", "CFid<↓;1>": "<1w0;0/1/->"}
    for k in SAF + SOF + AF + CFIN + CFID:
        assert not k.is_primitive


def test_retention_kinds_and_times():
    d = drf_kinds([Fraction(64, 1000)])
    assert [k.text for k in d] == ["DRF0(τ=64ms)", "DRF1(τ=64ms)"]
    assert [k.drf_value for k in d] == [0, 1] and all(k.tau == Fraction(64, 1000) for k in d)
    assert format_seconds(Fraction(3, 2)) == "1.5s"
    assert format_seconds(Fraction(1, 10**6)) == "1us"
    assert format_seconds(Fraction(250, 10**9)) == "250ns"
    assert format_seconds(Fraction(2)) == "2s"


# ---- selections ------------------------------------------------------------------------

def _texts(spec, **kw):
    return [k.text for k in select_faults(spec, **kw).kinds]


def test_select_sets():
    assert _texts("static") == [k.text for k in STATIC]
    classic = select_faults("classic")
    assert set(classic.classes) == {"SAF", "TF", "SOF", "AF", "CFin", "CFid", "CFst"}
    assert len(classic.kinds) == 2 + 2 + 1 + 4 + 2 + 4 + 4
    assert _texts("retention") == ["DRF0(τ=1ms)", "DRF1(τ=1ms)"]
    assert DEFAULT_RETENTION == (Fraction(1, 1000),)
    everything = select_faults("all")
    # + the 30 single-cell dynamic primitives (Al-Ars 2005, counted in Di Carlo & Prinetto 2010)
    # + the 96 two-cell ones (192 with both orientations; Al-Ars & van de Goor, from memory)
    # + 876 linked kinds (derived in marchkit.faults.linked) + 192 type-1 NPSF kinds
    assert len(everything.kinds) == 48 + 2 + 1 + 4 + 2 + 4 + 2 + 30 + 96 + 876 + 192
    assert len(set(_texts("all"))) == len(everything.kinds)
    assert [k.text for k in all_kinds()] == _texts("all")


def test_select_dedupes():
    both = _texts("static,classic")
    assert len(both) == len(set(both))
    # TF and CFst are in both sets, counted once
    assert len(both) == 48 + 2 + 1 + 4 + 2 + 4
    assert sum(t in {"<0w1/0/->", "<1w0/1/->"} for t in both) == 2
    assert _texts("SAF,SAF,saf") == ["SA0", "SA1"]
    assert _texts("TF,<0w1/0/->") == ["<0w1/0/->", "<1w0/1/->"]


@pytest.mark.parametrize("name, n", [("SF", 2), ("TF", 2), ("WDF", 2), ("RDF", 2), ("DRDF", 2),
                                     ("IRF", 2), ("CFst", 4), ("CFds", 12), ("CFtr", 4),
                                     ("CFwd", 4), ("CFrd", 4), ("CFdrd", 4), ("CFir", 4),
                                     ("SAF", 2), ("SOF", 1), ("AF", 4), ("CFin", 2),
                                     ("CFid", 4), ("DRF", 2)])
def test_select_class_names(name, n):
    sel = select_faults(name)
    assert len(sel.kinds) == n and sel.classes == (name,)
    assert _texts(name.upper()) == _texts(name.lower()) == _texts(name)


def test_select_kinds_primitives_and_case():
    assert _texts("sa0") == ["SA0"]
    assert _texts("AF:ALIAS") == ["AF:alias"]
    assert _texts("cfin<↑;↕>") == ["CFin<↑;↕>"]
    assert _texts("drf1(τ=1ms)") == ["DRF1(τ=1ms)"]
    assert _texts("STATIC") == _texts("Static") == _texts("static")
    assert _texts("Classic,Retention") == _texts("classic,retention")
    # primitive texts and a comma list mixing everything
    assert _texts("<1;0w1/0/->") == ["<1;0w1/0/->"]
    assert select_faults("<1;0w1/0/->").kinds[0] is primitive("<1;0w1/0/->")
    mixed = _texts(" SAF , <0r0/1/0>,AF:multi, retention ")
    assert mixed == ["SA0", "SA1", "<0r0/1/0>", "AF:multi", "DRF0(τ=1ms)", "DRF1(τ=1ms)"]
    assert _texts("retention", retention=["0.064", Fraction(1, 100)]) == [
        "DRF0(τ=64ms)", "DRF1(τ=64ms)", "DRF0(τ=10ms)", "DRF1(τ=10ms)"]


@pytest.mark.parametrize("spec", ["bogus", "SAF,bogus", "", ",", " , ", "CFxx", "<0w2/0/->",
                                  "<0w1/1/->", "static;classic", "SA2"])
def test_select_errors(spec):
    with pytest.raises(FaultSpecError) as info:
        select_faults(spec)
    assert info.value.exit_code == 2


def test_select_error_message_lists_choices():
    with pytest.raises(FaultSpecError) as info:
        select_faults("SAF,wobble")
    msg = info.value.message
    assert "'wobble'" in msg
    for word in ("static", "classic", "retention", "all", "CFds", "SOF", "AF:alias", "<0w1/0/->"):
        assert word in msg


# ---- pair scopes ------------------------------------------------------------------------

def test_parse_pairs():
    assert parse_pairs("all").parts == (("all",),) and parse_pairs("all").is_all
    assert parse_pairs("neighbours").parts == (("neighbours",),)
    assert parse_pairs("Neighbors").parts == (("neighbours",),)
    assert parse_pairs("WORD").parts == (("word",),)
    assert parse_pairs("sample:10").parts == (("sample", 10, 1),)
    assert parse_pairs("sample:10:7").parts == (("sample", 10, 7),)
    u = parse_pairs("neighbours, word,neighbors,sample:5")
    assert u.parts == (("neighbours",), ("word",), ("sample", 5, 1))
    assert not u.is_all
    assert parse_pairs("word,all").is_all


@pytest.mark.parametrize("spec", ["", " , ", "rows", "sample", "sample:", "sample:0", "sample:-3",
                                  "sample:x", "sample:3:x", "sample:3:4:5", "pairs:all"])
def test_parse_pairs_errors(spec):
    with pytest.raises(FaultSpecError):
        parse_pairs(spec)


# ---- instance counts --------------------------------------------------------------------

TWO_CELL = [k for k in STATIC if k.arity == 2]
ONE_CELL = [k for k in STATIC if k.arity == 1]


@pytest.mark.parametrize("words, bits", [(2, 1), (8, 1), (16, 4), (64, 1), (1024, 8)])
def test_all_pairs_count(words, bits):
    mem = make_memory(words, bits)
    n = mem.cells
    scope = parse_pairs("all")
    # all ordered pairs of n cells: 36 n (n - 1) two-cell static instances (issue 3;
    # n(n-1) ordered pairs is elementary combinatorics)
    assert sum(instance_count(k, mem, scope) for k in TWO_CELL) == 36 * n * (n - 1)
    assert sum(instance_count(k, mem, scope) for k in ONE_CELL) == 12 * n
    assert instance_count(SAF[0], mem, scope) == n
    # AF: one-address kind per word, two-address kinds per ordered pair of words
    by_af = {k.af: instance_count(k, mem, scope) for k in AF}
    assert by_af == {"none": words, "alias": words * (words - 1),
                     "multi": words * (words - 1), "cross": words * (words - 1)}


@pytest.mark.parametrize("words, bits, mux", [(4, 4, 1), (8, 8, 2), (16, 1, 1), (6, 3, 3)])
def test_word_scope_count(words, bits, mux):
    mem = make_memory(words, bits, mux=mux)
    scope = parse_pairs("word")
    # B(B-1) ordered bit pairs in each word (elementary combinatorics)
    for k in TWO_CELL + list(CFIN) + list(CFID):
        assert instance_count(k, mem, scope) == words * bits * (bits - 1)
    a, v = cell_pairs(mem, scope)
    assert np.all(a // bits == v // bits) and np.all(a != v)
    # no address-decoder pairs inside a word
    assert instance_count(AF[1], mem, scope) == 0
    assert instance_count(AF[0], mem, scope) == words


@pytest.mark.parametrize("geo", [dict(words=16), dict(words=16, neighbours=4),
                                 dict(words=16, bits=4, mux=2), dict(words=32, bits=2, mux=4,
                                 scramble_xor=5, neighbours=4)])
def test_neighbour_scope_count(geo):
    mem = make_memory(**geo)
    r, c = mem.rows, mem.columns
    # grid graph edges: r(c-1) + c(r-1), plus 2(r-1)(c-1) diagonals, each in both
    # directions (elementary combinatorics)
    und = r * (c - 1) + c * (r - 1) + (2 * (r - 1) * (c - 1) if mem.neighbours == 8 else 0)
    assert instance_count(TWO_CELL[0], mem, parse_pairs("neighbours")) == 2 * und
    # AF pairs: distinct ordered pairs of words that hold neighbouring cells
    a, v = neighbour_edges(mem)
    words = {(x // mem.bits, y // mem.bits) for x, y in zip(a.tolist(), v.tolist()) if x // mem.bits != y // mem.bits}
    assert instance_count(AF[1], mem, parse_pairs("neighbours")) == len(words)


def test_union_scope_count():
    mem = make_memory(8, 4)
    nb = set(zip(*(x.tolist() for x in cell_pairs(mem, parse_pairs("neighbours")))))
    wd = set(zip(*(x.tolist() for x in cell_pairs(mem, parse_pairs("word")))))
    assert nb & wd and wd - nb      # overlapping, neither contains the other
    union = parse_pairs("neighbours,word")
    assert instance_count(TWO_CELL[0], mem, union) == len(nb | wd)
    assert instance_count(TWO_CELL[0], mem, parse_pairs("word,all")) == 32 * 31


@PROPERTY
@given(words=st.integers(2, 40), bits=st.integers(1, 4), k=st.integers(1, 400), seed=st.integers(0, 2**31))
def test_sample_scope(words, bits, k, seed):
    mem = make_memory(words, bits)
    n = mem.cells
    scope = parse_pairs(f"sample:{k}:{seed}")
    a, v = cell_pairs(mem, scope)
    pairs = list(zip(a.tolist(), v.tolist()))
    want = min(k, n * (n - 1))
    assert len(pairs) == want == instance_count(TWO_CELL[0], mem, scope)
    assert len(set(pairs)) == want
    assert all(x != y and 0 <= x < n and 0 <= y < n for x, y in pairs)
    again = cell_pairs(mem, parse_pairs(f"sample:{k}:{seed}"))
    assert np.array_equal(again[0], a) and np.array_equal(again[1], v)


def test_sample_seeds_differ_and_cover():
    mem = make_memory(64, 4)
    one = cell_pairs(mem, parse_pairs("sample:50:1"))
    two = cell_pairs(mem, parse_pairs("sample:50:2"))
    assert set(zip(*map(list, one))) != set(zip(*map(list, two)))
    # the default seed is 1
    dflt = cell_pairs(mem, parse_pairs("sample:50"))
    assert np.array_equal(dflt[0], one[0]) and np.array_equal(dflt[1], one[1])
    # a sample at least as large as all pairs is all pairs
    small = make_memory(3)
    a, v = cell_pairs(small, parse_pairs("sample:100"))
    assert sorted(zip(a.tolist(), v.tolist())) == [p for p in itertools.permutations(range(3), 2)]
    # AF pairs are drawn over words
    wa, wb = word_pairs(mem, parse_pairs("sample:30:4"))
    assert wa.size == 30 and np.all(wa != wb) and wa.max() < 64 and wb.max() < 64


SCOPES = ["all", "neighbours", "word", "sample:25:3", "neighbours,word", "word,sample:7"]
MEMS = [dict(words=4), dict(words=6, bits=2), dict(words=8, bits=4, mux=2), dict(words=8, neighbours=4)]


@pytest.mark.parametrize("geo", MEMS, ids=lambda g: ",".join(f"{k}={v}" for k, v in g.items()))
@pytest.mark.parametrize("spec", SCOPES)
def test_enumerate_matches_count(geo, spec):
    mem = make_memory(**geo)
    scope = parse_pairs(spec)
    for kind in all_kinds(DEFAULT_RETENTION + (Fraction(1, 100),)):
        insts = list(enumerate_instances(kind, mem, scope))
        assert len(insts) == instance_count(kind, mem, scope), kind.text
        sites = [i.sites for i in insts]
        assert len(set(sites)) == len(sites)
        limit = mem.words if kind.family == "af" else mem.cells
        for s in sites:
            assert len(s) == kind.arity
            # an NPSF neighbour cut off by the array's edge is -1
            assert all(0 <= x < limit or (kind.cls in NPSF_CLASSES and x == -1) for x in s)
            assert len({x for x in s if x >= 0}) == len([x for x in s if x >= 0])
            if len(s) == 2:
                assert s[0] != s[1]
        assert all(i.kind is kind for i in insts)


def test_instance_text():
    mem = make_memory(8, 4)
    inst = next(iter(enumerate_instances(primitive("<1;0w1/0/->"), mem, parse_pairs("word"))))
    assert inst.sites == (0, 1)
    assert inst.text(mem) == "<1;0w1/0/-> a=w0.b0 v=w0.b1"
    bit_mem = make_memory(8)
    one = list(enumerate_instances(SAF[0], bit_mem, parse_pairs("all")))
    assert one[5].text(bit_mem) == "SA0 v=w5"
    af = list(enumerate_instances(AF[1], bit_mem, parse_pairs("all")))
    assert af[0].text(bit_mem) == "AF:alias a=0 b=1"


def test_thirty_single_cell_dynamic_primitives():
    # Al-Ars (2005), via Di Carlo & Prinetto, "Models in Memory Testing" (2010): 30 single-cell
    # two-operation primitives.  Derived count: a state x (2) and two operations from {w0, w1, r}
    # (3 × 3): 6 sequences end in a read, each with an RDF-, DRDF- or IRF-like effect (18);
    # 12 end in a write, each leaving the other value (12).
    from marchkit.faults import DYNAMIC, DYNAMIC_CLASSES

    assert len(DYNAMIC) == 30 and len({k.text for k in DYNAMIC}) == 30
    counts = {c: sum(k.cls == c for k in DYNAMIC) for c in DYNAMIC_CLASSES}
    assert counts == {"dRDF": 6, "dDRDF": 6, "dIRF": 6, "dTF": 6, "dWDF": 6}
    for k in DYNAMIC:
        assert parse_rule(k.text).text == k.text
    assert primitive("<0w1r1/0/0>").cls == "dRDF"
    assert primitive("<1r1r1/0/1>").cls == "dDRDF"
    assert primitive("<0w0w1/0/->").cls == "dTF"
    for bad in ("<0w1r0/0/0>", "<0r1r1/0/0>", "<0w1r1/1/1>", "<0w1w1/1/->", "<0w1r1/0/->"):
        with pytest.raises(FaultSpecError):
            parse_rule(bad)


def test_dynamic_class_names_do_not_shadow_static_ones():
    assert select_faults("dRDF").classes == ("dRDF",)
    assert select_faults("DRDF").classes == select_faults("drdf").classes == ("DRDF",)
    assert select_faults("ddrdf").classes == ("dDRDF",)
    assert len(select_faults("dynamic").kinds) == 30 + 96
