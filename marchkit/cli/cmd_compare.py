"""`marchkit compare TEST…`: several tests on one memory and one fault list — cost,
per-class coverage, the class-weighted score and the Pareto front."""

from __future__ import annotations

import json
import sys


def register(sub):
    from ..report.compare import DEFAULT_SORT, SORT_KEYS
    from .common import add_fault_options, add_memory_options, add_summary_options

    p = sub.add_parser(
        "compare", help="compare march tests on coverage against test time",
        description="Grade every TEST (library names, files of tests, or notations starting with '{') on "
        "one memory against one fault list, and show what each costs, its coverage per class, its "
        "class-weighted score (the mean of the class coverages, equal weights unless --weights) and "
        "which tests lie on the Pareto front of cycles against the score (no other test is as fast "
        "and as good, and better in one of the two).",
    )
    p.add_argument("tests", nargs="*", metavar="TEST")
    p.add_argument("--library", action="store_true", help="also compare every published test in the library")
    add_memory_options(p)
    add_fault_options(p)
    add_summary_options(p)
    p.add_argument_group("summary and pass requirements").add_argument(
        "--front-on", choices=("score", "coverage"), default="score",
        help="the figure of the Pareto front: the class-weighted score (default) or the total "
        "instance coverage.  --require applies to the tests named on the command line, not to the "
        "--library ones")
    g = p.add_argument_group("output")
    g.add_argument("--sort", default=DEFAULT_SORT, metavar="KEY",
                   help="row order: " + "; ".join(f"{k}: {v}" for k, v in SORT_KEYS.items())
                   + f"; or a class name (its coverage, highest first). Default {DEFAULT_SORT}")
    g.add_argument("--json", action="store_true", help="print the comparison as JSON")
    g.add_argument("--csv", metavar="FILE", help="also write the comparison as CSV")
    g.add_argument("--plot", metavar="FILE", help="also draw the score against test time and coverage per class (.png or .svg)")
    g.add_argument("--report", metavar="FILE.html", help="also write a self-contained HTML page (table, plot, heat map, per-class detail)")
    g.add_argument("--force", action="store_true", help="replace existing output files")
    p.set_defaults(func=run)


def collect_tests(specs, with_library: bool, named: set | None = None):
    """The tests named on the command line (a file may hold several), then the library's,
    each once.  ``named`` (when given) receives the positions of the tests the user named."""
    from ..notation import ensure_consistent, library, resolve_tests

    tests = []
    for spec in specs:
        tests.extend((ensure_consistent(t), True) for t in resolve_tests(spec))
    if with_library:
        tests.extend((t, False) for t in library())
    out, seen = [], set()
    for t, mine in tests:
        key = (t.name, t.items)
        if key in seen:
            continue
        seen.add(key)
        if mine and named is not None:
            named.add(len(out))
        out.append(t)
    return out


def _check_output(path, force: bool, plot: bool = False) -> None:
    from ..files import target_kind

    if plot:
        from ..report.style import plot_format

        plot_format(path)
    target_kind(path, force)


def run(args) -> int:
    from ..errors import InputError
    from ..faults import select_faults
    from ..report import check_sort_key, compare_tests
    from .common import (EXIT_REQUIREMENT, atomic_write, check_reference_time, check_sizes, console, memory_from_args, provenance,
                         retention_from_args, summary_from_args, thresholds_from_args)

    if not args.tests and not args.library:
        raise InputError("give the tests to compare (library names, files or notations), or --library")
    # everything that can be wrong with the command is found before any grading
    named: set = set()
    tests = collect_tests(args.tests, args.library, named)
    mem = memory_from_args(args)
    retention = retention_from_args(args)
    check_sizes(mem, args.faults, args.pairs, retention)
    check_reference_time(args, tests, mem, retention)
    selection = select_faults(args.faults, retention)
    weights, requirements = summary_from_args(args, selection)
    sort = check_sort_key(args.sort, selection.classes)
    for path, is_plot in ((args.csv, False), (args.plot, True), (args.report, False)):
        if path is not None:
            _check_output(path, args.force, plot=is_plot)

    kw = dict(sort=sort, weights=weights, front_on=args.front_on, thresholds=thresholds_from_args(args))
    show_progress = sys.stderr.isatty() and not args.json
    if show_progress:
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

        prog = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.fields[count]}"),
                        TimeElapsedColumn(), console=console(stderr=True), transient=True,
                        auto_refresh=False)   # no refresh thread: the engine may fork
        task = prog.add_task("grading", total=len(tests), count="")

        def progress(done, total, label):
            prog.update(task, completed=done, description=f"grading {label}" if label else "done",
                        count=f"{min(int(done) + 1, total)}/{total}")
            prog.refresh()

        with prog:
            cmp = compare_tests(tests, mem, args.faults, args.pairs, retention, args.engine,
                                progress=progress, **kw)
    else:
        cmp = compare_tests(tests, mem, args.faults, args.pairs, retention, args.engine, **kw)

    from ..grade.score import unmet

    failing = {}
    for r in cmp.rows:
        if r.position in named and requirements:
            miss = unmet(r.result, requirements, weights)
            if miss:
                failing[r.label] = miss

    written = []
    if args.csv is not None:
        atomic_write(args.csv, cmp.to_csv(), force=args.force)
        written.append(args.csv)
    if args.plot is not None:
        from ..report import write_comparison_plot

        write_comparison_plot(cmp, args.plot, force=args.force)
        written.append(args.plot)
    if args.report is not None:
        from ..report.compare_html import write_compare_report

        write_compare_report(cmp, args.report, force=args.force)
        written.append(args.report)

    status = EXIT_REQUIREMENT if failing else 0
    if args.json:
        js = cmp.to_json()
        js["provenance"] = provenance(args, mem, retention, args.engine)
        js["provenance"]["tests"] = [r.label for r in cmp.rows]
        if requirements:
            js["requirements"] = {"required": requirements, "unmet": failing, "met": not failing}
        print(json.dumps(js, indent=2, ensure_ascii=False))
        for w in written:
            console(stderr=True).print(f"wrote {w}")
        return status
    con = console()
    show_comparison(cmp, con)
    if requirements:
        if failing:
            for label, miss in failing.items():
                con.print(f"[bold red]requirements not met[/bold red] by {label}: {'; '.join(miss)}")
        else:
            con.print("requirements met by every test named: "
                      + ", ".join(f"{k} ≥ {v:g} %" for k, v in requirements.items()))
    for w in written:
        con.print(f"wrote {w}")
    return status


def _cov_text(cov: float | None, detected: int | None = None, instances: int | None = None) -> str:
    """Coverage in % for a table cell; a partial coverage never shows as 100 or 0."""
    from ..units import percent_text

    if cov is None:
        return "[dim]n/a[/dim]"
    text = percent_text(cov, 1, detected, instances)
    return "[bold]0[/bold]" if text == "0" else text


def _plain(markup: str) -> str:
    from rich.text import Text

    return Text.from_markup(markup).plain


def show_comparison(cmp, con) -> None:
    from rich.table import Table

    from .common import glue, hang

    from ..units import format_time

    rows = list(cmp.rows)
    n_inst = rows[0].instances if rows else 0
    con.print(f"[bold]{len(rows)} test{'s' if len(rows) != 1 else ''} on {cmp.memory_label}[/bold]")
    hang(con, "faults  ", f"{cmp.faults_spec} ({glue(f'{n_inst:,} instances')})   {glue('pairs ' + cmp.pairs_spec)}")
    graded = [c for c in cmp.classes if cmp.class_instances.get(c)]
    equal = len({cmp.weights.get(c, 1.0) for c in graded}) <= 1
    hang(con, "score   ", "mean of the per-class coverages, " + ("equal weights" if equal else "weights " + ", ".join(
        f"{c}={cmp.weights.get(c, 1.0):g}" for c in graded)) + f"; Pareto front on cycles and {cmp.value_name}")
    # on a narrow console the operation and detected counts (the least telling columns:
    # cycles and coverage carry them) are left out and the headers shortened
    narrow = con.width < 110
    tiny = con.width < 80
    from rich import box

    from ..report import labels as L

    t = Table(show_edge=False, pad_edge=False, title=L.SECTIONS["tests"], title_justify="left",
              title_style="bold", box=box.SIMPLE_HEAD if tiny else box.HEAVY_HEAD)
    cols = [L.CYCLES, L.TIME, L.SCORE_PCT, L.narrow(L.COVERAGE_PCT)] if narrow else \
        [L.OPERATIONS, L.CYCLES, L.TIME, L.DETECTED, L.SCORE_PCT, L.COVERAGE_PCT]
    if not tiny:
        cols = [L.LENGTH] + cols
    body = []
    for r in rows:
        cov = _cov_text(r.coverage, r.detected, r.instances)
        sc = _cov_text(r.score, 1 if r.exact_score == 1 else (0 if r.exact_score == 0 else None),
                       1 if r.exact_score in (0, 1) else None)
        cells = [f"{r.cycles:,}", format_time(r.seconds), sc, cov] if narrow else \
            [f"{r.ops:,}", f"{r.cycles:,}", format_time(r.seconds), f"{r.detected:,}", sc, cov]
        if not tiny:
            cells = [r.length] + cells
        body.append((r, cells))
    # numbers are never cut: each number column is at least as wide as its widest cell;
    # only the test names may wrap
    # (and a length with hammer activations or delays, between its terms); a name keeps
    # at least 14 columns, or its whole length when shorter
    front_label = L.narrow(L.FRONT) if narrow else L.FRONT
    widths = []
    for i, col in enumerate(cols):
        cells = [_plain(c[i]) for _, c in body]
        if col == L.LENGTH:
            cells = [part for c in cells for part in c.split()]
        widths.append(max([len(col)] + [len(c) for c in cells]))
    room = max(4, con.width - sum(widths) - len(front_label) - 3 * (len(cols) + 2) - 2)
    t.add_column(L.TEST, overflow="fold", max_width=room,
                 min_width=min(14, room, max([len(L.TEST)] + [len(r.label) for r in rows])))
    for col, w in zip(cols, widths):
        if col == L.LENGTH:
            t.add_column(col, justify="right", min_width=w)
        else:
            t.add_column(col, justify="right", no_wrap=True, min_width=w)
    t.add_column(front_label, justify="center", no_wrap=True, min_width=len(front_label))
    for r, cells in body:
        t.add_row(f"[bold]{r.label}[/bold]" if r.pareto else r.label, *cells,
                  "[bold]yes[/bold]" if r.pareto else "[dim]no[/dim]")
    con.print(t)
    if narrow:
        # one legend entry per line part: "x = y" never split
        hang(con, "", "[dim]" + "; ".join(glue(p) for p in L.NARROW_LEGEND.split("; ")) + "[/dim]")

    # coverage per class: as many class columns as the console is wide, in several tables
    # when there are more classes than fit
    label_w = max([len(L.TEST)] + [len(r.label) for r in rows]) + 3
    chunks, cur, width = [], [], label_w
    for cls in cmp.classes:
        w = max(len(cls), 4) + 3
        if cur and width + w > max(con.width, 40):
            chunks.append(cur)
            cur, width = [], label_w
        cur.append(cls)
        width += w
    if cur:
        chunks.append(cur)
    for n, part in enumerate(chunks):
        title = L.SECTIONS["per_class"] + (f", part {n + 1} of {len(chunks)}" if len(chunks) > 1 else "")
        con.print(f"[bold]{title}[/bold]")
        c = Table(show_edge=False, pad_edge=False)
        c.add_column(L.TEST, no_wrap=True)
        for cls in part:
            c.add_column(cls, justify="right", no_wrap=True, min_width=4)
        for r in rows:
            c.add_row(r.label, *(_cov_text(r.classes.get(cls)) for cls in part))
        con.print(c)

    front = cmp.front
    if len(front) > 1:
        s = Table(show_edge=False, pad_edge=False, title=L.SECTIONS["steps"],
                  title_justify="left", title_style="bold")
        for col in ("from", "to"):
            s.add_column(col, no_wrap=True)
        for col in ("extra cycles", f"{cmp.value_name} gained"):
            s.add_column(col, justify="right", no_wrap=True)
        for a, b in zip(front, front[1:]):
            dc = b.cycles - a.cycles
            dv = 100 * (cmp.value(b) - cmp.value(a))
            s.add_row(a.label, b.label, f"{dc:+,}", f"{dv:+.2f} points")
        con.print(s)
    elif front:
        con.print(f"Pareto front: {front[0].label} alone")
