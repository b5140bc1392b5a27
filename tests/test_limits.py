"""Extreme numbers and sizes are refused before any work, with the limit in the message;
memory files are strict (issue 17; issue 16 item 5).  Every case: exit 2, one clear message,
no traceback, answered quickly (the subprocess timeouts bound it)."""

from __future__ import annotations

import time
from fractions import Fraction
from pathlib import Path

import pytest


@pytest.mark.parametrize("argv,msg", [
    (["--clock", "1e999MHz"], "error: clock '1e999MHz' is too large"),
    (["--clock", "1e9999999MHz"], "error: clock '1e9999999MHz' is too large"),
    (["--clock", "1e-999MHz"], "error: the clock frequency must be positive"),
    (["--clock", "1e400Hz"], "error: clock '1e400Hz' is too large"),
    (["--clock", "500GHz"], "error: clock '500GHz' is outside the range marchkit models (1Hz to 100GHz)"),
    (["--clock", "200"], "error: clock '200' has no unit; write it with one, e.g. 200MHz (Hz, kHz, MHz, GHz)"),
    (["--retention", "1e9999999s"], "error: duration '1e9999999s' is too large"),
    (["--retention", "20000s"], "error: duration '20000s' is outside 1ns to 10000s"),
    (["--retention", ","], "error: --retention ',': give 1 to 64 leakage times with units, e.g. 5ms,50ms"),
    (["--retention", "5ms,,6ms"], "error: --retention '5ms,,6ms': an empty item in the list"),
    (["--order", "stride:99999999999999999999"], "error: address order 'stride:99999999999999999999': stride 2^99999999999999999999 is larger than any memory marchkit models (I at most 26)"),
    (["--order", "stride:1e20"], "error: address order 'stride:1e20': '1e20' is not a whole number"),
    (["--backgrounds", ",".join(["0x1"] * 65)], "error: 65 data backgrounds is more than marchkit runs in one grade (64); list fewer"),
])
def test_extreme_numbers_refused(cli, argv, msg):
    t = time.perf_counter()
    code, out, err = cli("grade", "MATS+", "--words", "64", *argv)
    assert time.perf_counter() - t < 5
    assert code == 2, err
    assert err.strip() == msg


@pytest.mark.parametrize("argv,msg", [
    (["--read-cycles", str(2**62)], "argument --read-cycles: 4,611,686,018,427,387,904 is outside 1 to 1,024"),
    (["--write-cycles", str(2**40)], "argument --write-cycles: 1,099,511,627,776 is outside 1 to 1,024"),
    (["--words", "1e9"], "argument --words: '1e9' is not a whole number (2 to 67,108,864)"),
    (["--bits", "4096"], "argument --bits: 4,096 is outside 1 to 1,024"),
])
def test_counts_have_stated_ranges(cli, argv, msg):
    code, out, err = cli("export", "MATS+", *argv, "-o", "-", "-f", "csv")
    assert code == 2
    assert err.strip().endswith(msg)


@pytest.mark.parametrize("argv,msg", [
    (["--pairs", "sample:1000000000000", "--words", "1048576"],
     "--pairs sample:1000000000000: about 1,000,000,000,000 cell pairs on 1,048,576 × 1 cells"),
    (["--pairs", "word", "--bits", "1024", "--words", "65536"],
     "--pairs word: about 68,652,367,872 cell pairs on 65,536 × 1024 cells"),
    (["--words", str(1 << 26)], "would need about 4.4 GiB of arrays"),
])
def test_pair_scopes_too_large_refused_up_front(cli, argv, msg):
    t = time.perf_counter()
    code, out, err = cli("grade", "MATS+", *argv)
    assert time.perf_counter() - t < 5
    assert code == 2
    assert msg in err and ("use --pairs all (counted, not listed)" in err or "grade a smaller array" in err)


def test_wide_word_backgrounds_no_overflow(cli):
    # 1024-bit hex backgrounds are wider than numpy's int64 (van de Goor & Tlili 2003 word set)
    code, out, err = cli("grade", "MATS+", "--words", "2", "--bits", "128", "--backgrounds", "word", "--faults", "SAF")
    assert code == 0, err
    assert "SAF" in out


def test_missed_checked_before_writing_report(cli, tmp_path):
    r = tmp_path / "r.html"
    code, out, err = cli("grade", "MATS+", "--missed", "-1", "--report", str(r))
    assert code == 2 and "--missed takes a number" in err
    assert not r.exists()


# ---- memory files ----------------------------------------------------------------------

def _mem(tmp_path, body: bytes | str, name="wren_buf.toml"):
    p = tmp_path / name          # invented part
    p.write_bytes(body if isinstance(body, bytes) else body.encode())
    return p


@pytest.mark.parametrize("body,first,caret", [
    ("[memory]\nwords = 16\n[timing]\nclock = \"1GHz\"\n",
     ":3:2: error: unknown section 'timing'; a memory file has the sections: [memory], [weights]", "     ^^^^^^"),
    ("[memory]\nwords = 16\nclok = \"1GHz\"\n",
     ":3:1: error: unknown key 'clok' (did you mean 'clock'?); a memory file knows: ", "    ^^^^"),
    ("[memory]\nwords = 16\n[wieghts]\nSAF = 2\n",
     ":3:2: error: unknown section 'wieghts' (did you mean 'weights'?)", "     ^^^^^^^"),
    ("[memory]\nwords = 16\nclock = 200\n",
     ":3:1: error: clock has the wrong type (int) (write it with its unit, e.g. \"200MHz\")", "    ^^^^^"),
    ("[memory]\nwords = 16\nclock = nan\n", ":3:1: error: clock has the wrong type (float)", "    ^^^^^"),
    ("[memory]\nwords = 16\nclock = \"1e999GHz\"\n", ":3:1: error: clock '1e999GHz' is too large", "    ^^^^^"),
    ("[memory]\nwords = 16\nclock = \"200\"\n", ":3:1: error: clock '200' has no unit", "    ^^^^^"),
    ("[memory]\nwords = 16\nretention = [\"5ms\", \"forever\"]\n",
     ":3:1: error: 'forever' is not a duration such as 10ms", "    ^^^^^^^^^"),
    ("[memory]\nwords = 16\n[weights]\nSAF = -1\n", ":4:1: error: weight of 'SAF' must be a number ≥ 0 (got -1)", "    ^^^"),
])
def test_memory_file_is_strict(cli, tmp_path, body, first, caret):
    p = _mem(tmp_path, body)
    for argv in (["check", str(p)], ["grade", "MATS+", "--memory", str(p)]):
        code, out, err = cli(*argv)
        assert code == 2, err
        lines = err.rstrip("\n").split("\n")
        assert lines[0].startswith(str(p) + first), lines[0]
        assert lines[2] == caret


def test_memory_file_encoding_bom_and_nesting(cli, tmp_path):
    p = _mem(tmp_path, b"[memory]\nname = \"caf\xe9\"\nwords = 16\n")
    code, out, err = cli("check", str(p))
    assert code == 2
    assert err.startswith(f"{p}:2:12: error: byte 0xE9 is not UTF-8 text (save the file as UTF-8)")
    p = _mem(tmp_path, "\ufeff[memory]\nwords = 16\n".encode(), "bom.toml")
    code, out, err = cli("check", str(p))
    assert code == 0 and "memory bom: 16 × 1 bit" in out
    p = _mem(tmp_path, "x = " + "[" * 5000 + "]" * 5000 + "\n", "deep.toml")
    code, out, err = cli("check", str(p))
    assert code == 2 and "Traceback" not in err
    p = _mem(tmp_path, "# " + "x" * (2 << 20) + "\nwords = 16\n", "huge.toml")
    code, out, err = cli("check", str(p))
    assert code == 2 and "a memory file is at most 1024 KiB" in err


def test_memory_file_retention_used_by_grade(cli, tmp_path):
    p = _mem(tmp_path, "[memory]\nwords = 16\nclock = \"1MHz\"\nretention = [\"5ms\", \"50ms\"]\n")
    code, out, err = cli("grade", "MATS+", "--memory", str(p), "--faults", "DRF")
    assert code == 0, err
    assert "retention τ 5ms, 50ms" in out
    code, out, err = cli("grade", "MATS+", "--memory", str(p), "--faults", "DRF", "--retention", "2ms")
    assert "retention τ 2ms" in out


def test_bounded_parsers_directly():
    from marchkit.errors import ModelError
    from marchkit.model import parse_duration, parse_frequency

    assert parse_frequency("100MHz", require_unit=True) == 100_000_000
    assert parse_duration("64us") == Fraction(64, 10**6)
    for bad in (float("nan"), float("inf"), "1e99999999999", "x" * 100):
        with pytest.raises(ModelError):
            parse_frequency(bad)


# ---- output size budget ----------------------------------------------------------------

def test_export_size_refused_before_writing(cli, tmp_path):
    out = tmp_path / "big.csv"
    t = time.perf_counter()
    code, o, err = cli("export", "{⇕(w0); ⇑(r0,w1); Del(9000s); ⇓(r1,w0)}", "--words", "1024", "--bits", "1024",
                       "-o", str(out))
    assert time.perf_counter() - t < 5
    assert code == 2
    assert err.strip() == ("error: the export would write about 721 TB of csv (900,000,005,120 cycles, 100 % of "
                           "them idle), more than the 100 MB limit; use --force-size to write it anyway; STIL writes "
                           "idle runs as loops (--format stil: about 12.9 MB)")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("fmt", ["csv", "jsonl", "vcd", "stil", "hex"])
@pytest.mark.parametrize("spec,words,bits", [
    ("March C-", 64, 8), ("March C-", 1024, 32), ("{⇕(w0); ⇑(r0,w1); Del(100us); ⇓(r1,w0)}", 256, 1),
    ("March SS", 16, 128),
])
def test_size_estimate_close_to_real_size(tmp_path, fmt, spec, words, bits):
    # the independent figure is the number of bytes the writer actually put on disk
    from marchkit.export import export
    from marchkit.model import make_memory
    from marchkit.notation import resolve_test

    out = tmp_path / f"x.{fmt}"
    r = export(resolve_test(spec), make_memory(words, bits), str(out), fmt)
    real = sum((tmp_path / Path(f).name).stat().st_size for f in r.files)
    assert 0.7 <= r.details["estimated_bytes"] / real <= 1.5 if fmt != "hex" else 0.7 <= r.details["estimated_bytes"] / real <= 3.5


def test_force_size_lifts_the_limit(cli, tmp_path):
    code, o, err = cli("export", "{⇕(w0); Del(20s); ⇑(r0)}", "--words", "2", "-o", "/dev/null", "-f", "csv",
                       "--force-size", "-q", "--clock", "1kHz")
    assert code == 0, err


# ---- parser scale ----------------------------------------------------------------------

def test_huge_notation_and_file_refused_quickly(cli, tmp_path):
    t = time.perf_counter()
    code, out, err = cli("check", "{⇕(w0); " + "⇑(r0,w1); " * 7000 + "}")
    assert code == 2
    assert err.strip() == "<argument>:1:1: error: a notation is 70,009 characters long; marchkit reads at most 65,536"
    big = tmp_path / "many.march"
    big.write_text("".join(f'test "t{i}"\n  {{⇕(w0); ⇑(r0,w1)}}\n' for i in range(150_000)))
    code, out, err = cli("check", str(big))
    assert code == 2
    assert "a file of tests is" in err and "marchkit reads at most 262,144 characters (split it into several files)" in err
    q = tmp_path / "q.march"
    q.write_text('test "' + "a" * 5000 + '"\n {⇕(w0)}\n')
    code, out, err = cli("check", str(q))
    assert code == 2 and f"{q}:1:6: error: a quoted string longer than 4,096 characters" in err
    assert time.perf_counter() - t < 10


def test_long_line_error_shows_a_window_around_the_caret(cli):
    text = "{⇕(w0); " + "⇑(r0,w1); " * 3000 + "⇓(r1,x)}"
    code, out, err = cli("check", text)
    assert code == 2
    lines = err.rstrip("\n").split("\n")
    assert lines[0] == "<argument>:1:30014: error: unexpected 'x'; expected an operation (r0, r1, w0 or w1)"
    assert lines[1] == "    …" + text[30013 - 60:]
    assert lines[2].index("^") == lines[1].index("x")
    assert len(err) < 400          # not the 30 kB line twice


def test_byte_order_mark_in_a_test_file(cli, tmp_path):
    p = tmp_path / "bom.march"
    p.write_bytes("\ufefftest \"Wren quick\"\n  {⇕(w0); ⇑(r0)}\n".encode())
    code, out, err = cli("check", str(p))
    assert code == 0, err
    assert out.strip() == f"{p}: 1 test, 0 errors, 0 warnings"


def test_reference_engine_estimates_and_refuses(cli):
    t = time.perf_counter()
    code, out, err = cli("grade", "MATS+", "--faults", "CFds", "--pairs", "all", "--words", "65536",
                         "--engine", "reference")
    assert time.perf_counter() - t < 5
    assert code == 2
    assert err.startswith("error: the reference engine would take about 8.6e+03 years here (1.4e+17 op-steps")
    assert "it refuses runs over 2 minutes: use --force-time" in err
    code, out, err = cli("grade", "MATS+", "--faults", "SAF", "--words", "16", "--engine", "reference")
    assert code == 0 and "engine reference" in out
