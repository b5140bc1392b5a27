"""A short fuzz run in the test suite (issue 17): notations, memory files and command-line
argument sets from hypothesis; every run ends with exit status 0, 2 or 3 and never a
traceback or the guard's "internal error".  The long run (≥ 100,000 inputs, with hang,
memory and injection checks) is ``benchmarks/fuzz_run.py``."""

from __future__ import annotations

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from marchkit.errors import MarchkitError

FUZZ = settings(max_examples=80, deadline=None, suppress_health_check=list(HealthCheck))

ORDERS = st.sampled_from(["⇑", "⇓", "⇕", "up", "down", "any", "x", ""])
OPS = st.sampled_from(["r0", "r1", "w0", "w1", "r2", "w", "r0^3", "w1*2", "r0×70000", "r0^0"])
JUNK = st.sampled_from(["{", "}", "(", ")", ";", ",", "Del", "Del(10ms)", "Del(1e999s)", "\n", "\"", "\\",
                        "$end", "\x00", "é", "\ufeff", "test", "length", "10n", "#"])


@st.composite
def notations(draw):
    els = draw(st.lists(st.builds(lambda o, ops: f"{o}({','.join(ops)})", ORDERS, st.lists(OPS, min_size=1, max_size=4)),
                        min_size=1, max_size=6))
    text = "{" + "; ".join(els) + "}"
    for piece, at in draw(st.lists(st.tuples(JUNK, st.integers(0, 200)), max_size=3)):
        i = at % (len(text) + 1)
        text = text[:i] + piece + text[i:]
    return text


@FUZZ
@given(notations(), st.booleans())
def test_fuzz_notation(text, as_file):
    from marchkit.notation import check_test, parse_file_text, parse_notation

    try:
        ts = parse_file_text(text, "f.march") if as_file else parse_notation(text)
        for t in (ts if isinstance(ts, list) else [ts]):
            check_test(t)
    except MarchkitError as e:
        assert e.exit_code == 2
        e.render()


KEYS = st.sampled_from(["name", "words", "bits", "mux", "order", "backgrounds", "clock", "read_cycles",
                        "retention", "wrods", "scramble_bits", "neighbours"])
VALUES = st.sampled_from(["16", "0", "-1", "1e999", "nan", "inf", '"1GHz"', '"200"', '"1e9999999Hz"', "true",
                          '["solid", "word"]', "[[[[1]]]]", '"stride:1e20"', "2.5", '["5ms", "50ms"]',
                          '"forever"', "67108864", "{a=1}", '"100MHz"', "8"])


@FUZZ
@given(st.sampled_from(["[memory]\n", "", "[timing]\n", "[weights]\n"]),
       st.lists(st.tuples(KEYS, VALUES), max_size=6), st.sampled_from([b"", b"\xef\xbb\xbf", b"\xe9"]))
def test_fuzz_memory_file(tmp_path_factory, head, pairs, prefix):
    from marchkit.model import read_memory_file

    p = tmp_path_factory.mktemp("m") / "m.toml"
    p.write_bytes(prefix + (head + "".join(f"{k} = {v}\n" for k, v in pairs)).encode())
    try:
        read_memory_file(p)
    except MarchkitError as e:
        assert e.exit_code == 2
        e.render()


OPTION = st.sampled_from([
    ("--words", ["8", "16", "0", "1e9", str(2**62)]), ("--bits", ["1", "4", "1024", "-1"]),
    ("--clock", ["100MHz", "1e999", "200", "0Hz", "500GHz"]), ("--retention", ["1ms", ",", "1e999s", "0s"]),
    ("--order", ["gray", "stride:1e20", "stride:99999999999999999999", "random:3"]),
    ("--backgrounds", ["word", "plaid", ","]), ("--read-cycles", ["2", str(2**62)]),
    ("--faults", ["SAF,DRF", "dynamic", "x"]), ("--pairs", ["all", "word", "sample:1000000000000", "sample:0"]),
    ("--require", ["SAF=100", "SAF=101", "x=1"]), ("--weights", ["SAF=2", "SAF=-1", ""]),
])


@FUZZ
@given(st.sampled_from(["grade", "compare", "export"]), st.sampled_from(["MATS+", "{⇕(w0); ⇑(r1)}", "{", "nosuch"]),
       st.lists(st.tuples(OPTION, st.integers(0, 4)), max_size=4))
def test_fuzz_command_line(cli, tmp_path_factory, cmd, test, options):
    argv = [cmd, test]
    for (name, values), i in options:
        if cmd == "export" and name in ("--faults", "--pairs", "--retention", "--require", "--weights"):
            continue
        argv += [name, values[i % len(values)]]
    if "--words" not in argv:
        argv += ["--words", "8"]
    if cmd == "export":
        argv += ["-o", str(tmp_path_factory.mktemp("x") / "o.csv"), "-q"]
    code, out, err = cli(*argv)
    assert code in (0, 2, 3), (argv, code, err)
    assert "Traceback" not in err and "internal error" not in err, (argv, err)
