"""A comparison as one self-contained HTML page (no scripts, nothing fetched from elsewhere,
the figure embedded as a base64 PNG): the table of cost, score and coverage, the plot of the
score against test time with the heat map of coverage per class, and the per-class detail
(instances, weight, and each test's coverage of the class).  Every name is escaped."""

from __future__ import annotations

import base64
import html

from . import labels as L
from .compare import format_time, percent_text
from .html import _CSS
from .style import write_file


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _p(v: float | None, exact=None, sign: bool = True) -> str:
    """A percentage; ``sign=False`` under a label that says "%" already (as on the terminal)."""
    pc = "&nbsp;%" if sign else ""
    if v is None:
        return '<span class="note">n/a</span>'
    if exact is not None and exact in (0, 1):
        return ("100" if exact == 1 else "0") + pc
    return percent_text(v, 2) + pc


def compare_html(cmp) -> str:
    import matplotlib

    from .plots import comparison_figure
    from .style import figure_bytes, rc

    fig = comparison_figure(cmp)
    with matplotlib.rc_context(rc()):
        png = figure_bytes(fig, "png", dpi=110)
    import matplotlib.pyplot as plt

    plt.close(fig)
    img = base64.b64encode(png).decode("ascii")
    rows = list(cmp.rows)
    n_inst = rows[0].instances if rows else 0
    graded = [c for c in cmp.classes if cmp.class_instances.get(c)]
    equal = len({cmp.weights.get(c, 1.0) for c in graded}) <= 1
    out = []
    a = out.append
    a("<!DOCTYPE html>")
    a('<html lang="en"><head><meta charset="utf-8">')
    a('<meta name="viewport" content="width=device-width, initial-scale=1">')
    a(f"<title>{len(rows)} march tests on {_e(cmp.memory_label)}</title>")
    a(f"<style>{_CSS}</style></head><body><main>")
    a('<p class="kicker">marchkit comparison report</p>')
    a(f"<h1>{len(rows)} tests on {_e(cmp.memory_label)}</h1>")
    a(f'<p class="note">faults {_e(cmp.faults_spec)} ({n_inst:,} instances), pairs {_e(cmp.pairs_spec)}. '
      f"Score: the mean of the per-class coverages, {'equal weights' if equal else 'weighted as below'}; "
      f"the Pareto front is taken on cycles and {_e(cmp.value_name)}.</p>")
    a(f"<h2>{_e(L.SECTIONS['tests'])}</h2>")
    a("<table><thead><tr>" + "".join(f'<th{"" if c in (L.TEST, L.FRONT) else " class=num"}>{_e(c)}</th>'
                                   for c in L.COMPARE_COLUMNS) + "</tr></thead><tbody>")
    for r in rows:
        a(f"<tr><td>{'<b>' + _e(r.label) + '</b>' if r.pareto else _e(r.label)}</td>"
          f'<td class="num">{_e(r.length)}</td><td class="num">{r.ops:,}</td><td class="num">{r.cycles:,}</td>'
          f'<td class="num">{_e(format_time(r.seconds))}</td><td class="num">{r.detected:,}</td>'
          f'<td class="num">{_p(r.score, r.exact_score, False)}</td>'
          f'<td class="num">{_p(r.coverage, r.exact_coverage, False)}</td><td>{"yes" if r.pareto else "no"}</td></tr>')
    a("</tbody></table>")
    a("<h2>score against test time, coverage per class</h2>")
    a(f'<figure><img alt="score against test time and a heat map of coverage per class" '
      f'src="data:image/png;base64,{img}"><figcaption>Bold names lie on the Pareto front.</figcaption></figure>')
    a(f"<h2>{_e(L.SECTIONS['per_class'])}</h2>")
    a(f'<table><thead><tr><th>{_e(L.CLASS)}</th><th class="num">{_e(L.INSTANCES)}</th><th class="num">{_e(L.WEIGHT)}</th>'
      + "".join(f'<th class="num">{_e(r.label)}</th>' for r in rows) + "</tr></thead><tbody>")
    for c in cmp.classes:
        n = cmp.class_instances.get(c, 0)
        a(f'<tr><td>{_e(c)}</td><td class="num">{n:,}</td><td class="num">{cmp.weights.get(c, 1.0):g}</td>'
          + "".join(f'<td class="num">{_p(r.classes.get(c), None, False)}</td>' for r in rows) + "</tr>")
    a("</tbody></table>")
    a('<footer>Coverage is coverage of the fault models and the memory model given; a defect that '
      "behaves like no listed model is not covered by a 100&nbsp;% here.</footer>")
    a("</main></body></html>")
    return "\n".join(out) + "\n"


def write_compare_report(cmp, path, force: bool = False) -> None:
    from ..files import target_kind

    target_kind(path, force)
    write_file(path, compare_html(cmp), force=force)
