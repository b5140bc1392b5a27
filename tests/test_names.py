"""Hostile names (test and memory names) in every generated format this branch writes,
checked with independent readers (issue 17, "Generated code injection"):

* VCD: vcdvcd (PyPI ``vcdvcd``) must see exactly the ten pattern signals;
* STIL: the independent parser semi-ate-stil must parse the file;
* HTML: Python's ``html.parser`` must find no element the name could have opened;
* CSV / JSON: Python's ``csv`` and ``json`` read the name back as one field / string;
* plots: matplotlib draws ``$`` in a name as text (no mathtext crash).

(Verilog text is escaped on the BIST branch.)
"""

from __future__ import annotations

import csv
import io
import json
from html.parser import HTMLParser

import pytest

NAMES = [
    'x\nmodule pwn; initial $display("INJECTED"); endmodule\n//',
    "a $end $var wire 1 ! clk $end b",
    r"a$\frac{$ b",
    "<script>alert(1)</script><img src=x onerror=alert(2)>",
    'q "quoted", comma *} Ann {* x',
]


def _files(tmp_path, name):
    esc = name.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
    tf = tmp_path / "t.march"
    tf.write_text(f'test "{esc}"\n  {{⇕(w0); ⇑(r0,w1); ⇓(r1,w0)}}\n', encoding="utf-8")
    mf = tmp_path / "m.toml"
    mf.write_text(f'[memory]\nname = "{esc}"\nwords = 8\nbits = 2\n', encoding="utf-8")
    return f"{tf}", f"{mf}"


@pytest.mark.parametrize("name", NAMES)
def test_vcd_header_survives_hostile_names(cli, tmp_path, name):
    vcdvcd = pytest.importorskip("vcdvcd")
    t, m = _files(tmp_path, name)
    out = tmp_path / "p.vcd"
    code, _, err = cli("export", t, "--memory", m, "-o", str(out), "-q")
    assert code == 0, err
    v = vcdvcd.VCDVCD(str(out))
    names = ("clk", "address", "we", "re", "wdata", "expect", "mask", "run", "element", "op")
    assert sorted(v.signals) == sorted(f"pattern.{n}" for n in names)
    head = out.read_text().split("$enddefinitions")[0]
    comment = head.split("$comment", 1)[1].split("$end", 1)[0]
    assert "$" not in comment and "\n" not in comment.strip("\n ")


@pytest.mark.parametrize("name", NAMES)
def test_stil_parses_with_hostile_names(cli, tmp_path, name):
    mod = pytest.importorskip("Semi_ATE.STIL.parsers.STILParser")
    t, m = _files(tmp_path, name)
    out = tmp_path / "p.stil"
    code, _, err = cli("export", t, "--memory", m, "-o", str(out), "-q")
    assert code == 0, err
    p = mod.STILParser(str(out))
    assert p.parse_syntax() is not None, p.err_msg
    p.parse_semantic()
    assert p.is_parsing_done, p.err_msg


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.attrs, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(a for a, _ in attrs)

    def handle_data(self, data):
        self.text.append(data)


@pytest.mark.parametrize("name", NAMES)
def test_html_report_is_browser_safe(cli, tmp_path, name):
    t, m = _files(tmp_path, name)
    out = tmp_path / "r.html"
    code, _, err = cli("grade", t, "--memory", m, "--report", str(out))
    assert code == 0, err
    p = _Tags()
    p.feed(out.read_text(encoding="utf-8"))
    assert "script" not in p.tags and "onerror" not in p.attrs
    # the name is there as text, in one piece (html.parser unescapes entities)
    first = name.split("\n")[0]
    assert any(first in chunk for chunk in p.text)


@pytest.mark.parametrize("name", NAMES)
def test_compare_csv_json_and_plot(cli, tmp_path, name):
    t, m = _files(tmp_path, name)
    c, png = tmp_path / "c.csv", tmp_path / "c.png"
    code, out, err = cli("compare", t, "MATS+", "--memory", m, "--csv", str(c), "--plot", str(png), "--json")
    assert code == 0, err
    rows = list(csv.DictReader(io.StringIO(c.read_text(encoding="utf-8"))))
    assert {r["test"] for r in rows} == {name, "MATS+"}
    data = json.loads(out)
    assert {r["name"] for r in data["tests"]} == {name, "MATS+"}
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
