"""Export pin maps (issue 16 item 7): signal names, polarity, chip enable, byte enables and the
compare strobe in STIL, from the memory file's [pins] or --pins.  The independent reader is
the semi-ate-stil parser; the polarity is read back from its parse of the waveform table."""

from __future__ import annotations

import re

import pytest

PINS = ("write_enable=WE_N,write_enable_active=low,chip_enable=CS_N,byte_enables=BE,strobe=0.6,"
        "clock=CK,address=AD,data_in=DW,data_out=DR")


def _parse(path):
    mod = pytest.importorskip("Semi_ATE.STIL.parsers.STILParser")
    p = mod.STILParser(str(path))
    assert p.parse_syntax() is not None, p.err_msg
    p.parse_semantic()
    assert p.is_parsing_done, p.err_msg
    return p


def test_stil_pin_map_parses_and_applies(cli, tmp_path):
    out = tmp_path / "p.stil"
    code, o, err = cli("export", "MATS+", "--words", "4", "--bits", "16", "-o", str(out), "--pins", PINS, "-q")
    assert code == 0, err
    _parse(out)
    text = out.read_text()
    sigs = re.findall(r"^    (\S+) (In|Out);", text, re.M)
    names = {re.sub(r"\[\d+\]", "", n) for n, _ in sigs}
    assert names == {"CK", "AD", "DW", "WE_N", "RE", "CS_N", "BE", "DR"}
    assert "WE_N { 01 { '0ns' U/D; } }" in text          # active low: logical 1 drives the pin low
    assert "RE { 01 { '0ns' D/U; } }" in text
    assert "DOUT { LHX { '0ns' X; '6ns' L/H/X; } }" in text     # strobe at 0.6 of 10 ns
    vs = re.findall(r"V \{ ([^}]*) \}", text)
    ops = [v for v in vs if "CS_N=1" in v]
    assert len(ops) == 5 * 4                                 # 5n on 4 words: chip enabled on every op
    assert all(("BEN=11" in v) == ("WE_N=1" in v) for v in ops)   # byte enables on writes only


def test_pins_from_memory_file_and_errors(cli, tmp_path):
    m = tmp_path / "wren.toml"
    m.write_text('[memory]\nwords = 8\nbits = 8\n[pins]\nwrite_enable = "WEB"\nwrite_enable_active = "low"\n')
    out = tmp_path / "p.stil"
    code, o, err = cli("export", "MATS+", "--memory", str(m), "-o", str(out), "-q")
    assert code == 0, err
    _parse(out)
    assert "WEB { 01 { '0ns' U/D; } }" in out.read_text()
    m.write_text('[memory]\nwords = 8\n[pins]\nwrite_enabel = "WEB"\n')
    code, o, err = cli("check", str(m))
    assert code == 2 and ":4:1: error: unknown key 'write_enabel' in [pins] (did you mean 'write_enable'?)" in err
    m.write_text('[memory]\nwords = 8\n[pins]\nstrobe = 1.5\n')
    code, o, err = cli("check", str(m))
    assert code == 2 and "pins strobe: a fraction of the clock period between 0 and 1 (got 1.5)" in err
    m.write_text('[memory]\nwords = 8\n[pins]\nclock = "CK; V {"\n')
    code, o, err = cli("check", str(m))
    assert code == 2 and "is not a pin name" in err
    code, o, err = cli("export", "MATS+", "--words", "4", "-f", "stil", "-o", "-", "--pins", "address=A")
    assert code == 2 and "'A' is not a pin name (2 to 64 letters" in err
    code, o, err = cli("export", "MATS+", "--words", "4", "-o", str(tmp_path / "x.csv"), "--pins", "clock=CK")
    assert code == 2 and "a pin map (signal names, polarity, enables, strobe) applies to --format stil" in err
    code, o, err = cli("export", "MATS+", "--words", "4", "-f", "stil", "-o", "-", "--pins", "clock=ADDR")
    assert code == 2 and "'ADDR' is the name of a STIL signal group" in err
