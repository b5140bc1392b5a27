"""The library of published march tests (patterns/published.march) checked against the literature.

The expected numbers below are typed in from outside sources (paper abstracts, encyclopedic
pages, a list of the literature kept beside the project), never read back from the library file, so a
slip in the library shows up here.  Each row says where its number comes from:
  "abstract"      - read in the paper's abstract (as read there);
  "encyclopedic"  - read in the table of the encyclopedic page "March algorithm" (Wikipedia);
  "from memory"   - recalled, not yet compared with the paper.
"""

from __future__ import annotations

import re

import pytest

from marchkit.notation import Delay, check_test, find_in_library, library, name_key, parse_notation

# (name, published ops per cell k, published number of retention pauses, where the k comes from)
PUBLISHED = [
    ("MATS", 4, 0),       # Knaizuk & Hartmann, IEEE TC 1977: abstract, "4 x 2^n memory accesses"
    ("MATS+", 5, 0),      # Abadir & Reghbati, ACM Comput. Surv. 1983: 5N encyclopedic (Wikipedia table); attribution from memory
    ("MATS++", 6, 0),     # van de Goor, Testing Semiconductor Memories, 1991: abstract; 6N encyclopedic
    ("March X", 6, 0),    # van de Goor 1991: abstract for the length; 6N encyclopedic
    ("March Y", 8, 0),    # van de Goor 1991: from memory (the 22N "March Y" of Wang et al. 2016 is another test)
    ("March C", 11, 0),   # Marinescu, ITC 1982: from memory (11 = count of the sequence on the encyclopedic page)
    ("March C-", 10, 0),  # van de Goor 1991 / IEEE D&T 1993: abstract; 10N encyclopedic
    ("March C+", 14, 0),  # origin not identified: 14N encyclopedic; notation from memory
    ("March A", 15, 0),   # Suk & Reddy, IEEE TC 30(12) 1981: abstract gives 14N; 15n adds the initial write
    ("March B", 17, 0),   # Suk & Reddy 1981: abstract gives the enhanced 16N; 17n adds the initial write; 17N encyclopedic
    ("March U", 13, 0),   # van de Goor & Gaydadjiev, IEE Proc. CDS 1997: from memory
    ("March LR", 14, 0),  # van de Goor, Gaydadjiev, Yarmolik, Mikitjuk, VTS 1996: abstract (the abstract we read names the test, no length)
    ("March SR", 14, 0),  # Hamdioui & van de Goor, ATS 2000: abstract, "a test length of 14n"; 14N encyclopedic
    ("March SS", 22, 0),  # Hamdioui, van de Goor, Rodgers, MTDT 2002: abstract, "a test length of 22n"
    ("March MSS", 18, 0), # Harutunyan, Vardanian, Zorian, VTS 2005: from memory
    ("March RAW", 26, 0), # Hamdioui, Al-Ars, van de Goor, VTS 2002: from memory
    ("March AB", 22, 0),  # Benso, Bosio, Di Carlo, Di Natale, Prinetto, ITC 2005: from memory
    ("March AB1", 11, 0), # same paper: from memory
    ("PMOVI", 13, 0),     # de Jonge & Smeulders, Computer Design 1976: from memory
    ("IFA-9", 12, 2),     # Dekker, Beenker, Thijssen, IEEE TCAD 9(6) 1990: abstract for 12n + 2 Del
    ("IFA-13", 16, 2),    # same paper: from memory
    ("March G", 23, 2),   # van de Goor 1991: from memory
    ("March LA", 22, 0),  # van de Goor, Gaydadjiev, Mikitjuk, Yarmolik, ATS 1998: from memory (abstract names it, no length)
    ("March SL", 41, 0),  # Hamdioui, Al-Ars, van de Goor, Rodgers, IEEE TCAD 23(5) 2004: from memory (41n)
    ("March RAW1", 13, 0),  # Hamdioui, Al-Ars, van de Goor, VTS 2002: from memory (13n)
]

# Notations read in outside sources, to compare the library's element sequences with.
# Element lists of the table on the encyclopedic page "March algorithm" (Wikipedia):
ENCYCLOPEDIC_NOTATION = [
    ("MATS+", "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}"),
    ("MATS++", "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0,r0)}"),
    ("March A", "{⇕(w0); ⇑(r0,w1,w0,w1); ⇑(r1,w0,w1); ⇓(r1,w0,w1,w0); ⇓(r0,w1,w0)}"),
    # Test sequences on a copy of the encyclopedic page "March Algorithm"; the page writes the
    # order-free elements as "Ascending".
    ("March C", "{⇑(w0); ⇑(r0,w1); ⇑(r1,w0); ⇑(r0); ⇓(r0,w1); ⇓(r1,w0); ⇑(r0)}"),
    ("March C-", "{⇑(w0); ⇑(r0,w1); ⇑(r1,w0); ⇓(r0,w1); ⇓(r1,w0); ⇑(r0)}"),
]
# Only the first two elements of March B were readable in that table.
ENCYCLOPEDIC_PREFIX = [
    ("March B", "{⇕(w0); ⇑(r0,w1,r1,w0,r0,w1)}"),
]


def _get(name):
    t = find_in_library(name)
    assert t is not None, f"{name} is not in the library"
    return t


def _same_elements(lib_elements, ref_elements):
    """Same operations element by element; orders equal, or either one is 'any' (⇕)."""
    assert len(lib_elements) == len(ref_elements)
    for got, want in zip(lib_elements, ref_elements):
        assert [o.text for o in got.expanded()] == [o.text for o in want.expanded()]
        if "any" not in (got.order, want.order):
            assert got.order == want.order


def test_library_loads_and_is_complete():
    lib = library()
    assert len(lib) >= 22
    names = [t.name for t in lib]
    assert len(set(map(name_key, names))) == len(names), "two tests share a name key"
    for t in lib:
        assert t.source.strip(), f"{t.name} has no source"
        assert t.length.strip(), f"{t.name} has no length"
        assert t.targets, f"{t.name} has no targets"
        assert re.search(r"\b(19|20)\d\d\b", t.source), f"{t.name}: the citation has no year"


def test_every_library_test_is_in_the_outside_table():
    table = {name_key(n) for n, _, _ in PUBLISHED}
    missing = [t.name for t in library() if name_key(t.name) not in table]
    assert not missing, f"tests without an outside length check: {missing}"


@pytest.mark.parametrize("test", library(), ids=lambda t: t.name)
def test_fault_free_memory_passes(test):
    diags = check_test(test)
    assert not [d for d in diags if d.severity == "error"], [d.message for d in diags]
    assert not diags, [d.message for d in diags]  # not even a warning


@pytest.mark.parametrize("name,k,dels", PUBLISHED, ids=[p[0] for p in PUBLISHED])
def test_ops_per_cell_matches_published_length(name, k, dels):
    t = _get(name)
    assert t.ops_per_cell == k
    assert len(t.delays) == dels


@pytest.mark.parametrize("name,k,dels", PUBLISHED, ids=[p[0] for p in PUBLISHED])
def test_length_field_agrees_with_table(name, k, dels):
    t = _get(name)
    want = f"{k}n" + (f" + {dels} Del" if dels else "")
    assert t.length.replace(" ", "").lower() == want.replace(" ", "").lower()
    assert t.length_text == want


@pytest.mark.parametrize("name,text", ENCYCLOPEDIC_NOTATION, ids=[p[0] for p in ENCYCLOPEDIC_NOTATION])
def test_notation_matches_encyclopedic_page(name, text):
    # source: encyclopedic page "March algorithm" (Wikipedia) and a copy of it, as noted above
    _same_elements(_get(name).elements, parse_notation(text).elements)


@pytest.mark.parametrize("name,text", ENCYCLOPEDIC_PREFIX, ids=[p[0] for p in ENCYCLOPEDIC_PREFIX])
def test_notation_prefix_matches_encyclopedic_page(name, text):
    ref = parse_notation(text).elements
    _same_elements(_get(name).elements[: len(ref)], ref)


@pytest.mark.parametrize("name,paper_k", [
    ("March A", 14),  # Suk & Reddy 1981, abstract: "a test procedure requiring 14 N operations"
    ("March B", 16),  # Suk & Reddy 1981, abstract: "a given enhanced test procedure (requiring 16 N operations)"
])
def test_suk_reddy_counts_exclude_the_initial_write(name, paper_k):
    t = _get(name)
    first = t.elements[0]
    assert [o.text for o in first.expanded()] == ["w0"]
    assert t.ops_per_cell - first.ops_per_cell == paper_k


def test_march_sr_starts_descending():
    # Hamdioui & van de Goor, ATS 2000: from memory (the notation starts with a descending w0)
    first = _get("March SR").elements[0]
    assert first.order == "down" and [o.text for o in first.ops] == ["w0"]


@pytest.mark.parametrize("name", ["IFA-9", "IFA-13", "March G"])
def test_retention_tests_have_two_delays(name):
    # Dekker et al. 1990 (IFA-9 [abs], IFA-13 from memory); van de Goor 1991 (March G, from memory)
    t = _get(name)
    assert len(t.delays) == 2
    assert all(d.seconds > 0 for d in t.delays)
    # each pause is followed by an element that reads what was left in the cells
    items = list(t.items)
    for i, it in enumerate(items):
        if isinstance(it, Delay):
            nxt = items[i + 1]
            assert nxt.ops[0].kind == "r"


def test_tests_without_pauses_in_their_published_length_have_none():
    for name, _, dels in PUBLISHED:
        if dels == 0:
            assert not _get(name).delays, name


def test_name_matching():
    assert find_in_library("march-c-").name == "March C-"
    assert find_in_library("MARCH C").name == "March C"
    assert find_in_library("mats++").name == "MATS++"
    assert find_in_library("MATS+").name == "MATS+"
    assert find_in_library("ifa 9").name == "IFA-9"
    assert find_in_library("IFA_13").name == "IFA-13"
    assert find_in_library("march c+").name == "March C+"
    assert find_in_library("March Q") is None
    assert find_in_library("no such test") is None
