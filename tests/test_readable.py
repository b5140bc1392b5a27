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


# ---- free text at 80 columns: hanging indents, nothing split that belongs together ----------------

def _cells(line: str) -> int:
    from rich.cells import cell_len     # the width a terminal gives the line (rich's own measure)

    return cell_len(line)


def _continued(out: str, label: str, indent: int | None = None) -> list[str]:
    """The line starting with ``label`` and the lines that continue it (indented by
    ``indent``, by default the label's width)."""
    lines = out.splitlines()
    k = next(i for i, ln in enumerate(lines) if ln.startswith(label))
    block = [lines[k]]
    for ln in lines[k + 1:]:
        if not ln.startswith(" " * (len(label) if indent is None else indent)) or not ln.strip():
            break
        block.append(ln)
    return block


def test_grade_free_text_hangs_under_its_label_at_80_columns(cli, monkeypatch):
    # common practice, no source: a wrapped line of a labelled fact continues under the text,
    # not at the margin, and a number keeps its unit ("400 MHz")
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    monkeypatch.setenv("COLUMNS", "80")
    code, out, err = cli("grade", f"{root / 'examples' / 'dram.march'}:Corvid double-sided hammer",
                         "--memory", str(root / "examples" / "corvid_dram.toml"), "--page", "open",
                         "--faults", "disturb,DRF", "--missed", "2")
    assert code == 0, err
    assert all(_cells(ln) <= 80 for ln in out.splitlines())
    # the title: the notation moves below the name when the whole line does not fit
    lines = out.splitlines()
    assert lines[0] == "Corvid double-sided hammer  4n + 280000 act/row"
    assert lines[1] == "  {⇑(w0); ⇑hammer(-1,+1)^70000; ⇑(r0,w1); ⇓hammer(-1,+1)^70000; ⇓(r1)}"
    memory = _continued(out, "memory  ")
    assert len(memory) == 3 and all(ln.startswith(" " * 8) and ln[8] != " " for ln in memory[1:])
    assert "400 MHz" in " ".join(memory) and not any(ln.endswith(" 400") for ln in memory)
    why = _continued(out, "  disturb: ")
    assert len(why) > 1 and all(ln.startswith(" " * 11) for ln in why[1:])
    cost = _continued(out, "cost    ")
    assert " ".join(x.strip() for x in cost).endswith("718.1 ms at 400 MHz")
    # the faults line keeps each label with its value
    faults = " | ".join(_continued(out, "faults  "))
    assert "engine fast" in faults and "pairs neighbours" in faults


def test_wrapped_lines_keep_labels_whole_at_narrow_widths(cli, monkeypatch):
    for cols in ("80", "60", "50"):
        monkeypatch.setenv("COLUMNS", cols)
        code, out, err = cli("grade", "IFA-9", "--faults", "all", "--words", "16")
        assert code == 0, err
        assert all(_cells(ln) <= int(cols) for ln in out.splitlines()), cols
        # element labels ("M3 ⇓(r0,w1)") and "at 100 MHz" are never cut in two
        assert not re.search(r"\bM\d+$", out, re.M), cols
        assert not re.search(r"\b100$", out, re.M), cols
        # every "why" line that continues is indented past the class name
        why = out[out.index("why some are missed:"):].splitlines()[1:]
        for ln in why:
            if ln.startswith("cost") or ln.startswith("first =") or not ln.startswith("  "):
                break
            assert ln.startswith("  ") and ln[2] != " " or ln.startswith(" " * 6), (cols, ln)


def test_demo_next_commands_stay_whole(cli, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    code, out, err = cli("demo")
    assert code == 0, err
    tail = _continued(out, "Next: ")
    assert [ln[6:].rstrip(" ·") for ln in tail] == [
        "marchkit library", "marchkit grade 'March C-' --words 256 --faults all --pairs all",
        "marchkit grade --help"]


def test_a_long_file_name_does_not_push_the_text_to_the_right(cli, monkeypatch, tmp_path):
    from pathlib import Path

    monkeypatch.setenv("COLUMNS", "80")
    monkeypatch.chdir(tmp_path)
    for folder in ("a" * 20, "b" * 50):         # the text beside the name, or below it
        deep = Path(folder) / "die31_bitmap.csv"
        deep.parent.mkdir()
        deep.write_text("row,col\n3,5\n3,9\n")
        code, out, err = cli("repair", "--bitmap", str(deep), "--rows", "16", "--cols", "16",
                             "--spare-rows", "1", "--spare-cols", "1")
        assert code == 0, err
        first = _continued(out, str(deep), indent=2)
        assert len(first) >= 2 and all(ln.startswith("  ") and ln[2] != " " for ln in first[1:])
        assert "2 failing cells in a 16 × 16 array; spares 1 row + 1 column" in " ".join(x.strip() for x in first)
        assert all(_cells(ln) <= 80 for ln in out.splitlines())


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
