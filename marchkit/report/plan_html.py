"""An SoC test plan as one self-contained HTML page (no scripts, nothing fetched, the Gantt
chart embedded as a base64 PNG): the summary, requirements no candidate meets, the test per
memory type with every candidate's coverage of the required classes, the schedule picture,
and one table per BIST group.  Works on the plan's plain data (``Plan.to_json()``).
"""

from __future__ import annotations

import base64

from .compare import format_frequency, format_time, percent_text
from .html import _CSS, _e
from .style import figure_bytes, rc, write_file

_EXTRA_CSS = """
.warn { border: 2px solid var(--miss); border-radius: 6px; padding: 8px 14px; margin: 14px 0; }
.warn h2 { border: 0; margin: 4px 0; color: var(--miss); }
td.ok { color: var(--accent); } td.no { color: var(--miss); font-weight: 600; }
tr.chosen td { background: #eef5fb; }
details { margin: 6px 0; } summary { cursor: pointer; font-weight: 600; }
"""


def _w(watts: float) -> str:
    for unit, scale in (("W", 1), ("mW", 1e3), ("µW", 1e6)):
        if watts * scale >= 1 or unit == "µW":
            return f"{watts * scale:.3g} {unit}"
    return f"{watts} W"  # pragma: no cover


def plan_html(data: dict) -> str:
    from .. import __version__
    from .gantt import group_order, plan_figure

    import matplotlib

    fig = plan_figure(data)
    with matplotlib.rc_context(rc()):
        png = figure_bytes(fig, "png", dpi=100)
    img = base64.b64encode(png).decode("ascii")
    s = data["schedule"]
    inst = data["instances"]
    types = data["types"]
    status = ("optimal (proven)" if s["status"] == "optimal" else
              f"feasible; proven lower bound {format_time(s['lower_bound_s'])}, gap {100 * s['gap']:.1f} %")
    out = []
    a = out.append
    a("<!DOCTYPE html>")
    a('<html lang="en"><head><meta charset="utf-8">')
    a('<meta name="viewport" content="width=device-width, initial-scale=1">')
    a(f"<title>{_e(data['soc'])}: memory test plan</title>")
    a(f"<style>{_CSS}{_EXTRA_CSS}</style></head><body><main>")
    a('<p class="kicker">marchkit SoC memory test plan</p>')
    a(f"<h1>{_e(data['soc'])}</h1>")
    g = data["graded"]
    facts = [
        ("memories", f"{_n(len(inst), 'instance')} of {_n(len({t['type'] for t in types}), 'memory type')} in "
                     f"{_n(len(data['groups']), 'BIST group')}"),
        ("faults", data["faults"]), ("pairs", data["pairs"]),
        ("power budget", f"{_w(s['budget_w'])} (peak drawn {_w(s['peak_w'])})"),
        ("schedule", f"{status}; {s['solver']} (solved in {s['solve_seconds']:.2g} s)"),
        ("grading", f"{g['jobs']} test × memory pairs: {g['computed']} graded ({g['workers']}), "
                    f"{g['cached']} from the cache"),
        ("file", data["file"]),
    ]
    a('<div class="summary">')
    a(f'<div class="score">total test time<b>{_e(format_time(data["total_test_time_s"]))}</b>'
      f"{_e('optimal' if s['status'] == 'optimal' else 'best found')}</div>")
    a('<dl class="facts">' + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in facts) + "</dl>")
    a("</div>")

    short = [t for t in types if not t["meets"]]
    if short:
        a('<div class="warn"><h2>Requirements no candidate meets</h2>')
        a("<p>The memories of these types would be tested less than required. Add a stronger "
          "candidate test, or change the requirement knowingly.</p><ul>")
        for t in short:
            for u in t["unmet"]:
                a(f"<li><b>{_e(t['type'])}</b> at {_e(format_frequency(t['clock_hz']))}: {_e(u['class'])} "
                  f"≥ {u['required']:g} % — best {percent_text(u['best'], 1)} % ({_e(u['best_test'])}); "
                  f"planned with {_e(t['test'])}</li>")
        a("</ul></div>")

    a("<h2>Schedule</h2>")
    a(f'<figure><img alt="Gantt chart of the memory tests per BIST group, and the power drawn over time" '
      f'src="data:image/png;base64,{img}"><figcaption>Top: one row per BIST group (a controller tests its '
      "memories one after the other), one bar per memory, coloured by test. Bottom: power drawn by the "
      "memories under test, against the budget.</figcaption></figure>")

    a("<h2>Test per memory type</h2>")
    a('<table><thead><tr><th>type</th><th>memory</th><th class="num">clock</th><th class="num">instances</th>'
      '<th>test</th><th class="num">time each</th><th class="num">power</th><th>requirement</th></tr></thead><tbody>')
    for t in types:
        m = t["memory"]
        geo = f"{m['words']}×{m['bits']}, mux {m['mux']}, {', '.join(m['backgrounds'])}"
        a(f'<tr class="{"full" if t["meets"] else "short"}"><td><b>{_e(t["type"])}</b> <span class="note">'
          f'{_e(t["kind"])}</span></td><td>{_e(geo)}</td><td class="num">{_e(format_frequency(t["clock_hz"]))}</td>'
          f'<td class="num">{t["instances"]}</td><td>{_e(t["test"])}</td>'
          f'<td class="num">{_e(format_time(t["seconds"]))}</td><td class="num">{_e(_w(t["power_w"]))}</td>'
          f'<td class="{"ok" if t["meets"] else "no"}">{"met" if t["meets"] else "not met"}</td></tr>')
    a("</tbody></table>")

    a("<h2>Candidates per memory type</h2>")
    a('<p class="note">Coverage of each required class; the chosen test is highlighted (the shortest '
      "that meets every requirement).</p>")
    for t in types:
        req = t["required"]
        a(f"<details><summary>{_e(t['type'])} at {_e(format_frequency(t['clock_hz']))} — {_e(t['test'])}"
          "</summary>")
        a('<table><thead><tr><th>test</th><th class="num">time</th>'
          + "".join(f'<th class="num">{_e(c)} ≥ {p:g} %</th>' for c, p in req.items()) + "</tr></thead><tbody>")
        for c in t["candidates"]:
            chosen = c["test"] == t["test"]
            cells = []
            for cls, p in req.items():
                cov = c["coverage"].get(cls)
                ok = cls not in c["short"]
                txt = "—" if cov is None else percent_text(cov, 2)
                cells.append(f'<td class="num {"ok" if ok else "no"}">{txt}</td>')
            a(f'<tr class="{"chosen" if chosen else ""}"><td>{_e(c["test"])}</td>'
              f'<td class="num">{_e(format_time(c["seconds"]))}</td>{"".join(cells)}</tr>')
        a("</tbody></table></details>")

    a("<h2>BIST groups</h2>")
    by_group: dict = {}
    for r in inst:
        by_group.setdefault(r["group"], []).append(r)
    for grp in group_order(data):
        rows = sorted(by_group[grp], key=lambda r: (r["start_s"], r["name"]))
        a(f"<h3>{_e(grp)} <span class='note'>({_e(rows[0]['domain'])}, {len(rows)} "
          f"memor{'y' if len(rows) == 1 else 'ies'})</span></h3>")
        a('<table><thead><tr><th>memory</th><th>type</th><th>test</th><th class="num">start</th>'
          '<th class="num">end</th><th class="num">power</th></tr></thead><tbody>')
        for r in rows:
            a(f'<tr class="{"full" if r["meets"] else "short"}"><td>{_e(r["name"])}</td><td>{_e(r["type"])}</td>'
              f'<td>{_e(r["test"])}</td><td class="num">{_e(format_time(r["start_s"]))}</td>'
              f'<td class="num">{_e(format_time(r["end_s"]))}</td><td class="num">{_e(_w(r["power_w"]))}</td></tr>')
        a("</tbody></table>")
    a(f"<footer>Written by marchkit {_e(__version__)}. Coverage is coverage of the fault models and memory "
      "descriptions in the SoC file; times assume the clock of each memory's domain.</footer>")
    a("</main></body></html>")
    return "\n".join(out) + "\n"


def write_plan_report(data: dict, path, force: bool = False) -> None:
    """Write :func:`plan_html` atomically; an existing file is refused unless ``force``."""
    write_file(path, plan_html(data), force=force)


def _n(count: int, noun: str) -> str:
    """``1 memory type``, ``20 memory types``."""
    return f"{count:,} {noun}{'' if count == 1 else 's'}"
