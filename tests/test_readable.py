"""Results a test engineer can read (issue 16, item 10): the terminal tables and the HTML
reports use the same labels, and the generated Verilog testbenches print every address and
data word in one base.

Checks against things outside the project:
* the HTML pages are read with Python's html.parser (an independent reader), the terminal
  tables as printed (console width pinned with COLUMNS);
* the testbench logs come from Icarus Verilog running the generated testbenches; reading a
  number needs its base, so each kind of number must always come in the same one (common
  practice, no source): cycles, bit numbers and counts in decimal, addresses, data and masks
  in hexadecimal zero-padded to the bus width — as the csv export and fail logs.

Memories and names are invented demo data.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from html.parser import HTMLParser

import pytest


class _Heads(HTMLParser):
    """(tag, text) of every table head cell, section title and summary term."""

    def __init__(self):
        super().__init__()
        self.cur = None
        self.out: list[tuple[str, str]] = []

    def handle_starttag(self, tag, attrs):
        if tag in ("th", "h2", "dt"):
            self.cur = [tag, ""]

    def handle_endtag(self, tag):
        if self.cur and tag == self.cur[0]:
            self.out.append((self.cur[0], " ".join(self.cur[1].split())))
            self.cur = None

    def handle_data(self, data):
        if self.cur:
            self.cur[1] += data


def _html(path):
    p = _Heads()
    p.feed(path.read_text(encoding="utf-8"))
    return p.out


def _table_heads(out: str) -> list[list[str]]:
    """The column labels of every table the terminal printed (header rows hold ┃)."""
    return [[c.strip() for c in line.split("┃")] for line in out.splitlines() if "┃" in line]


def _terms(items, tag):
    return [t for k, t in items if k == tag]


GRADE = ("grade", "MATS+", "--words", "16", "--bits", "2", "--faults", "SAF,TF,CFin", "--primitives", "--missed", "2")


def test_grade_terminal_and_html_use_the_same_labels(cli, monkeypatch, tmp_path):
    monkeypatch.setenv("COLUMNS", "200")                   # wide: every column shown
    r = tmp_path / "g.html"
    code, out, err = cli(*GRADE, "--report", str(r))
    assert code == 0, err
    heads = _table_heads(out)
    page = _html(r)
    th = _terms(page, "th")
    classes_head, kinds_head = heads[0], heads[1]
    assert classes_head == ["class", "instances", "detected", "coverage", "first found in", "all found by",
                            "why some are missed"]
    assert th[:len(classes_head)] == classes_head               # the HTML table of classes
    assert kinds_head == ["kind", "class", "instances", "detected", "coverage", "why some are missed"]
    assert th[-len(kinds_head):] == kinds_head                  # the HTML table of kinds
    titles = _terms(page, "h2")
    for title in ("coverage per class", "fault kinds", "what the test misses"):
        assert title in titles and title in out
    # the summary lines: the same label and the same text in both
    dd = dict(zip(_terms(page, "dt"), re.findall(r"<dd>(.*?)</dd>", r.read_text(encoding="utf-8"))))
    for label in ("memory", "score", "cost"):
        line = next(x for x in out.splitlines() if x.startswith(label + " "))
        assert line[len(label):].strip() == dd[label].replace("&amp;", "&"), label


def test_grade_narrow_table_explains_its_short_labels(cli, monkeypatch):
    monkeypatch.setenv("COLUMNS", "60")
    code, out, err = cli(*GRADE)
    assert code == 0, err
    head = next(line for line in out.splitlines() if line.startswith("class "))   # a light box on narrow consoles
    assert re.split(r"\s{2,}", head.strip()) == ["class", "instances", "coverage", "first", "all by"]
    assert "first = first found in; all by = all found by" in " ".join(out.split())


def test_compare_terminal_and_html_use_the_same_labels(cli, monkeypatch, tmp_path):
    monkeypatch.setenv("COLUMNS", "200")
    r = tmp_path / "c.html"
    code, out, err = cli("compare", "MATS+", "March C-", "--words", "16", "--report", str(r))
    assert code == 0, err
    page = _html(r)
    want = ["test", "length", "operations", "cycles", "time", "detected", "score %", "coverage %", "Pareto front"]
    assert _table_heads(out)[0] == want
    assert _terms(page, "th")[:len(want)] == want
    titles = _terms(page, "h2")
    for title in ("cost, score and coverage", "coverage per class (%)"):
        assert title in titles and title in out
    code, out, err = cli("compare", "MATS+", "March C-", "--words", "16")
    monkeypatch.setenv("COLUMNS", "80")
    code, out, err = cli("compare", "MATS+", "March C-", "--words", "16")
    assert code == 0 and "cov %" in out and "front = Pareto front" in " ".join(out.split())


# ---- testbench logs: one base per kind of number --------------------------------------------------

def _tool(name):
    path = shutil.which(name)
    if path is None:
        pytest.skip(f"{name} is not installed")
    return path


def _vvp(d, *plusargs):
    r = subprocess.run([_tool("vvp"), "-n", "sim.vvp", *plusargs], cwd=d, capture_output=True, text=True, timeout=120)
    return r.returncode, r.stdout + r.stderr


def test_export_testbench_log_uses_hex_for_addresses_and_data(cli, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, out, err = cli("export", "March C-", "--words", "32", "--bits", "8", "--format", "hex", "-o", "p.hex",
                         "--stuck-at", "19:2:1")
    assert code == 0, err
    r = subprocess.run([_tool("iverilog"), "-o", "sim.vvp", "p_tb.v", "p_sram.v"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    code, log = _vvp(tmp_path, "+all_failures")
    assert code != 0
    assert "stuck-at-1 cell: address 13 bit 2" in log            # word 19 = 0x13; bit in decimal
    fails = re.findall(r"FAIL at cycle (\d+): address (\S+) expected (\S+) read (\S+) mask (\S+) "
                       r"\(compared in cycle (\d+)\)", log)
    assert len(fails) >= 2
    for _c, a, e, q, m, _k in fails:
        assert re.fullmatch(r"[0-9a-f]{2}", a) and a == "13"     # 5 address bits: 2 hex digits
        for word in (e, q, m):
            assert re.fullmatch(r"[0-9a-f]{2}", word), word      # 8 data bits: 2 hex digits
        assert int(q, 16) ^ int(e, 16) == 0x04                   # bit 2 differs
    assert "PASS" not in log


def test_bist_testbench_log_uses_hex_for_addresses_and_data(cli, tmp_path):
    code, out, err = cli("bist", "March C-", "--words", "32", "--bits", "8", "-o", str(tmp_path / "mb"), "--quiet")
    assert code == 0, err
    d = tmp_path / "mb"
    r = subprocess.run([_tool("iverilog"), "-o", "sim.vvp", "mbist_tb.v", "mbist.v"], cwd=d, capture_output=True,
                       text=True)
    assert r.returncode == 0, r.stderr
    code, log = _vvp(d, "+stuck_word=19", "+stuck_bit=2", "+stuck_value=1")
    m = re.search(r"stuck-at-1 cell: address (\S+) bit (\d+): detected, first at cycle (\d+) \(address (\S+), bits (\S+)\)",
                  log)
    assert m, log
    assert m.group(1) == "13" and m.group(4) == "13" and m.group(2) == "2" and m.group(5) == "04"


def test_fail_log_messages_number_elements_like_grade(cli, tmp_path):
    """A log line on a write names the operation as check and grade do: M1 op 1 (from 0)."""
    p = tmp_path / "fails.csv"
    # March C- on 16 one-bit words: M1 ⇑(r0,w1) writes address 0 in cycle 17 (16 + 1, by hand)
    p.write_text("cycle,address,expected,observed\n17,0,0,1\n")
    code, out, err = cli("diagnose", "March C-", "--words", "16", "--fails", str(p))
    assert code == 2 and "cycle 17 is a write, w1 (M1 op 1), not a compare" in err, err
