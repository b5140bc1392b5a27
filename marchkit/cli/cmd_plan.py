"""`marchkit plan SOC.toml`: the test of every memory of an SoC and a schedule of them under a
power budget, graded on Dask."""

from __future__ import annotations

import json
import sys


def register(sub):
    p = sub.add_parser(
        "plan", help="choose a test per memory of an SoC and schedule them under a power budget",
        description="Read an SoC file (memory types, instances, clock domains, BIST groups, required "
        "coverage per fault class, candidate tests, power per memory and the budget), grade every "
        "candidate once per memory type on a Dask cluster (results cached on disk), choose per type "
        "the shortest test that meets the requirement, and schedule the tests: the memories of one "
        "BIST group one after the other, all memories under test together within the power budget "
        "(CP-SAT, optimal or with a proven bound). The file format is described in DEVELOPERS.md.",
    )
    p.add_argument("soc", metavar="SOC.toml")
    g = p.add_argument_group("where to grade")
    g.add_argument("--scheduler", metavar="ADDRESS",
                   help="a running Dask scheduler, e.g. tcp://127.0.0.1:8786 (default: a local cluster)")
    g.add_argument("--workers", type=int, metavar="N",
                   help="worker processes of the local cluster (default: one per core)")
    g = p.add_argument_group("output")
    g.add_argument("--json", action="store_true", help="print the plan as JSON (every instance, its test "
                   "and place in the schedule, and the total test time)")
    g.add_argument("--report", metavar="FILE.html", help="also write a self-contained HTML report")
    g.add_argument("--gantt", metavar="FILE.png", help="also draw the schedule (.png or .svg)")
    g.add_argument("--force", action="store_true", help="replace existing output files")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..errors import InputError
    from ..plan.cluster import _check, open_client
    from ..plan.planner import make_plan
    from ..plan.soc import read_soc
    from .cmd_compare import _check_output
    from .common import console

    if args.workers is not None and args.scheduler is not None:
        raise InputError("--workers sizes the local cluster; with --scheduler the cluster's own workers grade")
    _check(args.workers, args.scheduler)
    if args.report:
        if not args.report.lower().endswith((".html", ".htm")):
            raise InputError(f"{args.report}: the report is an HTML file (.html)")
        _check_output(args.report, args.force)
    if args.gantt:
        _check_output(args.gantt, args.force, plot=True)
    soc = read_soc(args.soc)          # everything in the file is checked before any grading

    def connect():
        return open_client(args.workers, args.scheduler)

    prog = None
    if sys.stderr.isatty() and not args.json:
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

        prog = Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.fields[count]}"),
                        TimeElapsedColumn(), console=console(stderr=True), transient=True)
        task = prog.add_task("grading", total=1, count="")

        def progress(done, total):
            prog.update(task, total=max(total, 1), completed=done, count=f"{done}/{total}")
    else:
        progress = None
    if prog:
        with prog:
            plan = make_plan(soc, connect=connect, progress=progress, generator=generate_candidates)
    else:
        plan = make_plan(soc, connect=connect, generator=generate_candidates)
    data = plan.to_json()
    written = []
    if args.gantt:
        from ..report import write_plan_gantt

        write_plan_gantt(data, args.gantt, force=args.force)
        written.append(args.gantt)
    if args.report:
        from ..report import write_plan_report

        write_plan_report(data, args.report, force=args.force)
        written.append(args.report)
    status = 0 if data["requirements_met"] else 1
    if args.json:
        print(json.dumps(data, indent=2, ensure_ascii=False))
        for w in written:
            console(stderr=True).print(f"wrote {w}", markup=False)
        return status
    con = console()
    if not sys.stdout.isatty():      # tables fit the width asked for (80 columns by default)
        import os

        from rich.console import Console

        con = Console(highlight=False, soft_wrap=False, width=int(os.environ.get("COLUMNS", "0") or 0) or 80)
    show_plan(data, con)
    for w in written:
        con.print(f"wrote {w}", markup=False)
    return status


GENERATE_TIME_LIMIT_S = 60      # per memory type: the best test found by then, proven minimal or not


def generate_candidates(soc, variants, client) -> dict:
    """The "generate" candidate: per memory type that lists it, the shortest test found by
    ``marchkit generate`` for the classes the type must cover (its ``require`` table), on the
    type's memory, searched on the plan's Dask client.  The plan then grades it like any
    other candidate, so a class the generator does not search (SOF, DRF) is still checked."""
    from ..errors import InputError
    from ..generate import GenerateError, generate

    out: dict = {}
    for v in variants.values():
        t = v.type
        if t.name in out or not any(soc.candidates[spec].is_generate for spec in soc.type_tests(t)):
            continue
        classes = [c for c, p in t.require.items() if p > 0]
        try:
            res = generate(",".join(classes) if classes else soc.faults, v.memory, soc.pairs, soc.retention,
                           time_limit=GENERATE_TIME_LIMIT_S, executor=client)
        except GenerateError as e:
            raise InputError(f"memory type {t.name!r}: generate: {e}") from None
        out[t.name] = [res.test]
    return out


def fmt_s(seconds: float) -> str:
    from ..report.compare import format_time

    return format_time(seconds)


def fmt_w(watts: float) -> str:
    for unit, scale in (("W", 1), ("mW", 1e3), ("µW", 1e6)):
        if watts * scale >= 1 or unit == "µW":
            return f"{watts * scale:.3g} {unit}"
    return f"{watts} W"  # pragma: no cover


def _geometry(m: dict) -> str:
    return f"{m['words']}×{m['bits']}" + (f" m{m['mux']}" if m["mux"] > 1 else "")


def show_plan(data: dict, con) -> None:
    from rich.markup import escape as e
    from rich.table import Table

    from ..report.compare import format_frequency
    from .common import glue, hang

    inst = data["instances"]
    types = data["types"]
    groups = data["groups"]
    domains = sorted({i["domain"] for i in inst})
    ntypes = len({t['type'] for t in types})
    hang(con, f"[bold]{e(data['soc'])}[/bold]: ", f"{len(inst)} memor{'y' if len(inst) == 1 else 'ies'} of {ntypes} "
              f"type{'' if ntypes == 1 else 's'}, {len(groups)} BIST group{'' if len(groups) == 1 else 's'}, "
              f"{len(domains)} clock domain{'s' if len(domains) != 1 else ''}")
    s = data["schedule"]
    hang(con, "faults ", f"{e(data['faults'])}   {glue('pairs ' + e(data['pairs']))}   "
         f"{glue('power budget ' + fmt_w(s['budget_w']))}")
    g = data["graded"]
    if g["computed"]:
        hang(con, "graded ", f"{g['jobs']} test × memory pairs: {g['computed']} on {g['workers']}, "
             f"{g['cached']} from the cache ({g['seconds']:.3g} s)")
    else:
        con.print(f"graded {g['jobs']} test × memory pairs: all from the cache ({g['seconds']:.3g} s)")

    t = Table(show_edge=False, pad_edge=False, title="test per memory type", title_justify="left",
              title_style="bold")
    for col, just in (("type", "left"), ("memory", "left"), ("clock", "right"), ("n", "right"),
                      ("test", "left"), ("each", "right"), ("power", "right")):
        t.add_column(col, justify=just, no_wrap=True)
    for ty in types:
        t.add_row(e(ty["type"]), _geometry(ty["memory"]), format_frequency(ty["clock_hz"]).replace(" ", ""),
                  str(ty["instances"]), e(ty["test"] or "—") + ("" if ty["meets"] else " [bold red]![/bold red]"),
                  fmt_s(ty["seconds"]) if ty["seconds"] else "—", fmt_w(ty["power_w"]))
    _keep_numbers(t, con)
    con.print(t)
    hang(con, "", "[dim]n: instances of the type; each: test time of one instance; power: drawn while its "
         "test runs; m8: column mux 8[/dim]")
    short = [ty for ty in types if not ty["meets"]]
    if short:
        con.print("[bold red]requirements no candidate meets[/bold red]")
        con.print("(these memories would ship less tested than required)")
        for ty in short:
            for u in ty["unmet"]:
                hang(con, f"  {e(ty['type'])} at {format_frequency(ty['clock_hz'])}: ", f"{u['class']} ≥ "
                     f"{u['required']:g} % — best {_pct(u['best'])} % ({e(str(u['best_test']))})", indent=4)
    status = s["status"]
    how = ("optimal" if status == "optimal" else
           f"feasible; lower bound {fmt_s(s['lower_bound_s'])}, gap {100 * s['gap']:.1f} %")
    hang(con, f"[bold]total test time {fmt_s(data['total_test_time_s'])}[/bold]  ", f"({how}; {s['solver']}, "
         f"{s['solve_seconds']:.2g} s)", indent=2)
    con.print(f"peak power {fmt_w(s['peak_w'])} of {fmt_w(s['budget_w'])}")

    by_group: dict = {}
    for r in inst:
        by_group.setdefault(r["group"], []).append(r)
    gt = Table(show_edge=False, pad_edge=False, title="BIST groups", title_justify="left", title_style="bold")
    for col, just in (("group", "left"), ("domain", "left"), ("memories", "right"), ("busy", "right"),
                      ("start", "right"), ("end", "right")):
        gt.add_column(col, justify=just, no_wrap=True)
    for grp in sorted(groups, key=lambda x: (-x["end_s"], x["group"])):
        gt.add_row(e(grp["group"]), e(grp["domain"]), str(grp["instances"]), fmt_s(grp["busy_s"]),
                   fmt_s(grp["start_s"]), fmt_s(grp["end_s"]))
    _keep_numbers(gt, con)
    con.print(gt)
    order = sorted(groups, key=lambda x: (-x["end_s"], x["group"]))
    for grp in order:
        if grp["instances"] < 2:
            continue
        rows = sorted(by_group[grp["group"]], key=lambda r: (r["start_s"], r["name"]))
        tt = Table(show_edge=False, pad_edge=False, title=f"group {e(grp['group'])} ({e(grp['domain'])})",
                   title_justify="left", title_style="bold")
        for col, just in (("memory", "left"), ("type", "left"), ("test", "left"), ("start", "right"),
                          ("end", "right"), ("power", "right")):
            tt.add_column(col, justify=just, no_wrap=True, overflow="ellipsis")
        for r in rows:
            tt.add_row(e(r["name"]), e(r["type"]), e(r["test"]) + ("" if r["meets"] else " [red]![/red]"),
                       fmt_s(r["start_s"]), fmt_s(r["end_s"]), fmt_w(r["power_w"]))
        _keep_numbers(tt, con)
        con.print(tt)
    singles = [by_group[g["group"]][0] for g in order if g["instances"] == 1]
    if singles:
        tt = Table(show_edge=False, pad_edge=False, title="memories on a controller of their own",
                   title_justify="left", title_style="bold")
        for col, just in (("memory", "left"), ("group", "left"), ("test", "left"), ("start", "right"),
                          ("end", "right"), ("power", "right")):
            tt.add_column(col, justify=just, no_wrap=True, overflow="ellipsis")
        for r in singles:
            tt.add_row(e(r["name"]), "" if r["group"] == r["name"] else e(r["group"]),
                       e(r["test"]) + ("" if r["meets"] else " [red]![/red]"),
                       fmt_s(r["start_s"]), fmt_s(r["end_s"]), fmt_w(r["power_w"]))
        _keep_numbers(tt, con)
        con.print(tt)
    if any(not r["meets"] for r in inst):
        con.print("[red]![/red] a requirement of this memory is not met (see above)")


def _pct(v: float) -> str:
    from ..report.compare import percent_text

    return percent_text(v, 1)


NUMBER_COLUMNS = ("clock", "n", "each", "power", "memories", "busy", "start", "end")


def _keep_numbers(table, con=None) -> None:
    """Numbers are never cut: on a narrow console the name columns give up their width
    (a long name folds onto a second line) and the columns of numbers keep theirs."""
    from rich.text import Text

    if con is not None and con.width < 80:
        table.padding = (0, 0)              # a narrow console: every column counts
    for col in table.columns:
        col.no_wrap = col.header in NUMBER_COLUMNS
        if col.header in NUMBER_COLUMNS:
            cells = [Text.from_markup(c) if isinstance(c, str) else c for c in col.cells]
            col.min_width = max([len(str(col.header))] + [c.cell_len for c in cells if isinstance(c, Text)])
        else:
            col.no_wrap = False
            col.overflow = "fold"
            col.min_width = len(str(col.header))
            if col.header == "memory" and table.columns[0] is not col:     # words×bits, then " m8"
                col.min_width = max([col.min_width] + [len(str(c).split()[0]) for c in col.cells if str(c).strip()])
