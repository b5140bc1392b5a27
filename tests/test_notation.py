"""Tests for the notation layer: grammar, parser, printer, checks and name lookup.

Reference tests in published march notation are quoted from the literature (source in a
comment beside each); the memories and file names in the demo texts are invented.
"""

from __future__ import annotations

import re
from decimal import Decimal
from fractions import Fraction

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from marchkit.errors import (
    ConsistencyError,
    InputError,
    NotationError,
    NotationSyntaxError,
    PositionedError,
)
from marchkit.notation import (
    MAX_REPEAT,
    Delay,
    Element,
    MarchTest,
    Op,
    check_test,
    ensure_consistent,
    find_in_library,
    format_file,
    format_notation,
    library,
    name_key,
    parse_file,
    parse_file_text,
    parse_notation,
)
from marchkit.notation.ast import ORDERS, UNITS

PROPERTY = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# MATS++ as printed by A. J. van de Goor, "Testing Semiconductor Memories: Theory and
# Practice", Wiley, 1991: 6 operations per cell (6n).  (from memory)
MATS_PP = "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0,r0)}"
MATS_PP_OPS = 6
# March C- as printed in the same book, 10n.  (from memory)
MARCH_C_MINUS = "{⇕(w0); ⇑(r0,w1); ⇑(r1,w0); ⇓(r0,w1); ⇓(r1,w0); ⇕(r0)}"
MARCH_C_MINUS_OPS = 10


def W(v, n=1):
    return Op("w", v, n)


def R(v, n=1):
    return Op("r", v, n)


def els(test):
    """(order, ((kind, value, repeat), ...)) for each item; Delay items as (amount, unit)."""
    out = []
    for i in test.items:
        if isinstance(i, Element):
            out.append((i.order, tuple((o.kind, o.value, o.repeat) for o in i.ops)))
        else:
            out.append((i.amount, i.unit))
    return out


def line_col(text: str, needle: str, nth: int = 0) -> tuple[int, int]:
    """1-based line and column of the nth occurrence of needle (lines split at '\\n')."""
    idx = -1
    for _ in range(nth + 1):
        idx = text.index(needle, idx + 1)
    before = text[:idx]
    return before.count("\n") + 1, idx - (before.rfind("\n") + 1) + 1


# ---------------------------------------------------------------------------------------
# 1. parsing the published notation and its spellings
# ---------------------------------------------------------------------------------------

def test_mats_plus_plus_verbatim():
    # MATS++, van de Goor 1991 (from memory): any-order w0; up r0,w1; down r1,w0,r0.
    t = parse_notation(MATS_PP)
    assert els(t) == [
        ("any", (("w", 0, 1),)),
        ("up", (("r", 0, 1), ("w", 1, 1))),
        ("down", (("r", 1, 1), ("w", 0, 1), ("r", 0, 1))),
    ]
    assert t.ops_per_cell == MATS_PP_OPS
    assert t.length_text == "6n"
    assert t.delays == ()


def test_march_c_minus_verbatim():
    # March C-, van de Goor 1991 (from memory): 6 elements, 10n.
    t = parse_notation(MARCH_C_MINUS)
    assert [e.order for e in t.elements] == ["any", "up", "up", "down", "down", "any"]
    assert t.ops_per_cell == MARCH_C_MINUS_OPS
    assert check_test(t) == []


def test_alternative_arrows_give_the_same_test():
    # ↑ ↓ ↕ are the single arrows many papers print instead of ⇑ ⇓ ⇕ (common practice, no source).
    assert parse_notation("{↕(w0); ↑(r0,w1); ↓(r1,w0,r0)}") == parse_notation(MATS_PP)
    assert parse_notation("{⇅(w0); ↑(r0,w1); ↓(r1,w0,r0)}") == parse_notation(MATS_PP)


def test_ascii_spelling_gives_an_equal_test():
    a = parse_notation("{any(w0); up(r0,w1); down(r1,w0,r0)}")
    assert a == parse_notation(MATS_PP)
    assert parse_notation("{ANY(W0); Up(R0, W1); DOWN(r1 , w0,R0)}") == a
    assert format_notation(a) == MATS_PP
    assert format_notation(a, ascii=True) == "{any(w0); up(r0,w1); down(r1,w0,r0)}"


def test_different_tests_are_not_equal():
    assert parse_notation(MATS_PP) != parse_notation("{⇕(w0); ⇑(r0,w1); ⇑(r1,w0,r0)}")
    assert parse_notation("{⇑(w0)}") != parse_notation("{⇑(w1)}")
    assert parse_notation("{⇑(r0*2)}") != parse_notation("{⇑(r0)}")


def test_delays():
    t = parse_notation("{⇕(w0); Del; ⇑(r0,w1); Del(10ms); ⇓(r1); del 5 us; Delay(1.50 s); DEL 7ns; ⇕(r1)}")
    ds = t.delays
    assert len(ds) == 5
    assert ds[0].amount > 0 and ds[0].unit in UNITS          # bare Del: the default pause
    assert (ds[1].amount, ds[1].unit) == (Decimal(10), "ms")
    assert (ds[2].amount, ds[2].unit) == (Decimal(5), "us")
    assert (ds[3].amount, ds[3].unit) == (Decimal("1.5"), "s")
    assert (ds[4].amount, ds[4].unit) == (Decimal(7), "ns")
    assert [type(i).__name__ for i in t.items] == [
        "Element", "Delay", "Element", "Delay", "Element", "Delay", "Delay", "Delay", "Element"]
    assert t.ops_per_cell == 5
    assert t.length_text == "5n + 5 Del"
    # 10 ms + 5 us + 1.5 s + 7 ns on top of the bare Del
    assert t.delay_seconds - ds[0].seconds == Fraction(1, 100) + Fraction(5, 10**6) + Fraction(3, 2) + Fraction(7, 10**9)


def test_micro_sign_unit():
    assert parse_notation("{⇕(w0); Del(3µs); ⇕(r0)}") == parse_notation("{⇕(w0); Del(3us); ⇕(r0)}")


def test_repeats_in_all_three_spellings():
    t = parse_notation("{⇕(w0); ⇑(r0*4, w1^16); ⇓(r1×3)}")
    assert els(t) == [
        ("any", (("w", 0, 1),)),
        ("up", (("r", 0, 4), ("w", 1, 16))),
        ("down", (("r", 1, 3),)),
    ]
    assert t.ops_per_cell == 1 + 4 + 16 + 3
    assert [o.text for o in t.elements[2].expanded()] == ["r1", "r1", "r1"]
    assert parse_notation("{⇑(r0 * 4)}") == parse_notation("{⇑(r0^4)}")
    assert parse_notation(f"{{⇑(r0*{MAX_REPEAT})}}").ops_per_cell == MAX_REPEAT
    # hammer-length repeats: at least 10^9 (published first-error counts are ~10^5 activations,
    # Kim et al., ISCA 2014), held as a count, never spelled out
    assert MAX_REPEAT >= 10**9
    assert parse_notation("{⇑(r0^1000000000)}").elements[0].ops[0].repeat == 10**9


def test_comments_are_ignored():
    t = parse_notation("{⇕(w0); # initialise\n ⇑(r0,w1); # march up\n ⇓(r1,w0,r0)} # done")
    assert t == parse_notation(MATS_PP)


def test_empty_separator_and_trailing_semicolon():
    assert parse_notation("{⇕(w0); ⇑(r0);}") == parse_notation("{⇕(w0);⇑(r0)}")


DEMO_FILE = """\
# Demo library for the invented "Kestrel-7" 64 Kbit SRAM macro.
test "MATS++"
  source  "A. J. van de Goor, Testing Semiconductor Memories, Wiley, 1991"
  targets SAF, AF
  length  6n
  {⇕(w0); ⇑(r0,w1); ⇓(r1,w0,r0)}

test "kestrel retention"     # invented demo test
  note    "pause \\"long\\" before reading back"
  targets DRF SAF
  length  4n + 2 Del
  {⇕(w0); Del(50ms); ⇑(r0,w1); del 50 ms; ⇓(r1)}
"""


def test_file_with_several_named_tests_and_metadata():
    tests = parse_file_text(DEMO_FILE, "kestrel.march")
    assert [t.name for t in tests] == ["MATS++", "kestrel retention"]
    a, b = tests
    assert a.source.startswith("A. J. van de Goor")
    assert a.targets == ("SAF", "AF")
    assert a.length == "6n"
    assert a.items == parse_notation(MATS_PP).items
    assert b.note == 'pause "long" before reading back'
    assert b.targets == ("DRF", "SAF")
    assert b.length == "4n + 2 Del"
    assert len(b.delays) == 2 and b.ops_per_cell == 4
    assert a.pos.line == 2 and b.pos.line == 8
    assert check_test(a) == [] and check_test(b) == []


def test_file_round_trip_of_the_demo():
    tests = parse_file_text(DEMO_FILE)
    assert parse_file_text(format_file(tests)) == tests
    assert parse_file_text(format_file(tests, ascii=True)) == tests


def test_duplicate_test_names_rejected():
    text = 'test "Kestrel A"\n  {⇕(w0); ⇑(r0)}\n\ntest "kestrel a"\n  {⇕(w1); ⇑(r1)}\n'
    with pytest.raises(NotationError) as ei:
        parse_file_text(text, "dup.march")
    e = ei.value
    assert (e.pos.line, e.pos.column) == (4, 1)
    assert "twice" in e.message and "dup.march:1:1" in e.message
    assert e.exit_code == 2


def test_field_given_twice_rejected():
    text = 'test "k"\n  source "a"\n  source "b"\n  {⇕(w0); ⇑(r0)}\n'
    with pytest.raises(NotationError) as ei:
        parse_file_text(text)
    assert (ei.value.pos.line, ei.value.pos.column) == (3, 3)


def test_blank_test_name_rejected():
    with pytest.raises(NotationError):
        parse_file_text('test "  "\n  {⇕(w0); ⇑(r0)}\n')


def test_bare_notation_file(tmp_path):
    tests = parse_file_text("# Kestrel-7 quick check\n" + MATS_PP + "\n", "demo/quick.march")
    assert len(tests) == 1
    assert tests[0].name == "quick"
    assert tests[0].items == parse_notation(MATS_PP).items
    assert parse_file_text(MATS_PP)[0].name == ""
    p = tmp_path / "kestrel_quick.march"
    p.write_text(MATS_PP, encoding="utf-8")
    (t,) = parse_file(p)
    assert t.name == "kestrel_quick" and t.ops_per_cell == MATS_PP_OPS


def test_parse_file_rejects_non_utf8_and_missing(tmp_path):
    p = tmp_path / "bad.march"
    p.write_bytes(b"{\xff\xfe(w0)}")
    with pytest.raises(InputError):
        parse_file(p)
    with pytest.raises(InputError):
        parse_file(tmp_path / "missing.march")


def test_a_file_cannot_mix_bare_notation_and_blocks():
    with pytest.raises(NotationSyntaxError):
        parse_file_text(MATS_PP + '\ntest "x"\n  {⇕(w0)}\n')


# ---------------------------------------------------------------------------------------
# 2. property tests: printing and parsing back
# ---------------------------------------------------------------------------------------

repeats = st.one_of(st.just(1), st.just(1), st.integers(2, 20), st.sampled_from([2, MAX_REPEAT]),
                    st.integers(1, MAX_REPEAT))
ops = st.builds(Op, kind=st.sampled_from(["r", "w"]), value=st.sampled_from([0, 1]), repeat=repeats)
elements = st.builds(Element, order=st.sampled_from(ORDERS), ops=st.lists(ops, min_size=1, max_size=6).map(tuple))
amounts = st.one_of(
    st.decimals(min_value=0, max_value=10**6, allow_nan=False, allow_infinity=False),
    st.builds(lambda m, e: Decimal(m).scaleb(e), st.integers(0, 10**6), st.integers(-9, 6)),
    st.just(Decimal("-0")),
)
_SCALE = {"ns": Decimal("1e-9"), "us": Decimal("1e-6"), "ms": Decimal("1e-3"), "s": Decimal(1)}
# the parser refuses delays over 10,000 s (marchkit.notation.parser.MAX_DELAY_SECONDS)
delays = st.builds(Delay, amount=amounts, unit=st.sampled_from(sorted(UNITS))).filter(
    lambda d: abs(d.amount) * _SCALE.get(d.unit, 1) <= 10_000)


@st.composite
def item_tuples(draw):
    items = draw(st.lists(st.one_of(elements, delays), max_size=8))
    items.insert(draw(st.integers(0, len(items))), draw(elements))
    return tuple(items)


line_text = st.characters(blacklist_categories=("Cs",))   # newlines too: strings escape them
KEYWORDS = {"test", "source", "targets", "length", "note"}
target_names = st.from_regex(r"\A[A-Za-z][A-Za-z0-9_+\-]{0,8}\Z").filter(lambda s: s not in KEYWORDS)
lengths = st.one_of(
    st.just(""),
    st.integers(0, 999).map(lambda k: f"{k}n"),
    st.tuples(st.integers(0, 999), st.integers(1, 9)).map(lambda kd: f"{kd[0]}n + {kd[1]} Del"),
)
named_tests = st.builds(
    MarchTest,
    items=item_tuples(),
    name=st.text(line_text, min_size=1, max_size=20).filter(lambda s: s.strip()),
    source=st.text(line_text, max_size=30),
    targets=st.lists(target_names, max_size=5).map(tuple),
    length=lengths,
    note=st.text(line_text, max_size=30),
)
unnamed_tests = st.builds(MarchTest, items=item_tuples())
# small repeats, for properties that walk the repeats out one by one
small_ops = st.builds(Op, kind=st.sampled_from(["r", "w"]), value=st.sampled_from([0, 1]),
                      repeat=st.integers(1, 4))
small_tests = st.builds(
    MarchTest,
    items=st.lists(
        st.one_of(st.builds(Element, order=st.sampled_from(ORDERS),
                            ops=st.lists(small_ops, min_size=1, max_size=5).map(tuple)), delays),
        max_size=8,
    ).filter(lambda items: any(isinstance(i, Element) for i in items)).map(tuple),
)


@PROPERTY
@given(unnamed_tests)
def test_notation_round_trip_unicode(t):
    text = format_notation(t)
    assert not text.isascii()  # the published arrows ⇑ ⇓ ⇕
    back = parse_notation(text)
    assert back == t
    assert format_notation(back) == text


@PROPERTY
@given(unnamed_tests)
def test_notation_round_trip_ascii(t):
    text = format_notation(t, ascii=True)
    assert text.isascii()
    assert parse_notation(text) == t
    assert parse_notation(text) == parse_notation(format_notation(t))


@settings(PROPERTY, max_examples=80)
@given(st.lists(named_tests, min_size=1, max_size=4, unique_by=lambda t: t.name.casefold()),
       st.booleans())
def test_file_round_trip(tests, ascii):
    text = format_file(tests, ascii=ascii)
    back = parse_file_text(text, "kestrel.march")
    assert back == tests
    assert [b.name for b in back] == [t.name for t in tests]


@PROPERTY
@given(small_tests)
def test_counts_survive_printing(t):
    back = parse_notation(format_notation(t))
    assert back.ops_per_cell == t.ops_per_cell == sum(len(e.expanded()) for e in t.elements)
    assert back.delay_seconds == t.delay_seconds
    assert back.length_text == t.length_text


def test_negative_zero_delay_prints_parseably():
    t = MarchTest((Element("any", (W(0),)), Delay(Decimal("-0"), "ms"), Element("up", (R(0),))))
    assert parse_notation(format_notation(t)) == t
    assert parse_notation(format_notation(t, ascii=True)) == t


@pytest.mark.parametrize("bad", ["Infinity", "-Infinity", "NaN", "sNaN", "-1"])
def test_delay_rejects_amounts_that_cannot_be_written(bad):
    with pytest.raises(ValueError):
        Delay(Decimal(bad), "ms")


# ---------------------------------------------------------------------------------------
# 3. robustness: any text gives a tree or a positioned error
# ---------------------------------------------------------------------------------------

_HEAD = re.compile(r"\A(?P<file>.+?):(?P<line>\d+):(?P<col>\d+): error: (?P<msg>.+)\Z")


def _blank(s: str) -> str:
    return "".join(" " if c.isspace() else c for c in s)


def check_error(err: BaseException, text: str, filename: str) -> None:
    """err is one of ours, and renders as `file:line:col: error: msg`, the line, a caret line."""
    assert isinstance(err, (NotationSyntaxError, NotationError)), repr(err)
    assert err.exit_code == 2
    out = err.render()
    rows = out.split("\n")
    assert out.splitlines() == rows, f"stray line break in {out!r}"
    assert len(rows) == 3, out
    m = _HEAD.match(rows[0])
    assert m, rows[0]
    assert m["file"] == filename
    line, col = int(m["line"]), int(m["col"])
    assert (line, col) == (err.pos.line, err.pos.column)
    lines = text.split("\n")
    assert 1 <= line <= len(lines), (line, len(lines))
    src = lines[line - 1]
    assert 1 <= col <= len(src) + 1, (col, src)
    # a long line is shown as a window around the caret (marchkit.errors._window)
    from marchkit.errors import _window

    end = err.pos.end_column
    shown, scol, _ = _window(src, col, end - col if end and end > col else 1)
    assert rows[1].startswith("    ")
    assert _blank(rows[1][4:]).rstrip() == _blank(shown).rstrip(), (rows[1], src)
    assert rows[2].startswith("    ")
    caret = rows[2][4:]
    lead = len(caret) - len(caret.lstrip(" "))
    assert lead == scol - 1, (caret, col)
    width = len(caret) - lead
    assert width >= 1 and set(caret[lead:]) == {"^"}
    assert scol - 1 + width <= len(shown) + 1, (col, width, src)


def parse_both(text: str) -> None:
    for fn, name in ((parse_notation, "<arg>"), (parse_file_text, "kestrel.march")):
        try:
            t = fn(text, name)
        except Exception as err:  # noqa: BLE001 - the point is to see what escapes
            check_error(err, text, name)
        else:
            ts = t if isinstance(t, list) else [t]
            for x in ts:  # whatever parses, prints and parses back to itself
                assert parse_notation(format_notation(x)) == MarchTest(x.items)


@PROPERTY
@given(st.binary(max_size=200))
def test_random_bytes_never_crash(data):
    parse_both(data.decode("utf-8", errors="replace"))


@PROPERTY
@given(st.text(max_size=120))
def test_random_text_never_crashes(text):
    parse_both(text)


NEAR_ALPHABET = list("{}();,⇑⇓⇕↑↓↕rw01*^× \n\t#\"µ.59") + [
    "Del", "del", "ms", "us", "s", "up", "down", "any", "test", "source", "targets", "length",
    "note", "n", "\r", "\x0c", "\u2028", "\x0b", "\x85", "99999999", "0" * 5000, "9" * 5000,
]


@st.composite
def mutated(draw, base):
    text = draw(base)
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["delete", "insert", "replace"]))
        i = draw(st.integers(0, len(text)))
        piece = draw(st.sampled_from(NEAR_ALPHABET))
        if kind == "delete":
            text = text[:i] + text[i + draw(st.integers(1, 3)):]
        elif kind == "insert":
            text = text[:i] + piece + text[i:]
        else:
            text = text[:i] + piece + text[i + 1:]
    return text


printed_notations = st.builds(format_notation, unnamed_tests, st.booleans())
printed_files = st.builds(
    format_file,
    st.lists(named_tests, min_size=1, max_size=3, unique_by=lambda t: t.name.casefold()),
    st.booleans(),
)


@settings(PROPERTY, max_examples=150)
@given(mutated(printed_notations))
def test_near_valid_notations_never_crash(text):
    parse_both(text)


@settings(PROPERTY, max_examples=80)
@given(mutated(printed_files))
def test_near_valid_files_never_crash(text):
    parse_both(text)


AWKWARD = [
    "",
    "   \n\n",
    "{",
    "{⇕(w0);\n\n",
    "{⇕(w0);\x0c⇑(r2)}",               # form feed: whitespace to the grammar, not a line break
    "{\r⇕(w0);\u2028 ⇑(r0)}",          # lone CR and a Unicode line separator
    "{⇕(w0);\x0b⇑(r0)}",
    "{⇕(w0);\r\n ⇑(r0,w9)}\r\n",
    "{⇕(w0);\t\t⇑(rx)}",
    "{⇑(r0*" + "9" * 5000 + ")}",      # more digits than int() accepts by default
    'test "k"\n  length 10n\n  +\n  {⇕(w0); ⇑(r0)}x',
    'test "k"\n  source "unterminated\n  {⇕(w0)}',
]


@pytest.mark.parametrize("text", AWKWARD, ids=[f"awkward{i}" for i in range(len(AWKWARD))])
def test_awkward_inputs_give_positioned_errors(text):
    for fn, name in ((parse_notation, "<arg>"), (parse_file_text, "k.march")):
        try:
            fn(text, name)
        except Exception as err:  # noqa: BLE001
            check_error(err, text, name)
        else:
            pytest.fail(f"{text!r} parsed")


def test_huge_repeat_count_is_a_notation_error():
    text = "{⇑(r0*" + "9" * 5000 + ")}"
    with pytest.raises(NotationError) as ei:
        parse_notation(text)
    assert (ei.value.pos.line, ei.value.pos.column) == (1, 7)
    assert len(ei.value.message) < 200
    # leading zeros do not make a count large
    assert parse_notation("{⇑(r0*" + "0" * 5000 + "7)}").ops_per_cell == 7


# ---------------------------------------------------------------------------------------
# 4. error messages
# ---------------------------------------------------------------------------------------

def test_unknown_operation():
    with pytest.raises(NotationSyntaxError) as ei:
        parse_notation("{⇕(w0); ⇑(r2)}")
    e = ei.value
    assert (e.pos.line, e.pos.column) == (1, 11)
    assert any(w in e.message for w in ("r0", "r1", "w0", "w1"))
    assert e.exit_code == 2
    check_error(e, "{⇕(w0); ⇑(r2)}", "<string>")
    assert e.render().splitlines()[2] == "    " + " " * 10 + "^^"


def test_missing_semicolon():
    text = "{⇕(w0) ⇑(r0)}"
    with pytest.raises(NotationSyntaxError) as ei:
        parse_notation(text)
    e = ei.value
    assert (e.pos.line, e.pos.column) == (1, 8)
    assert "';'" in e.message
    assert e.exit_code == 2
    check_error(e, text, "<string>")


def test_missing_closing_brace_points_at_the_end():
    text = "{⇕(w0); ⇑(r0)"
    with pytest.raises(NotationSyntaxError) as ei:
        parse_notation(text)
    assert "end of input" in ei.value.message and "'}'" in ei.value.message
    assert (ei.value.pos.line, ei.value.pos.column) == (1, len(text) + 1)


@pytest.mark.parametrize("text", ["{}", "{ }", "{Del}", "{Del(5ms); del 1 s}"])
def test_a_test_needs_an_element(text):
    with pytest.raises(PositionedError) as ei:
        parse_notation(text)
    e = ei.value
    assert isinstance(e, (NotationError, NotationSyntaxError))
    assert "at least one element" in e.message
    assert e.exit_code == 2
    assert (e.pos.line, e.pos.column) == (1, 1)


@pytest.mark.parametrize("count", ["0", "1000000001", "99999999999", str(MAX_REPEAT + 1)])
def test_repeat_count_out_of_range(count):
    text = f"{{⇕(w0); ⇑(r0*{count})}}"
    with pytest.raises(NotationError) as ei:
        parse_notation(text)
    e = ei.value
    line, star = line_col(text, "*")
    assert (e.pos.line, e.pos.column) == (line, star + 1)
    assert count in e.message and str(MAX_REPEAT) in e.message
    assert e.exit_code == 2
    check_error(e, text, "<string>")


def test_multiline_file_error_positions():
    text = (
        '# Kestrel-7 bring-up tests (invented)\n'
        'test "kestrel walk"\n'
        '  source "demo"\n'
        '  {⇕(w0); ⇑(r0,w1)}\n'
        '\n'
        'test "kestrel bad"\n'
        '  {⇕(w0);\n'
        '   ⇑(r0,w2)}\n'
    )
    with pytest.raises(NotationSyntaxError) as ei:
        parse_file_text(text, "kestrel.march")
    e = ei.value
    assert (e.pos.line, e.pos.column) == line_col(text, "w2") == (8, 9)
    assert e.render().startswith("kestrel.march:8:9: error: ")
    check_error(e, text, "kestrel.march")

    bad_count = 'test "k"\n  {⇕(w0);\n   ⇑(r0^0)}\n'
    with pytest.raises(NotationError) as ei:
        parse_file_text(bad_count, "k.march")
    assert (ei.value.pos.line, ei.value.pos.column) == (3, 9)
    check_error(ei.value, bad_count, "k.march")


def test_bad_target_and_length_fields():
    with pytest.raises(NotationSyntaxError) as ei:
        parse_file_text('test "k"\n  targets 9SAF\n  {⇕(w0)}\n')
    assert ei.value.pos.line == 2
    with pytest.raises(NotationSyntaxError) as ei:
        parse_file_text('test "k"\n  length ten\n  {⇕(w0)}\n')
    assert ei.value.pos.line == 2


# ---------------------------------------------------------------------------------------
# 5. consistency checks
# ---------------------------------------------------------------------------------------

def test_read_of_the_wrong_value_is_an_error():
    t = parse_notation("{⇕(w0); ⇑(r1)}")
    diags = check_test(t)
    errors = [d for d in diags if d.severity == "error"]
    assert len(errors) == 1
    msg = errors[0].message
    assert "M1 " in msg and "op 0 " in msg and "r1" in msg
    assert (errors[0].pos.line, errors[0].pos.column) == (1, 11)


def test_ensure_consistent_raises_with_a_caret_at_the_read():
    text = "{⇕(w0); ⇑(r0,w1); ⇓(r0)}"
    t = parse_notation(text, name="kestrel typo")
    with pytest.raises(ConsistencyError) as ei:
        ensure_consistent(t)
    e = ei.value
    assert e.exit_code == 2
    assert "kestrel typo" in e.message and "M2 " in e.message
    rows = e.render().splitlines()
    assert rows[0].startswith("<string>:1:21: error: ")
    assert rows[1] == "    " + text
    col = line_col(text, "r0", nth=1)[1]
    assert rows[2] == "    " + " " * (col - 1) + "^^"

    t2 = parse_notation("{⇕(w0); ⇑(r1)}")
    with pytest.raises(ConsistencyError) as ei:
        ensure_consistent(t2)
    assert ei.value.render().splitlines()[2] == "    " + " " * 10 + "^^"


def test_consistent_tests_pass_ensure_consistent():
    for text in (MATS_PP, MARCH_C_MINUS, "{⇕(w1); ⇑(r1*8,w0^2); ⇓(r0)}"):
        t = parse_notation(text)
        assert ensure_consistent(t) is t
        assert [d for d in check_test(t) if d.severity == "error"] == []


def test_error_after_repeated_writes_in_a_file():
    text = 'test "k"\n  {⇕(w1);\n   ⇑(w0*3, r1)}\n'
    (t,) = parse_file_text(text, "k.march")
    with pytest.raises(ConsistencyError) as ei:
        ensure_consistent(t)
    assert (ei.value.pos.line, ei.value.pos.column) == line_col(text, "r1")
    assert ei.value.render().startswith("k.march:3:12: error: ")


def test_read_before_any_write_is_a_warning():
    diags = check_test(parse_notation("{⇑(r0); ⇕(w1)}"))
    assert [d.severity for d in diags] == ["warning"]
    assert "never written" in diags[0].message
    assert (diags[0].pos.line, diags[0].pos.column) == (1, 4)
    assert diags[0].render("{⇑(r0); ⇕(w1)}").startswith("<string>:1:4: warning: ")
    ensure_consistent(parse_notation("{⇑(r0); ⇕(w1)}"))  # warnings do not raise


def test_test_without_reads_is_a_warning():
    diags = check_test(parse_notation("{⇕(w0); ⇑(w1); ⇓(w0)}"))
    assert [d.severity for d in diags] == ["warning"]
    assert "no read" in diags[0].message


def test_delay_before_first_write_is_a_warning():
    diags = check_test(parse_notation("{Del; ⇕(w0); ⇑(r0)}"))
    assert [d.severity for d in diags] == ["warning"]


def test_declared_length_mismatch_is_a_warning():
    ok = 'test "MATS++"\n  length 6n\n  ' + MATS_PP + "\n"
    bad = 'test "MATS++"\n  length 7n\n  ' + MATS_PP + "\n"
    assert check_test(parse_file_text(ok)[0]) == []
    diags = check_test(parse_file_text(bad)[0])
    assert [d.severity for d in diags] == ["warning"]
    assert "7n" in diags[0].message and "6" in diags[0].message


@PROPERTY
@given(small_tests)
def test_check_agrees_with_a_direct_simulation(t):
    # One fault-free cell: every cell sees the same operation sequence, so a read fails in
    # a good memory exactly when the last written value differs (common practice, no source).
    state, expect_error = None, False
    for _, _, op in t.flat_ops():
        if op.kind == "w":
            state = op.value
        elif state is not None and state != op.value:
            expect_error = True
    has_error = any(d.severity == "error" for d in check_test(t))
    assert has_error == expect_error
    if expect_error:
        with pytest.raises(ConsistencyError):
            ensure_consistent(t)
    else:
        assert ensure_consistent(t) is t


# ---------------------------------------------------------------------------------------
# 6. names
# ---------------------------------------------------------------------------------------

def test_name_key():
    assert name_key("March C-") == name_key("march-c-") == name_key("MARCH_C-")
    assert name_key("March C-") != name_key("March C")
    assert name_key("March C-") != name_key("March C+")
    assert name_key("MATS++") == name_key("mats ++") == name_key("Mats++")
    assert name_key("MATS++") != name_key("MATS+") != name_key("MATS")
    assert name_key("March SS") == name_key("march-ss") == name_key(" March  SS ")


def _library_or_skip():
    try:
        tests = library()
    except PositionedError as e:  # the shipped library must parse
        pytest.fail(e.render())
    if not tests:
        pytest.skip("patterns/published.march not written yet")
    return tests


def test_library_tests_are_consistent_and_uniquely_named():
    tests = _library_or_skip()
    keys = [name_key(t.name) for t in tests]
    assert len(keys) == len(set(keys))
    for t in tests:
        assert t.name
        ensure_consistent(t)
        assert [d for d in check_test(t) if "declared length" in d.message] == []


@pytest.mark.parametrize("name, notation, k", [
    ("MATS++", MATS_PP, MATS_PP_OPS),                  # van de Goor 1991 (from memory)
    ("March C-", MARCH_C_MINUS, MARCH_C_MINUS_OPS),    # van de Goor 1991 (from memory)
])
def test_find_in_library(name, notation, k):
    _library_or_skip()
    t = find_in_library(name)
    if t is None:
        pytest.skip(f"{name} not in the library")
    assert t.items == parse_notation(notation).items
    assert t.ops_per_cell == k
    assert find_in_library(name.lower().replace(" ", "-")) == t
    assert find_in_library("no such kestrel test") is None
