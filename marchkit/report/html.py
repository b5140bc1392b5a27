"""A grade result as one self-contained HTML page: no scripts, no style sheets or fonts
from elsewhere, the figure embedded as a base64 PNG.  Sections: the summary, coverage per
class (figure and table, with the element by which each class is complete), the test's
elements, what the test misses and why, and every fault primitive graded.
"""

from __future__ import annotations

import base64
import html

from .compare import format_frequency, format_time, memory_label, percent_text
from .style import BLUE, INK, MUTED, TRACK, VERMILLION, figure_bytes, new_figure, rc, write_file

_CSS = """
:root { --ink:#1f2328; --muted:#5d6570; --line:#d9dde3; --soft:#f4f6f8; --accent:%(blue)s; --miss:%(verm)s; }
* { box-sizing: border-box; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1080px; margin: 0 auto; padding: 28px 24px 48px; }
.kicker { margin: 0; color: var(--muted); font-size: 13px; letter-spacing: .06em; text-transform: uppercase; }
h1 { margin: 2px 0 6px; font-size: 28px; }
h2::first-letter { text-transform: uppercase; }
h2 { margin: 36px 0 10px; font-size: 19px; border-bottom: 2px solid var(--ink); padding-bottom: 4px; }
code, .mono { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, "DejaVu Sans Mono", monospace; font-size: 13.5px; }
.notation { margin: 0 0 14px; padding: 8px 10px; background: var(--soft); border-left: 4px solid var(--accent); overflow-x: auto; white-space: nowrap; }
.summary { display: flex; flex-wrap: wrap; gap: 18px; align-items: stretch; }
.score { min-width: 210px; padding: 12px 16px; border: 1px solid var(--line); border-radius: 6px; }
.score b { display: block; font-size: 34px; line-height: 1.1; }
.facts { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 0; flex: 1; min-width: 320px; }
.facts dt { color: var(--muted); }
.facts dd { margin: 0; }
.note { color: var(--muted); font-size: 13.5px; margin: 4px 0 10px; }
figure { margin: 8px 0 14px; }
figure img { max-width: 100%%; height: auto; border: 1px solid var(--line); }
figcaption { color: var(--muted); font-size: 13px; }
table { border-collapse: collapse; width: 100%%; font-size: 14px; }
th, td { text-align: left; padding: 5px 8px; border-bottom: 1px solid var(--line); vertical-align: top; }
th { background: var(--soft); font-weight: 600; white-space: nowrap; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.short td:first-child { box-shadow: inset 4px 0 0 var(--miss); }
.meter { display: inline-block; width: 90px; height: 10px; background: #e6e8eb; vertical-align: middle; margin-right: 6px; }
.meter span { display: block; height: 100%%; background: var(--accent); }
td:has(> .meter) { white-space: nowrap; }
.pct { white-space: nowrap; }
.tag { display: inline-block; padding: 0 6px; border: 1px solid var(--miss); color: var(--miss); border-radius: 3px; font-size: 12px; font-weight: 600; }
.tag.full { border-color: var(--accent); color: var(--accent); }
ul.missed { padding-left: 20px; }
ul.missed li { margin-bottom: 6px; }
footer { margin-top: 40px; color: var(--muted); font-size: 12.5px; }
""" % {"blue": BLUE, "verm": VERMILLION}


ALL_DETECTED = '<span class="tag full">all detected</span>'


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _pct(cov: float, detected: int | None = None, instances: int | None = None) -> str:
    """Coverage in % with two decimals; a partial coverage never shows as 100 % or 0 %."""
    return '<span class="pct">' + percent_text(cov, 2, detected, instances).replace(".00", "") + "&nbsp;%</span>"


def _th(label: str) -> str:
    """A column head (numbers right-aligned)."""
    from .labels import DETECTED, INSTANCES, WEIGHT

    num = ' class="num"' if label in (INSTANCES, DETECTED, WEIGHT) else ""
    return f"<th{num}>{_e(label)}</th>"


def _meter(cov: float) -> str:
    w = max(0.0, min(100.0, 100.0 * float(cov)))
    return f'<span class="meter" aria-hidden="true"><span style="width:{w:.1f}%"></span></span>'


def _element_text(el) -> str:
    from ..notation.printer import format_item

    return format_item(el)


def report_figure(result):
    """Coverage per class (bars) beside the element by which each class is complete."""
    import matplotlib

    classes = list(result.classes)
    n_el = len(result.test.elements)
    with matplotlib.rc_context(rc()):
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        fig = new_figure(9.6, max(2.6, 0.34 * len(classes) + 1.5))
        FigureCanvasAgg(fig)
        ax_c, ax_e = fig.subplots(1, 2, sharey=True, gridspec_kw={"width_ratios": [1.15, 1]})
        ys = list(range(len(classes)))
        names = [c.cls for c in classes]
        cov = [100.0 * c.coverage for c in classes]
        ax_c.barh(ys, [100] * len(ys), color=TRACK, height=0.62, zorder=1)
        ax_c.barh(ys, cov, color=BLUE, height=0.62, zorder=2, label="detected")
        for y, c in zip(ys, classes):
            ax_c.text(101.5, y, f"{c.detected:,}/{c.instances:,}", va="center", ha="left",
                      fontsize=7.5, color=INK if c.detected == c.instances else VERMILLION,
                      fontweight="normal" if c.detected == c.instances else "bold")
        ax_c.set_xlim(0, 128)
        ax_c.set_xticks([0, 25, 50, 75, 100])
        ax_c.set_yticks(ys, names)
        ax_c.invert_yaxis()
        ax_c.set_xlabel("coverage (%) — detected / instances at the right")
        ax_c.set_ylabel("fault class")
        ax_c.set_title("Coverage per class", pad=12)
        ax_c.grid(True, axis="x", color=TRACK, linewidth=0.6, zorder=0)
        ax_c.set_axisbelow(True)

        ax_e.set_title("Element by which the class is complete", pad=12)
        full_x, full_y, part_x, part_y = [], [], [], []
        for y, c in zip(ys, classes):
            if c.complete_by is None:
                ax_e.text(-0.4, y, "not detected", va="center", ha="left", fontsize=7.5,
                          color=VERMILLION, fontweight="bold")
                continue
            x = c.complete_by
            ax_e.plot([0, x], [y, y], color=MUTED, linewidth=0.8, zorder=1)
            (full_x if c.detected == c.instances else part_x).append(x)
            (full_y if c.detected == c.instances else part_y).append(y)
        if full_x:
            ax_e.scatter(full_x, full_y, marker="o", s=40, facecolor=BLUE, edgecolor=INK,
                         linewidth=0.8, zorder=3, label="all instances detected")
        if part_x:
            ax_e.scatter(part_x, part_y, marker="D", s=34, facecolor="white", edgecolor=VERMILLION,
                         linewidth=1.5, zorder=3, label="some instances missed")
        # retention pauses sit between elements: a dotted line where each one falls
        ei = -1
        for item in result.test.items:
            if hasattr(item, "ops"):
                ei += 1
                continue
            x = ei + 0.5
            ax_e.axvline(x, color=MUTED, linewidth=0.9, linestyle=":", zorder=0)
            ax_e.annotate(_element_text(item), xy=(x, 1.0), xycoords=("data", "axes fraction"),
                          xytext=(0, 2), textcoords="offset points", ha="center", va="bottom",
                          fontsize=6.5, color=MUTED)
        ax_e.set_xlim(-0.5, n_el - 0.5)
        ax_e.set_xticks(range(n_el),
                        [f"M{i} {_element_text(el)}" for i, el in enumerate(result.test.elements)],
                        rotation=35, ha="right", rotation_mode="anchor", fontsize=7)
        ax_e.set_xlabel("march element")
        ax_e.grid(True, axis="x", color=TRACK, linewidth=0.6, zorder=0)
        ax_e.set_axisbelow(True)
        ax_e.tick_params(axis="y", length=0)
        if full_x or part_x:
            fig.legend(*ax_e.get_legend_handles_labels(), loc="outside upper right", ncol=2,
                       handletextpad=0.3)
    return fig


def html_report(result, score=None, weights=None) -> str:
    """The page as text.  ``score`` (a Fraction, with the ``weights`` it was taken with) is
    shown as in ``marchkit grade``; without it the score is taken with equal weights.  Labels,
    titles and summary texts come from :mod:`.labels`, as on the terminal."""
    from . import labels as L
    from .. import __version__
    from ..notation import format_notation

    t = result.test
    mem = result.memory
    name = t.name or "(unnamed test)"
    total = result.total
    classes = list(result.classes)
    prims = list(result.primitives)

    import matplotlib

    fig = report_figure(result)
    with matplotlib.rc_context(rc()):
        png = figure_bytes(fig, "png", dpi=110)
    img = base64.b64encode(png).decode("ascii")

    if score is None:
        from ..grade.score import class_score

        score = class_score(classes, weights)
    facts = dict(zip(L.FACTS, [
        f"{t.length_text} ({t.ops_per_cell} operations per address)",
        L.memory_text(mem),
        result.faults_spec,
        result.pairs_spec,
        getattr(result, "engine", "") or "—",
        L.score_text(score, weights, classes),
        L.total_text(total),
        L.cost_text(t, mem, result.ops, result.cycles, result.seconds),
    ]))
    facts = list(facts.items())
    empty = list(getattr(result, "empty_classes", []) or [])
    if empty:
        facts.append(("no instances", ", ".join(empty) + " (nothing to grade on this memory and pair scope)"))

    out = []
    a = out.append
    a("<!DOCTYPE html>")
    a('<html lang="en"><head><meta charset="utf-8">')
    a('<meta name="viewport" content="width=device-width, initial-scale=1">')
    a(f"<title>{_e(name)}: fault coverage on {_e(memory_label(mem))}</title>")
    a(f"<style>{_CSS}</style></head><body><main>")
    a('<p class="kicker">marchkit grade report</p>')
    a(f"<h1>{_e(name)}</h1>")
    a(f'<p class="notation mono">{_e(format_notation(t))}</p>')
    if getattr(t, "source", ""):
        a(f'<p class="note">Source: {_e(t.source)}</p>')
    a('<div class="summary">')
    from ..grade.score import _pct as _score_pct

    a(f'<div class="score">score<b>{_score_pct(score)}&nbsp;%</b>'
      f"{_e(L.total_text(total).replace(' (', ' total (', 1))}</div>")
    a('<dl class="facts">' + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in facts) + "</dl>")
    a("</div>")

    # ---- classes
    a(f"<h2>{_e(L.SECTIONS['classes'])}</h2>")
    a(f'<figure><img alt="Coverage per fault class, and the march element by which each class is complete" '
      f'src="data:image/png;base64,{img}"><figcaption>Left: share of each class detected. Right: the element by '
      f"which every instance of the class that the test detects has been detected (filled circle: the whole "
      f"class; open diamond: part of it).</figcaption></figure>")
    a('<table class="classes"><thead><tr>' + "".join(_th(c) for c in L.GRADE_CLASS_COLUMNS) + "</tr></thead><tbody>")
    elements = list(t.elements)
    for c in classes:
        short = c.detected < c.instances
        def at(e):
            if e is None:
                return '<span class="tag">not detected</span>'
            return f"M{e} <code>{_e(_element_text(elements[e]))}</code>" if e < len(elements) else f"M{e}"

        first = at(getattr(c, "first_by", None)) if c.detected else "—"
        # as on the terminal: "all found by" only for a class detected completely
        where = at(c.complete_by) if c.instances and c.detected == c.instances else "—"
        a(f'<tr class="{"short" if short else "full"}"><td><b>{_e(c.cls)}</b></td>'
          f'<td class="num">{c.instances:,}</td><td class="num">{c.detected:,}</td>'
          f"<td>{_meter(c.coverage)}{_pct(c.coverage, c.detected, c.instances)}</td><td>{first}</td><td>{where}</td>"
          f"<td>{_e(c.reason) if short else ALL_DETECTED}</td></tr>")
    a("</tbody></table>")

    # ---- elements
    a(f"<h2>{_e(L.SECTIONS['elements'])}</h2>")
    done: dict[int, list[str]] = {}
    for c in classes:
        if c.complete_by is not None:
            done.setdefault(c.complete_by, []).append(c.cls)
    a("<table><thead><tr>" + "".join(_th(c) for c in L.ELEMENT_COLUMNS) + "</tr></thead><tbody>")
    ei = 0
    for item in t.items:
        if hasattr(item, "ops"):
            a(f'<tr><td>M{ei}</td><td><code>{_e(_element_text(item))}</code></td>'
              f'<td class="num">{item.ops_per_cell}</td><td>{_e(", ".join(done.get(ei, [])))}</td></tr>')
            ei += 1
        elif hasattr(item, "offsets"):      # a hammer item: row activations, no operation
            a(f'<tr><td>hammer</td><td><code>{_e(_element_text(item))}</code></td>'
              f'<td class="num">0 ({item.activations_per_row:,} activations per row)</td><td></td></tr>')
        else:
            a(f'<tr><td>pause</td><td><code>{_e(_element_text(item))}</code></td>'
              f'<td class="num">0</td><td></td></tr>')
    a("</tbody></table>")

    # ---- missed
    a(f"<h2>{_e(L.SECTIONS['missed'])}</h2>")
    missed_cls = [c for c in classes if c.detected < c.instances]
    if not missed_cls:
        a("<p>Every fault instance graded is detected.</p>")
    else:
        a('<ul class="missed">')
        for c in missed_cls:
            a(f"<li><b>{_e(c.cls)}</b>: {c.instances - c.detected:,} of {c.instances:,} instances missed — {_e(c.reason)}")
            ps = [p for p in prims if p.cls == c.cls and p.detected < p.instances]
            if ps:
                a("<br>primitives: " + ", ".join(
                    f"<code>{_e(p.fault)}</code>" + ("" if p.detected == 0 else f" ({p.instances - p.detected:,} of {p.instances:,})")
                    for p in ps))
            examples = [txt for cls, txt in result.missed_examples() if cls == c.cls][:6]
            if examples:
                a("<br>for example: " + ", ".join(f"<code>{_e(x)}</code>" for x in examples))
            a("</li>")
        a("</ul>")

    # ---- primitives
    if prims:
        a(f"<h2>{_e(L.SECTIONS['kinds'])}</h2>")
        n_full = sum(p.detected == p.instances for p in prims)
        a(f'<p class="note">{n_full} of {len(prims)} fault kinds (primitives, models, linked and neighbourhood faults) fully detected. '
          "Notation &lt;S/F/R&gt; of van de Goor &amp; Al-Ars (VTS 2000).</p>")
        a('<table class="primitives"><thead><tr>' + "".join(_th(c) for c in L.GRADE_KIND_COLUMNS)
          + "</tr></thead><tbody>")
        for p in prims:
            short = p.detected < p.instances
            cov = p.detected / p.instances if p.instances else 1.0
            a(f'<tr class="{"short" if short else "full"}"><td><code>{_e(p.fault)}</code></td><td>{_e(p.cls)}</td>'
              f'<td class="num">{p.instances:,}</td><td class="num">{p.detected:,}</td>'
              f"<td>{_meter(cov)}{_pct(cov, p.detected, p.instances)}</td><td>{_e(p.reason) if short else ''}</td></tr>")
        a("</tbody></table>")

    a(f"<footer>Written by marchkit {_e(__version__)}. A fault instance counts as detected only when it is "
      "detected for every initial value of the cells it involves and for both orders of every ⇕ element.</footer>")
    a("</main></body></html>")
    return "\n".join(out) + "\n"


def write_html_report(result, path, force: bool = False, score=None, weights=None) -> None:
    """Write :func:`html_report` to ``path`` under a temporary name, then rename it into
    place; an existing file is refused unless ``force``."""
    from ..files import target_kind

    target_kind(path, force)
    write_file(path, html_report(result, score=score, weights=weights), force=force)
