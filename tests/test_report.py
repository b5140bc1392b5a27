"""Tests for the comparison of march tests (rows, Pareto front, sorting, CSV/JSON), its plots,
the HTML grade report and `marchkit compare`.

Outside facts checked here, each named beside its check:
  - the coverage ordering MATS+ < March C- < March SS on the static fault primitives, and
    March SS detecting all of them (van de Goor, Testing Semiconductor Memories, 1991;
    Hamdioui, van de Goor, Rodgers, "March SS: a test for all static simple RAM faults",
    MTDT 2002);
  - the Pareto front is checked against a second, independent characterisation of
    non-dominated points (common practice, no source), not against the code's own loop.
The memories and stand-in results below are invented for the tests.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import re
import subprocess
import sys
from dataclasses import dataclass, field
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from marchkit.cli import main
from marchkit.errors import InputError, OutputError
from marchkit.model import make_memory
from marchkit.report import (check_sort_key, compare_results, dominates, pareto_flags,
                             sort_rows, unique_labels)
from marchkit.report.compare import percent_text


# ---- stand-in grade results, in the shape of marchkit.grade's dataclasses ----------------

@dataclass(frozen=True)
class _Test:
    name: str
    ops_per_cell: int

    @property
    def length_text(self):
        return f"{self.ops_per_cell}n"


@dataclass(frozen=True)
class _Class:
    cls: str
    instances: int
    detected: int
    coverage: float
    complete_by: int | None = None
    reason: str = ""


@dataclass(frozen=True)
class _Total:
    instances: int
    detected: int
    coverage: float


@dataclass
class _Result:
    test: _Test
    memory: object
    cycles: int
    classes: list
    faults_spec: str = "static"
    pairs_spec: str = "neighbours"
    primitives: list = field(default_factory=list)

    @property
    def ops(self):
        return self.cycles

    @property
    def seconds(self):
        return self.cycles / float(self.memory.clock_hz)

    @property
    def total(self):
        n = sum(c.instances for c in self.classes)
        d = sum(c.detected for c in self.classes)
        return _Total(n, d, d / n)

    def to_json(self):
        return {"memory": self.memory.describe()}


MEM = make_memory(32, name="heron_fifo", clock="50MHz")   # invented part


def fake(name, k, detected_by_class, mem=MEM, spec="static"):
    """A stand-in result: classes A (40 instances) and B (60 instances)."""
    sizes = {"A": 40, "B": 60}
    classes = [_Class(c, sizes[c], d, d / sizes[c]) for c, d in detected_by_class.items()]
    return _Result(_Test(name, k), mem, k * mem.words, classes, faults_spec=spec)


# ---- the Pareto front ---------------------------------------------------------------------

def test_pareto_hand_made_cases():
    # a chain where each extra cycle buys coverage, and one test that buys nothing
    assert pareto_flags([(100, 0.5), (200, 0.8), (300, 0.7)]) == [True, True, False]
    # equal cycles: the better coverage dominates
    assert pareto_flags([(100, 0.5), (100, 0.6)]) == [False, True]
    # equal coverage: the faster one dominates
    assert pareto_flags([(100, 0.5), (90, 0.5)]) == [False, True]
    # two identical points: neither is strictly better, so both stay on the front
    assert pareto_flags([(100, 0.5), (100, 0.5)]) == [True, True]
    # a slow test that is no better than a fast one is off the front
    assert pareto_flags([(50, 1.0), (500, 1.0), (20, 0.1)]) == [True, False, True]
    assert pareto_flags([(7, 0.3)]) == [True]
    assert pareto_flags([]) == []
    assert dominates((10, Fraction(1, 2)), (10, Fraction(1, 3)))
    assert not dominates((10, Fraction(1, 2)), (10, Fraction(1, 2)))
    assert not dominates((9, Fraction(1, 3)), (10, Fraction(1, 2)))


def _front_by_sweep(points):
    """Independent characterisation: a point is non-dominated iff it has the highest
    coverage among the points with no more cycles than it, and the fewest cycles among the
    points with at least its coverage."""
    out = []
    for c, v in points:
        best_v = max(v2 for c2, v2 in points if c2 <= c)
        best_c = min(c2 for c2, v2 in points if v2 >= v)
        out.append(v == best_v and c == best_c)
    return out


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 12), st.fractions(0, 1, max_denominator=6)), min_size=1, max_size=9))
def test_pareto_agrees_with_a_sweep(points):
    assert pareto_flags(points) == _front_by_sweep(points)


def test_pareto_uses_exact_coverage():
    # 1/3 and its float differ in the last bit; the rows compare exact fractions
    a = fake("one", 4, {"A": 10, "B": 15})    # 25/100
    b = fake("two", 4, {"A": 15, "B": 10})    # 25/100, same cycles: both on the front
    cmp = compare_results([a, b], front_on="coverage")
    assert [r.pareto for r in cmp.rows] == [True, True]
    # on the class-weighted score they differ: (10/40 + 15/60)/2 < (15/40 + 10/60)/2
    cmp = compare_results([a, b])
    assert [r.pareto for r in cmp.rows] == [False, True]


# ---- rows, sorting, JSON and CSV from stand-in results -----------------------------------

def _stand_in_comparison():
    return compare_results([
        fake("Slowpoke", 20, {"A": 40, "B": 30}),   # 70 % in 640 cycles: dominated by Quick
        fake("Quick", 6, {"A": 40, "B": 45}),       # 85 % in 192 cycles
        fake("Thorough", 12, {"A": 40, "B": 60}),   # 100 % in 384 cycles
        fake("", 3, {"A": 20, "B": 0}),             # unnamed: 20 % in 96 cycles
    ])


def test_rows_from_results():
    cmp = _stand_in_comparison()
    by = {r.label: r for r in cmp.rows}
    assert list(by) == ["Slowpoke", "Quick", "Thorough", "test 1"]
    assert {k: r.pareto for k, r in by.items()} == {"Slowpoke": False, "Quick": True, "Thorough": True, "test 1": True}
    q = by["Quick"]
    assert (q.cycles, q.detected, q.instances) == (192, 85, 100)
    # score: mean of the class coverages (A 40/40, B 45/60) with equal weights
    assert q.exact_score == (Fraction(1) + Fraction(3, 4)) / 2
    assert q.classes == {"A": 1.0, "B": 0.75}
    assert q.seconds == pytest.approx(192 / 50e6)
    assert [r.label for r in cmp.front] == ["test 1", "Quick", "Thorough"]
    assert cmp.classes == ("A", "B")


def test_sorting():
    cmp = _stand_in_comparison()
    names = lambda rows: [r.label for r in rows]  # noqa: E731
    assert names(sort_rows(cmp.rows, "cycles")) == ["test 1", "Quick", "Thorough", "Slowpoke"]
    assert names(sort_rows(cmp.rows, "coverage")) == ["Thorough", "Quick", "Slowpoke", "test 1"]
    assert names(sort_rows(cmp.rows, "name")) == ["Quick", "Slowpoke", "test 1", "Thorough"]
    assert names(sort_rows(cmp.rows, "length")) == ["test 1", "Quick", "Thorough", "Slowpoke"]
    # score: Thorough 1, Quick 7/8, Slowpoke (1 + 1/2)/2, test 1 (1/2 + 0)/2
    assert names(sort_rows(cmp.rows, "score")) == ["Thorough", "Quick", "Slowpoke", "test 1"]
    # by one class: B coverage 1.0, 0.75, 0.5, 0.0
    assert names(sort_rows(cmp.rows, "b")) == ["Thorough", "Quick", "Slowpoke", "test 1"]
    assert names(sort_rows(sort_rows(cmp.rows, "name"), "given")) == names(cmp.rows)
    with pytest.raises(InputError, match="cannot sort by"):
        sort_rows(cmp.rows, "speed")
    assert check_sort_key("CFds", ("SF", "CFds")) == "cfds"
    with pytest.raises(InputError):
        check_sort_key("SAF", ("SF", "CFds"))


def test_json_and_csv_shapes():
    cmp = _stand_in_comparison().sorted("coverage")
    js = json.loads(json.dumps(cmp.to_json()))
    assert set(js) == {"memory", "faults", "tests", "weights", "front_on"}
    assert js["memory"]["words"] == 32 and js["faults"] == ["A", "B"]
    first = js["tests"][0]
    for key in ("name", "ops", "cycles", "seconds", "coverage", "classes", "pareto"):
        assert key in first
    assert first["name"] == "Thorough" and first["coverage"] == 1.0 and first["pareto"] is True
    assert first["classes"] == {"A": 1.0, "B": 1.0}
    rows = list(csv.DictReader(io.StringIO(cmp.to_csv())))
    assert [r["test"] for r in rows] == ["Thorough", "Quick", "Slowpoke", "test 1"]
    assert rows[2]["pareto"] == "no" and rows[1]["pareto"] == "yes"
    assert float(rows[1]["coverage:B"]) == pytest.approx(0.75)
    assert int(rows[3]["cycles"]) == 96


def test_results_from_different_setups_are_refused():
    other = make_memory(64, name="heron_fifo", clock="50MHz")
    with pytest.raises(InputError, match="different memories"):
        compare_results([fake("a", 4, {"A": 1, "B": 1}), fake("b", 4, {"A": 1, "B": 1}, mem=other)])
    with pytest.raises(InputError, match="different fault lists"):
        compare_results([fake("a", 4, {"A": 1, "B": 1}), fake("b", 4, {"A": 1, "B": 1}, spec="classic")])
    with pytest.raises(InputError):
        compare_results([])


def test_labels_and_percent_text():
    assert unique_labels(["March C-", "", "March C-", ""]) == ["March C-", "test 1", "March C- (2)", "test 2"]
    assert percent_text(2 / 3) == "66.7"
    assert percent_text(0.99996) == "99.9"       # partial coverage never shows as 100
    assert percent_text(0.000004) == "0.1"       # nor as 0
    assert percent_text(1.0) == "100" and percent_text(0.0) == "0"
    assert percent_text(0.5, 2, detected=1, instances=2) == "50.00"


# ---- the real grader ---------------------------------------------------------------------

SIX = ["MATS+", "March X", "March C-", "March LR", "March SR", "March SS"]


@pytest.fixture(scope="module")
def six_json():
    """Six published tests on a 16-word memory against the 48 static primitives."""
    import contextlib

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(["compare", *SIX, "--words", "16", "--faults", "static", "--json"])
    assert rc == 0
    return json.loads(buf.getvalue())


def test_published_ordering_on_static(six_json):
    cov = {t["name"]: t["coverage"] for t in six_json["tests"]}
    # van de Goor 1991 (MATS+, March C-); Hamdioui, van de Goor, Rodgers, MTDT 2002 (March SS
    # detects every static simple fault): MATS+ < March C- < March SS
    assert cov["MATS+"] < cov["March C-"] < cov["March SS"]
    # Hamdioui et al. 2002: March SS detects all static fault primitives
    assert cov["March SS"] == 1.0
    ss = next(t for t in six_json["tests"] if t["name"] == "March SS")
    assert set(ss["classes"].values()) == {1.0}
    assert six_json["faults"][:6] == ["SF", "TF", "WDF", "RDF", "DRDF", "IRF"]


def test_six_tests_have_consistent_pareto_flags(six_json):
    tests = six_json["tests"]
    assert sorted(t["name"] for t in tests) == sorted(SIX)
    points = [(t["cycles"], Fraction(t["detected"], t["instances"])) for t in tests]
    assert [t["pareto"] for t in tests] == _front_by_sweep(points)
    # the test with full coverage and the fastest test are always on the front
    fastest = min(tests, key=lambda t: (t["cycles"], -t["coverage"]))
    assert fastest["pareto"]
    # cycles: k·n per test on a 16-word memory with one-cycle operations
    ks = {"MATS+": 5, "March X": 6, "March C-": 10, "March LR": 14, "March SR": 14, "March SS": 22}
    assert {t["name"]: t["cycles"] for t in tests} == {n: 16 * k for n, k in ks.items()}
    for t in tests:    # the score is the mean of the class coverages (equal weights)
        graded = [v for v in t["classes"].values() if v is not None]
        assert t["score"] == pytest.approx(sum(graded) / len(graded), rel=1e-9)


@pytest.fixture(scope="module")
def real_comparison():
    from marchkit.notation import find_in_library
    from marchkit.report import compare_tests

    mem = make_memory(16, name="osprey_regfile", clock="400MHz")   # invented part
    return compare_tests([find_in_library(n) for n in SIX], mem, faults="static", sort="cycles")


def test_comparison_figure_axes(real_comparison):
    from marchkit.report import comparison_figure

    fig = comparison_figure(real_comparison)
    trade, heat = (a for a in fig.axes if a.get_title(loc="left"))
    assert trade.get_xlabel().startswith("test time") and "score" in trade.get_ylabel()
    assert heat.get_xlabel() == "fault class" and heat.get_ylabel().startswith("test")
    assert [t.get_text() for t in heat.get_xticklabels()] == list(real_comparison.classes) + ["score"]
    assert [t.get_text() for t in heat.get_yticklabels()] == [r.label for r in real_comparison.rows]
    # one label per test on the trade-off panel, and no two labels overlap
    renderer = fig.canvas.get_renderer()
    labels = [t for t in trade.texts if t.get_text() in {r.label for r in real_comparison.rows}]
    assert sorted(t.get_text() for t in labels) == sorted(SIX)
    boxes = [t.get_window_extent(renderer) for t in labels]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (labels[i].get_text(), labels[j].get_text())
    # the heat map cell texts are the per-class coverages
    cell_texts = {t.get_text() for t in heat.texts}
    assert "100" in cell_texts and "0" in cell_texts


def test_plot_files_are_images(real_comparison, tmp_path):
    from PIL import Image

    from marchkit.report import write_comparison_plot

    png = tmp_path / "trade.png"
    write_comparison_plot(real_comparison, png)
    with Image.open(png) as im:
        assert im.format == "PNG"
        w, h = im.size
        assert w >= 1200 and h >= 500 and w > h
        im.verify()
    svg = tmp_path / "trade.svg"
    write_comparison_plot(real_comparison, svg)
    import xml.etree.ElementTree as ET

    root = ET.parse(svg).getroot()
    assert root.tag.endswith("svg")
    assert "March SS" in svg.read_text(encoding="utf-8")      # text kept as text
    with pytest.raises(OutputError, match="exists"):
        write_comparison_plot(real_comparison, png)
    with pytest.raises(OutputError, match=r"\.png or \.svg"):
        write_comparison_plot(real_comparison, tmp_path / "trade.jpg")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["trade.png", "trade.svg"]


def test_time_axis_breaks_between_far_apart_groups():
    from marchkit.report.plots import split_times

    assert split_times([1e-6, 2e-6, 3e-6]) is None
    assert split_times([1e-6, 9e-6, 0.2, 0.2000001]) == 9e-6     # a gap of 22 000×
    assert split_times([1e-6, 20e-6]) is None                     # 20×: one axis still reads well
    assert split_times([5e-6]) is None


def test_broken_axis_figure():
    from marchkit.notation import find_in_library
    from marchkit.report import compare_tests, comparison_figure

    # IFA-9 has two retention pauses (Dekker, Beenker, Thijssen, IEEE TCAD 1990; the library
    # writes each as Del(100ms)), so it lies far to the right of the tests without pauses
    cmp = compare_tests([find_in_library(n) for n in ("MATS+", "March C-", "IFA-9")], make_memory(8),
                        faults="static")
    fig = comparison_figure(cmp)
    trade = next(a for a in fig.axes if a.get_title(loc="left") == "Score against test time")
    assert "broken after" in trade.get_xlabel()
    right = [a for a in fig.axes if a is not trade and a.get_shared_y_axes().joined(a, trade)]
    assert len(right) == 1
    assert {t.get_text() for t in right[0].texts} == {"IFA-9"}
    assert {t.get_text() for t in trade.texts} == {"MATS+", "March C-"}
    lo, hi = right[0].get_xlim()
    ifa = next(r for r in cmp.rows if r.label == "IFA-9")
    assert lo < ifa.seconds < hi and ifa.seconds > 0.2


# ---- the HTML report -----------------------------------------------------------------------

@pytest.fixture(scope="module")
def c_minus_result():
    from marchkit.grade import grade
    from marchkit.notation import find_in_library

    mem = make_memory(16, name="osprey_regfile", clock="400MHz")
    return grade(find_in_library("March C-"), mem, faults="static,SAF,AF")


def test_html_report_is_self_contained(c_minus_result, tmp_path):
    from PIL import Image

    from marchkit.report import write_html_report

    out = tmp_path / "c-minus.html"
    write_html_report(c_minus_result, out)
    text = out.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    # nothing fetched from elsewhere: no URLs, scripts, style sheets or non-data sources
    srcs = re.findall(r'src="([^"]*)"', text)
    bare = re.sub(r'src="data:image/png;base64,[A-Za-z0-9+/=]*"', 'src=""', text)
    assert not re.search(r"(https?:|ftp:)?//[a-z0-9]", bare, re.I)
    assert not re.search(r"url\(", bare)
    assert "<script" not in bare and "<link" not in bare and "@import" not in bare
    assert srcs and all(s.startswith("data:image/png;base64,") for s in srcs)
    with Image.open(io.BytesIO(base64.b64decode(srcs[0].split(",", 1)[1]))) as im:
        assert im.format == "PNG" and im.size[0] > 600
    # per class and per primitive, the completing element, the misses with their reasons
    for c in c_minus_result.classes:
        assert f"<b>{c.cls}</b>" in text
        if c.complete_by is not None:
            assert f"M{c.complete_by} <code>" in text
    assert len(re.findall(r"<tr class=\"(?:short|full)\"><td><code>&lt;", text)) == 48
    missed = [c for c in c_minus_result.classes if c.detected < c.instances]
    # derived from the primitive definitions: March C- has no non-transition write followed
    # by a read, nor two reads in a row, so it misses WDF and DRDF entirely
    assert {"WDF", "DRDF"} <= {c.cls for c in missed}
    import html as _html

    for c in missed:
        assert _html.escape(c.reason, quote=True) in text
    assert "&lt;0w0/1/-&gt;" in text
    _assert_balanced(text)


def _assert_balanced(text):
    """Every element opened is closed, in order (void elements excepted)."""
    from html.parser import HTMLParser

    void = {"meta", "img", "br", "hr", "input", "link"}

    class P(HTMLParser):
        def __init__(self):
            super().__init__()
            self.stack = []

        def handle_starttag(self, tag, attrs):
            if tag not in void:
                self.stack.append(tag)

        def handle_endtag(self, tag):
            assert self.stack and self.stack[-1] == tag, (tag, self.stack[-3:])
            self.stack.pop()

    p = P()
    p.feed(text)
    p.close()
    assert p.stack == []


def test_html_report_writes_atomically(c_minus_result, tmp_path):
    from marchkit.report import write_html_report

    out = tmp_path / "r.html"
    out.write_text("keep me")
    with pytest.raises(OutputError, match="exists"):
        write_html_report(c_minus_result, out)
    assert out.read_text() == "keep me"
    write_html_report(c_minus_result, out, force=True)
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["r.html"]     # no temporary file left
    with pytest.raises(OutputError, match="no directory"):
        write_html_report(c_minus_result, tmp_path / "missing" / "r.html")


# ---- the command line --------------------------------------------------------------------

def test_cli_table(capsys):
    rc = main(["compare", "MATS+", "March C-", "March SS", "--words", "8", "--sort", "coverage"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "cost, score and coverage" in out and "coverage per class" in out
    assert "what each step along the front buys" in out
    lines = [ln for ln in out.splitlines() if ln.startswith(("MATS+", "March C-", "March SS"))]
    assert [ln.split("│")[0].strip() for ln in lines[:3]] == ["March SS", "March C-", "MATS+"]
    assert "8×1" in out


def test_cli_writes_csv_and_plot(tmp_path, capsys):
    from PIL import Image

    csv_path, png = tmp_path / "cmp.csv", tmp_path / "cmp.png"
    rc = main(["compare", "MATS+", "March SS", "--words", "8", "--csv", str(csv_path), "--plot", str(png)])
    assert rc == 0
    out = capsys.readouterr().out
    assert f"wrote {csv_path}" in out and f"wrote {png}" in out
    rows = list(csv.DictReader(csv_path.open(encoding="utf-8")))
    assert [r["test"] for r in rows] == ["MATS+", "March SS"]
    with Image.open(png) as im:
        assert im.format == "PNG" and im.size[0] > 1000
    # both exist now: refused without --force (before any grading), replaced with it
    rc = main(["compare", "MATS+", "--words", "8", "--csv", str(csv_path)])
    assert rc == 2 and "exists; use --force" in capsys.readouterr().err
    rc = main(["compare", "MATS+", "--words", "8", "--csv", str(csv_path), "--force"])
    assert rc == 0 and len(list(csv.DictReader(csv_path.open()))) == 1


def test_cli_library_json(capsys):
    from marchkit.notation import library

    rc = main(["compare", "--library", "MATS+", "--words", "8", "--json", "--sort", "name"])
    assert rc == 0
    js = json.loads(capsys.readouterr().out)
    names = [t["name"] for t in js["tests"]]
    assert len(names) == len(library())           # MATS+ given twice is compared once
    assert names == sorted(names, key=str.casefold)
    assert any(t["pareto"] for t in js["tests"])


@pytest.mark.parametrize("argv, message", [
    (["compare"], "give the tests to compare"),
    (["compare", "MATS+", "--sort", "speed"], "cannot sort by"),
    (["compare", "MATS+", "--plot", "out.jpg"], ".png or .svg"),
    (["compare", "March Q-"], "not a test in the library"),
    (["compare", "MATS+", "--faults", "static,XYZ"], "XYZ"),
])
def test_cli_errors(argv, message, capsys):
    rc = main(argv)
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("error:") and message in err


def test_importing_stays_light():
    code = ("import sys, marchkit, marchkit.report, marchkit.cli; marchkit.cli.build_parser(); "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"


HERON_FILE = """\
# two tests of our own for an invented FIFO macro
test "heron quick"
  {any(w0); up(r0,w1,r1); down(r1,w0,r0)}

test "heron slow"
  {any(w0); up(r0,w1); up(r1,w0); down(r0,w1); down(r1,w0); any(r0); any(r0)}
"""


def test_cli_file_with_several_tests_and_a_notation(tmp_path, capsys):
    f = tmp_path / "heron.march"
    f.write_text(HERON_FILE, encoding="utf-8")
    rc = main(["compare", str(f), "{any(w0); up(r0,w1); down(r1,w0)}", "--words", "8", "--json", "--sort", "given"])
    assert rc == 0
    js = json.loads(capsys.readouterr().out)
    assert [t["name"] for t in js["tests"]] == ["heron quick", "heron slow", "test 1"]
    assert [t["ops_per_cell"] for t in js["tests"]] == [7, 11, 5]
    assert [t["cycles"] for t in js["tests"]] == [56, 88, 40]


def test_progress_reports_every_test():
    from marchkit.notation import find_in_library
    from marchkit.report import compare_tests

    seen = []
    tests = [find_in_library(n) for n in ("MATS+", "March C-")]
    compare_tests(tests, make_memory(8), faults="static",
                  progress=lambda done, total, label: seen.append((done, total, label)))
    assert seen[0] == (0, 2, "MATS+") and seen[-1] == (2, 2, "")
    assert all(a[0] <= b[0] for a, b in zip(seen, seen[1:]))          # never goes back
    assert {lab for _, _, lab in seen} == {"MATS+", "March C-", ""}
