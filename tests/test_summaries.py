"""Results a test engineer can read and trust (issue 16): narrow terminals, one element
numbering, the class-weighted score, pass requirements with their own exit status, the
compare HTML report, JSON provenance.  Console widths are pinned with COLUMNS."""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser

import pytest

GRADE = ("grade", "March C-", "--words", "16384", "--bits", "32", "--faults", "static,SAF,AF", "--pairs", "word")


@pytest.mark.parametrize("cols", ["80", "60"])
def test_grade_table_never_cuts_a_number(cli, monkeypatch, cols):
    monkeypatch.setenv("COLUMNS", cols)
    code, out, err = cli(*GRADE)
    assert code == 0, err
    assert max(len(line) for line in out.splitlines() if "│" in line or "┃" in line or line.startswith("CF")) <= int(cols)
    assert "…" not in out
    # every count of the JSON result appears whole in the table
    code, js, _ = cli(*GRADE, "--json")
    data = json.loads(js)
    for c in data["classes"]:
        assert re.search(rf"^{re.escape(c['class'])}[\s│]+{c['instances']:,}[\s│]", out, re.M), c
    assert f"{data['total']['instances']:,}" in out
    assert "elements M0 ⇕(w0)  M1 ⇑(r0,w1)" in out      # elements listed once, from M0, each label kept whole
    assert "why some are missed:" in out


def test_grade_wide_table_keeps_everything(cli, monkeypatch):
    monkeypatch.setenv("COLUMNS", "132")
    code, out, err = cli(*GRADE)
    assert code == 0
    assert "first found in" in out and "M1 ⇑(r0,w1)" in out and "why some are missed" in out


@pytest.mark.parametrize("cols", ["80", "60"])
def test_compare_table_never_cuts_a_number(cli, monkeypatch, cols):
    monkeypatch.setenv("COLUMNS", cols)
    code, out, err = cli("compare", "MATS+", "March C-", "IFA-9", "--words", "1024", "--bits", "8",
                         "--faults", "static,SAF,AF,DRF")
    assert code == 0, err
    assert "…" not in out
    code, js, _ = cli("compare", "MATS+", "March C-", "IFA-9", "--words", "1024", "--bits", "8",
                      "--faults", "static,SAF,AF,DRF", "--json")
    for t in json.loads(js)["tests"]:
        assert f"{t['cycles']:,}" in out


def test_one_element_numbering_in_check_grade_and_html(cli, tmp_path):
    # the same element is M2 in check's message, grade's table and the HTML report
    code, out, err = cli("check", "{⇕(w0); ⇑(r0,w1); ⇓(r0)}")
    assert code == 2 and "M2 ⇓(r0) op 0 'r0'" in err
    r = tmp_path / "r.html"
    code, out, err = cli("grade", "{⇕(w0); ⇑(r0,w1); ⇓(r1)}", "--words", "8", "--report", str(r))
    assert code == 0 and "M2 ⇓(r1)" in out
    assert "M2" in r.read_text(encoding="utf-8")


def test_missed_instances_read_as_cells(cli):
    code, out, err = cli("grade", "MATS+", "--words", "8", "--faults", "CFid", "--pairs", "all", "--missed", "1")
    assert code == 0
    assert re.search(r"CFid<[^>]+> aggressor word \d, victim word \d", out), out


def test_score_weights_and_requirements(cli, tmp_path):
    base = ("grade", "March C-", "--words", "64", "--faults", "SAF,TF,CFid,DRF")
    code, out, err = cli(*base)
    # SAF 1, TF 1, CFid 1, DRF 0: the mean of the class coverages is 75 % (equal weights)
    assert code == 0 and "score   75.00 % (mean of the per-class coverages over 4 classes, equal weights)" in out
    code, out, err = cli(*base, "--weights", "DRF=2")
    assert "score   60.00 % (" in out and "weights SAF=1, TF=1, CFid=1, DRF=2" in out
    code, out, err = cli(*base, "--require", "SAF=100,CFid=99.5")
    assert code == 0 and "requirements met: SAF ≥ 100 %, CFid ≥ 99.5 %" in out
    code, out, err = cli(*base, "--require", "SAF=100,DRF=50")
    assert code == 3
    assert "requirements not met: DRF 0 % < 50 %" in out
    code, out, err = cli(*base, "--require", "SFA=100")
    assert code == 2 and "'SFA' is not a class of this fault selection (did you mean 'SAF'?)" in err
    code, out, err = cli(*base, "--require", "SAF=101")
    assert code == 2 and "outside 0 to 100" in err
    code, js, err = cli(*base, "--require", "score=80", "--json")
    data = json.loads(js)
    assert code == 3 and data["requirements"]["unmet"] == ["score 75.00 % < 80 %"]
    m = tmp_path / "w.toml"
    m.write_text('[memory]\nwords = 64\n[weights]\nDRF = 2\n')
    code, out, err = cli("grade", "March C-", "--memory", str(m), "--faults", "SAF,TF,CFid,DRF")
    assert "score   60.00 % (" in out


def test_compare_front_on_score_and_requirements(cli):
    # static + retention faults: by instance count coupling faults swamp the small classes;
    # the class score keeps IFA-9 (the library's test with retention pauses; Dekker et al.,
    # IEEE TCAD 1990) on the front
    args = ("compare", "MATS+", "March C-", "IFA-9", "--words", "64", "--faults", "classic,DRF", "--json")
    code, js, err = cli(*args)
    rows = {t["name"]: t for t in json.loads(js)["tests"]}
    assert rows["IFA-9"]["pareto"] and json.loads(js)["front_on"] == "score"
    code, js, err = cli(*args, "--require", "DRF=100")
    data = json.loads(js)
    assert code == 3 and set(data["requirements"]["unmet"]) == {"MATS+", "March C-"}
    code, js, err = cli("compare", "IFA-9", "--library", "--words", "16", "--faults", "DRF", "--require", "DRF=100", "--json")
    assert code == 0          # library tests are shown, not required


class _Parse(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def test_compare_html_report(cli, tmp_path):
    r = tmp_path / "c.html"
    code, out, err = cli("compare", "MATS+", "March C-", "--words", "16", "--report", str(r))
    assert code == 0 and f"wrote {r}" in out
    p = _Parse()
    p.feed(r.read_text(encoding="utf-8"))     # Python's html.parser as the independent reader
    names = [t for t, _ in p.tags]
    assert names.count("table") == 2 and "img" in names and "script" not in names
    img = next(a for t, a in p.tags if t == "img")
    assert img["src"].startswith("data:image/png;base64,")
    text = " ".join(p.text)
    assert "cost, score and coverage" in text and "coverage per class (%)" in text and "March C-" in text


def test_json_provenance(cli):
    code, js, err = cli("grade", "MATS+", "--words", "8", "--faults", "SAF,DRF", "--retention", "2ms", "--json")
    prov = json.loads(js)["provenance"]
    from marchkit import __version__

    assert prov["tool"] == "marchkit" and prov["version"] == __version__
    assert prov["notation"] == "{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}"
    assert prov["faults"] == "SAF,DRF" and prov["pairs"] == "neighbours" and prov["retention"] == ["2ms"]
    assert prov["engine"] == "fast" and prov["memory"]["words"] == 8


def test_one_column_note_without_mux(cli):
    code, out, err = cli("grade", "MATS+", "--words", "8")
    assert "without --mux the array is one column wide" in out
    code, out, err = cli("grade", "MATS+", "--words", "8", "--mux", "2")
    assert "one column wide" not in out


def test_small_items(cli):
    # --faults help lists every selection word (issue 16 item 10)
    code, out, err = cli("grade", "--help")
    flat = " ".join(out.split())
    for word in ("static", "classic", "retention", "dynamic", "all"):
        assert word in flat
    # the demo memory does not share a name with the example file's memory
    code, out, err = cli("demo")
    assert "kestrel_demo_sram" in out and "kestrel_l1_sram" not in out
    # library notes cite papers, never an unnamed source
    from marchkit.notation import library

    unnamed = " ".join(("fact", "sheet"))    # the phrase a note must not use, spelled apart
    for t in library():
        assert unnamed not in (t.note or "").lower()


def test_example_memory_file_carries_retention_and_weights(cli):
    from pathlib import Path

    mem = str(Path(__file__).resolve().parents[1] / "examples" / "kestrel_l1_sram.toml")
    code, out, err = cli("grade", "IFA-9", "--memory", mem, "--faults", "SAF,AF,DRF")
    assert code == 0, err
    assert "retention τ 5ms, 50ms" in out and "weights SAF=3, AF=2, DRF=2" in out


def test_check_reports_every_independent_error_and_warns(cli, tmp_path):
    bad = tmp_path / "wren.march"
    bad.write_text('test "a"\n  {⇕(w0); ⇑(r0,w2); ⇓(r1,w0)}\ntest "b"\n  lenght 5n\n  {⇕(w0)}\n'
                   'test "c"\n  {⇕(w0); ⇑(r0); ⇓(r9)}\n')
    code, out, err = cli("check", str(bad))
    assert code == 2
    assert out.strip() == f"{bad}: 3 errors, no test read"
    heads = [ln for ln in err.splitlines() if ": error: " in ln]
    assert heads == [f"{bad}:2:16: error: unexpected 'w2'; expected an operation (r0, r1, w0 or w1)",
                     f"{bad}:4:3: error: unexpected 'lenght'; expected 'length', 'note', 'source', 'targets', '{{'",
                     f"{bad}:7:20: error: unexpected 'r9'; expected an operation (r0, r1, w0 or w1)"]
    ok = tmp_path / "ok.march"
    ok.write_text('test "March C-"\n  targets SAF, CFxx\n  {⇕(w0); ⇑(r0,w1)}\n')
    code, out, err = cli("check", str(ok))
    assert code == 0 and out.strip() == f"{ok}: 1 test, 0 errors, 2 warnings"
    assert f"{ok}:1:6: warning: test 'March C-' has the name of the library's 'March C-' but different elements" in err
    assert f"{ok}:2:16: warning: unknown target 'CFxx'" in err
    # the caret sits under the unknown target itself (the lark-style positioned message)
    lines = err.splitlines()
    k = lines.index(next(ln for ln in lines if "unknown target 'CFxx'" in ln))
    assert lines[k + 1] == "      targets SAF, CFxx" and lines[k + 2] == " " * 19 + "^^^^"
    code, out, err = cli("check", "--strict", str(ok))
    assert code == 2
