"""`marchkit grade TEST`: which faults a test catches on a memory, and at what cost."""

from __future__ import annotations

import json
import sys


def register(sub):
    from .common import add_fault_options, add_memory_options, add_summary_options

    p = sub.add_parser(
        "grade", help="fault-simulate a test on a memory and grade its coverage",
        description="Fault-simulate TEST (a library name, a file, or a notation starting with '{') on a "
        "memory model and report coverage per fault class, with operations, cycles and test time.",
    )
    p.add_argument("test", metavar="TEST")
    add_memory_options(p)
    add_fault_options(p)
    add_summary_options(p)
    g = p.add_argument_group("output")
    g.add_argument("--json", action="store_true", help="print the result as JSON")
    g.add_argument("--primitives", action="store_true", help="also list every fault kind graded (each primitive, model, linked or neighbourhood fault)")
    g.add_argument("--missed", type=int, default=0, metavar="N",
                   help="name up to N undetected instances of each fault kind (cells as 'word W bit B')")
    g.add_argument("--report", metavar="FILE.html", help="write a self-contained HTML report")
    g.add_argument("--force", action="store_true", help="replace an existing report file")
    p.set_defaults(func=run)


def fmt_time(seconds: float) -> str:
    for unit, scale in (("s", 1), ("ms", 1e3), ("µs", 1e6), ("ns", 1e9)):
        if seconds * scale >= 1 or unit == "ns":
            return f"{seconds * scale:.4g} {unit}"
    return f"{seconds} s"  # pragma: no cover


def fmt_clock(hz) -> str:
    from ..report.compare import format_frequency

    return format_frequency(hz)


def memory_line(mem) -> str:
    """The memory in one line (the same text as the HTML report's "memory")."""
    from ..report.labels import memory_text

    return memory_text(mem)


def element_label(test, index, short: bool = False) -> str:
    """``M2 ⇑(r1,w0)`` (``M2`` when ``short``): elements count from 0 everywhere in marchkit."""
    if index is None:
        return "—"
    if short:
        return f"M{index}"
    from ..notation.printer import format_item

    return f"M{index} {format_item(test.elements[index])}"


def make_progress(enabled: bool):
    """A callback for the engine that drives a rich progress bar on a terminal."""
    if not enabled:
        return None, None
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    prog = Progress(TextColumn("{task.description}"), BarColumn(), TimeElapsedColumn(),
                    console=__import__("rich.console", fromlist=["Console"]).Console(stderr=True),
                    transient=True, auto_refresh=False)   # no refresh thread: the engine may fork
    task = prog.add_task("grading", total=1)

    def cb(what, i, n):
        prog.update(task, total=max(n, 1), completed=i, description=f"grading: {what}")
        prog.refresh()

    return prog, cb


def run(args) -> int:
    from ..faults import select_faults
    from ..grade import grade
    from .common import (EXIT_REQUIREMENT, check_reference_time, check_sizes, console, load_test, memory_from_args, provenance,
                         retention_from_args, summary_from_args, thresholds_from_args)

    # everything that can be wrong with the command is found before any grading
    if args.missed < 0:
        from ..errors import InputError

        raise InputError("--missed takes a number of instances, 0 or more")
    mem = memory_from_args(args)
    if args.engine == "fast":          # a size the engine refuses is refused before anything else
        from ..engine.setup import check_limits

        check_limits(mem)
    test = load_test(args.test)
    thresholds = thresholds_from_args(args)
    if args.report is not None:
        from ..files import target_kind

        target_kind(args.report, args.force)
    retention = retention_from_args(args)
    check_sizes(mem, args.faults, args.pairs, retention)
    check_reference_time(args, [test], mem, retention)
    weights, requirements = summary_from_args(args, select_faults(args.faults, retention))
    prog, cb = make_progress(sys.stderr.isatty() and not args.json)
    if prog:
        with prog:
            res = grade(test, mem, args.faults, args.pairs, retention, args.engine, cb,
                        examples=args.missed, thresholds=thresholds)
    else:
        res = grade(test, mem, args.faults, args.pairs, retention, args.engine,
                    examples=args.missed, thresholds=thresholds)
    from ..grade.score import class_score, unmet

    score = class_score(res.classes, weights)
    missing = unmet(res, requirements, weights)
    if args.report is not None:
        from ..report import write_html_report

        write_html_report(res, args.report, force=args.force, score=score, weights=weights)
    if args.json:
        from ..notation import format_notation

        js = res.to_json()
        js["score"] = {"value": float(score), "weights": weights,
                       "meaning": "weighted mean of the per-class coverages"}
        if requirements:
            js["requirements"] = {"required": requirements, "unmet": missing, "met": not missing}
        js["provenance"] = provenance(args, mem, retention, res.engine, format_notation(res.test))
        print(json.dumps(js, indent=2, ensure_ascii=False))
        return EXIT_REQUIREMENT if missing else 0
    con = console()
    show_result(res, con, primitives=args.primitives, weights=weights, score=score)
    show_retention(res, con, getattr(args, "retention_spread", None))
    if requirements:
        if missing:
            con.print(f"[bold red]requirements not met[/bold red]: {'; '.join(missing)}")
        else:
            con.print("requirements met: " + ", ".join(f"{k} ≥ {v:g} %" for k, v in requirements.items()))
    if args.report is not None:
        con.print(f"report written to {args.report}")
    return EXIT_REQUIREMENT if missing else 0


def show_retention(res, con, spread_text=None) -> None:
    """Retention per τ (when several are graded) and, for a spread, the weak cells caught."""
    from rich.table import Table

    from ..faults import format_seconds
    from ..grade.spread import expected_caught, parse_spread, per_tau

    rows = per_tau(res.kinds)
    if len(rows) > 1 or spread_text:
        from ..report.labels import SECTIONS

        tt = Table(title=SECTIONS["retention"], title_justify="left", show_edge=False, pad_edge=False)
        for col in ("τ", "cells × values", "detected", "coverage"):
            tt.add_column(col, justify="left" if col == "τ" else "right")
        for r in rows:
            tt.add_row(format_seconds(r.tau), f"{r.instances:,}", f"{r.detected:,}", f"{100 * r.coverage:.4g}%")
        con.print(tt)
    if spread_text:
        sp = parse_spread(spread_text)
        con.print(f"weak cells caught (expected, retention spread {sp.text}, {len(sp.taus)} points): "
                  f"{100 * expected_caught(rows, sp.taus):.4g}%")


def show_result(res, con, primitives=False, weights=None, score=None) -> None:
    """The result on the terminal.  The table adapts to the console width: below 120 columns
    the element columns show only ``Mi`` (the elements are listed above the table) and the
    reasons move below it; below 72 the detected counts go too (instances and coverage stay).
    A number is never cut."""
    from rich import box
    from rich.table import Table

    from ..notation import format_notation
    from ..report import labels as L
    from ..report.compare import percent_text
    from .common import glue, hang, title_line

    t = res.test
    width = con.width
    medium, narrow = width < 120, width < 72
    title_line(con, t.display_name, t.length_text, format_notation(t))
    hang(con, "memory  ", memory_line(res.memory))
    if res.memory.mux == 1 and res.memory.words > 1:
        hang(con, "        ", "[dim]without --mux the array is one column wide: each cell's neighbours are "
             "the words above and below[/dim]")
    taus = sorted({r.kind.tau for r in res.kinds if r.kind.tau is not None})
    tau_txt = ""
    if taus:
        from ..faults import format_seconds

        tau_txt = "   " + glue("retention τ ") + ", ".join(format_seconds(x) for x in taus)
    # a label stays with its value when the line wraps
    hang(con, "faults  ", f"{res.faults_spec}   {glue('pairs ' + res.pairs_spec)}{tau_txt}   {glue('engine ' + res.engine)}")
    if medium:
        hang(con, "elements ", "  ".join(glue(element_label(t, i)) for i in range(len(t.elements))))
    table = Table(show_edge=False, pad_edge=False, box=box.SIMPLE_HEAD if narrow else box.HEAVY_HEAD,
                  title=L.SECTIONS["classes"], title_justify="left", title_style="bold")
    table.add_column(L.CLASS, style="bold", no_wrap=True)
    table.add_column(L.INSTANCES, justify="right", no_wrap=True)
    if not narrow:
        table.add_column(L.DETECTED, justify="right", no_wrap=True)
    table.add_column(L.COVERAGE, justify="right", no_wrap=True)
    table.add_column(L.narrow(L.FIRST) if narrow else L.FIRST, no_wrap=True)
    table.add_column(L.narrow(L.ALL) if narrow else L.ALL, no_wrap=True)
    if not medium:
        table.add_column(L.WHY)

    def pct(cov, d, n):   # a partial coverage never reads 100 % or 0 %
        return percent_text(cov, 2, d, n) + "%"

    reasons = []
    for c in res.classes:
        cov = pct(c.coverage, c.detected, c.instances)
        style = "" if c.detected == c.instances else ("red" if c.detected == 0 else "yellow")
        complete = c.instances and c.detected == c.instances
        cells = [c.cls, f"{c.instances:,}"] + ([] if narrow else [f"{c.detected:,}"]) + [
            f"[{style}]{cov}[/{style}]" if style else cov,
            element_label(t, c.first_by, medium) if c.detected else "—",
            # "all found by" only for a class detected completely
            element_label(t, c.complete_by, medium) if complete else "—",
        ]
        if not medium:
            cells.append(c.reason)
        elif c.reason:
            reasons.append((c.cls, c.reason))
        table.add_row(*cells)
    tot = res.total
    table.add_section()
    table.add_row(L.TOTAL, f"{tot.instances:,}", *([] if narrow else [f"{tot.detected:,}"]),
                  pct(tot.coverage, tot.detected, tot.instances), "", "", *([] if medium else [""]))
    con.print(table)
    if score is not None:
        hang(con, "score   ", L.score_text(score, weights or {}, res.classes))
    if narrow:
        con.print(f"[dim]{L.narrow(L.FIRST)} = {L.FIRST}; {L.narrow(L.ALL)} = {L.ALL}[/dim]")
    if reasons:
        con.print(f"{L.WHY}:")
        for cls, why in reasons:
            hang(con, f"  [bold]{cls}[/bold]: ", why)
    if res.empty_classes:
        hang(con, "no instances in this pair scope: ", ", ".join(res.empty_classes))
    if primitives and res.primitives:
        pt = Table(title=L.SECTIONS["kinds"], title_justify="left", title_style="bold", show_edge=False, pad_edge=False)
        cols = tuple(c for c in L.GRADE_KIND_COLUMNS if not (medium and c == L.WHY))
        for col in cols:
            pt.add_column(col, justify="right" if col in (L.INSTANCES, L.DETECTED, L.COVERAGE) else "left",
                          no_wrap=col != L.WHY)
        for p in res.primitives:
            cov = p.detected / p.instances if p.instances else 1.0
            pt.add_row(p.fault, p.cls, f"{p.instances:,}", f"{p.detected:,}", pct(cov, p.detected, p.instances),
                       *(() if medium else (p.reason if p.detected < p.instances else "",)))
        con.print(pt)
    examples = res.missed_examples()
    if examples:
        hang(con, f"[bold]{L.SECTIONS['missed']}[/bold]: ", "some undetected instances (an engineer's starting "
             "point for diagnosis)")
        for cls, text in examples:
            hang(con, f"  [bold]{cls}[/bold]  ", text)
    hang(con, "cost    ", L.cost_text(t, res.memory, res.ops, res.cycles, res.seconds))
    con.print(f"[dim]graded {res.total.instances:,} fault instances in {res.elapsed:.3g} s[/dim]")
