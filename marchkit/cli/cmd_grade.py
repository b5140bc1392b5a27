"""`marchkit grade TEST`: which faults a test catches on a memory, and at what cost."""

from __future__ import annotations

import json
import sys


def register(sub):
    from .common import add_fault_options, add_memory_options

    p = sub.add_parser(
        "grade", help="fault-simulate a test on a memory and grade its coverage",
        description="Fault-simulate TEST (a library name, a file, or a notation starting with '{') on a "
        "memory model and report coverage per fault class, with operations, cycles and test time.",
    )
    p.add_argument("test", metavar="TEST")
    add_memory_options(p)
    add_fault_options(p)
    g = p.add_argument_group("output")
    g.add_argument("--json", action="store_true", help="print the result as JSON")
    g.add_argument("--primitives", action="store_true", help="also list every static fault primitive")
    g.add_argument("--missed", type=int, default=0, metavar="N",
                   help="name up to N undetected instances of each fault kind (cells as wWORD or wWORD.bBIT)")
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
    from ..model import background_names

    name = f"{mem.name}: " if mem.name else ""
    scr = ""
    if mem.scramble_bits is not None or mem.scramble_xor:
        scr = ", scrambled"
    bgs = background_names(mem)
    return (f"{name}{mem.words} × {mem.bits} bit{'s' if mem.bits > 1 else ''}, mux {mem.mux} "
            f"({mem.rows} rows × {mem.columns} columns{scr}), order {mem.order}, "
            f"background{'s' if len(bgs) > 1 else ''} {', '.join(bgs)}, {fmt_clock(mem.clock_hz)}")


def element_label(test, index) -> str:
    if index is None:
        return "—"
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
    from ..grade import grade
    from ..notation import format_notation
    from .common import check_sizes, console, load_test, memory_from_args, retention_from_args

    if args.missed < 0:
        from ..errors import InputError

        raise InputError("--missed takes a number of instances, 0 or more")
    test = load_test(args.test)
    mem = memory_from_args(args)
    if args.report is not None:
        from ..files import target_kind

        target_kind(args.report, args.force)
    retention = retention_from_args(args)
    check_sizes(mem, args.faults, args.pairs, retention)
    prog, cb = make_progress(sys.stderr.isatty() and not args.json)
    if prog:
        with prog:
            res = grade(test, mem, args.faults, args.pairs, retention, args.engine, cb,
                        examples=args.missed)
    else:
        res = grade(test, mem, args.faults, args.pairs, retention, args.engine,
                    examples=args.missed)
    if args.report is not None:
        from ..report import write_html_report

        write_html_report(res, args.report, force=args.force)
    if args.json:
        print(json.dumps(res.to_json(), indent=2, ensure_ascii=False))
        return 0
    show_result(res, console(), primitives=args.primitives)
    if args.report is not None:
        console().print(f"report written to {args.report}")
    return 0


def show_result(res, con, primitives=False) -> None:
    from rich.table import Table

    from ..notation import format_notation

    t = res.test
    con.print(f"[bold]{t.display_name}[/bold]  {t.length_text}   {format_notation(t)}")
    con.print(f"memory  {memory_line(res.memory)}")
    taus = sorted({r.kind.tau for r in res.kinds if r.kind.tau is not None})
    tau_txt = ""
    if taus:
        from ..faults import format_seconds

        tau_txt = "   retention τ " + ", ".join(format_seconds(x) for x in taus)
    con.print(f"faults  {res.faults_spec}   pairs {res.pairs_spec}{tau_txt}   engine {res.engine}")
    table = Table(show_edge=False, pad_edge=False)
    table.add_column("class", style="bold")
    table.add_column("instances", justify="right")
    table.add_column("detected", justify="right")
    table.add_column("coverage", justify="right")
    table.add_column("first found in", no_wrap=True)
    table.add_column("all found by", no_wrap=True)
    table.add_column("why some are missed")
    from ..report.compare import percent_text

    def pct(cov, d, n):   # a partial coverage never reads 100 % or 0 %
        return percent_text(cov, 2, d, n) + "%"

    for c in res.classes:
        cov = pct(c.coverage, c.detected, c.instances)
        style = "" if c.detected == c.instances else ("red" if c.detected == 0 else "yellow")
        table.add_row(c.cls, f"{c.instances:,}", f"{c.detected:,}", f"[{style}]{cov}[/{style}]" if style else cov,
                      element_label(t, c.first_by) if c.detected else "—",
                      element_label(t, c.complete_by) if c.detected else "—", c.reason)
    tot = res.total
    table.add_section()
    table.add_row("total", f"{tot.instances:,}", f"{tot.detected:,}", pct(tot.coverage, tot.detected, tot.instances), "", "", "")
    con.print(table)
    if res.empty_classes:
        con.print(f"no instances in this pair scope: {', '.join(res.empty_classes)}")
    if primitives and res.primitives:
        pt = Table(title="static fault primitives", title_justify="left", show_edge=False, pad_edge=False)
        for col in ("primitive", "class", "instances", "detected", "why some are missed"):
            pt.add_column(col, justify="right" if col in ("instances", "detected") else "left")
        for p in res.primitives:
            pt.add_row(p.fault, p.cls, f"{p.instances:,}", f"{p.detected:,}", p.reason)
        con.print(pt)
    examples = res.missed_examples()
    if examples:
        con.print("some undetected instances (an engineer's starting point for diagnosis):")
        mt = Table(show_edge=False, pad_edge=False)
        mt.add_column("class", style="bold")
        mt.add_column("instance")
        for cls, text in examples:
            mt.add_row(cls, text)
        con.print(mt)
    delays = len(t.delays)
    con.print(
        f"cost    {t.ops_per_cell} ops per address per run · {res.ops:,} operations · {res.cycles:,} cycles"
        f" · {fmt_time(res.seconds)} at {fmt_clock(res.memory.clock_hz)}"
        + (f" (delays included: {delays} per run)" if delays else "")
    )
    con.print(f"[dim]graded {res.total.instances:,} fault instances in {res.elapsed:.3g} s[/dim]")
