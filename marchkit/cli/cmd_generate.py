"""`marchkit generate --faults SELECTION`: the shortest march test for a fault selection."""

from __future__ import annotations

import json
import sys


def register(sub):
    from .common import add_memory_options

    p = sub.add_parser(
        "generate", help="find the shortest march test that detects a fault selection",
        description="Search for the shortest march test (operations per address) that detects every "
        "selected fault instance on the memory, prove it minimal where the search finishes, and "
        "confirm it by grading.  The exact part runs on Dask: a local cluster by default "
        "(--workers), a running one with --scheduler, or in this process with --workers 0.",
    )
    add_memory_options(p)
    g = p.add_argument_group("faults")
    g.add_argument("--faults", required=True, metavar="SELECTION",
                   help="fault selection, as for grade: static, classic, dynamic, class names (SAF, CFid, ...), kinds or primitives (comma list)")
    g.add_argument("--pairs", default="neighbours", metavar="SCOPE",
                   help="cell pairs for two-cell faults: all, neighbours, word, sample:K[:SEED] (default neighbours)")
    g.add_argument("--retention", default="1ms", metavar="TIMES", help="DRF leakage times τ (graded, not searched)")
    s = p.add_argument_group("search")
    s.add_argument("--max-length", type=int, metavar="N", help="refuse tests longer than N operations per address")
    s.add_argument("--time-limit", type=float, metavar="S", help="stop after S seconds with the best test found")
    s.add_argument("--max-element", type=int, default=6, metavar="K",
                   help="operations per element in the search space (default 6)")
    s.add_argument("--like", metavar="TEST", help="shorten this test instead: remove and merge operations, keeping what it detects")
    s.add_argument("--workers", type=int, metavar="N", help="local Dask workers (default: one per core; 0 = search in this process)")
    s.add_argument("--scheduler", metavar="ADDRESS", help="use a running Dask scheduler, e.g. tcp://127.0.0.1:8786")
    o = p.add_argument_group("output")
    o.add_argument("--json", action="store_true", help="print the result as JSON")
    o.add_argument("-o", "--output", metavar="FILE", help="write the test to FILE in the library format")
    o.add_argument("--force", action="store_true", help="replace an existing output file")
    p.set_defaults(func=run)


def _options_text(args) -> str:
    parts = [f"--faults {args.faults}"]
    if args.pairs != "neighbours":
        parts.append(f"--pairs {args.pairs}")
    for flag in ("words", "bits", "mux", "order", "backgrounds", "memory"):
        v = getattr(args, flag)
        if v is not None:
            parts.append(f"--{flag} {v}")
    if args.max_length is not None:
        parts.append(f"--max-length {args.max_length}")
    if args.time_limit is not None:
        parts.append(f"--time-limit {args.time_limit:g}")
    if args.max_element != 6:
        parts.append(f"--max-element {args.max_element}")
    if args.like:
        parts.append(f"--like {args.like}")
    return " ".join(parts)


def _progress(enabled):
    if not enabled:
        return None, None
    from rich.console import Console
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    prog = Progress(SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn(),
                    console=Console(stderr=True), transient=True, auto_refresh=False)
    task = prog.add_task("preparing", total=None)

    def cb(d):
        phase = d.get("phase", "")
        if phase == "tables":
            text = f"building tables for {d.get('keys', 0)} fault keys"
        else:
            best = d.get("best")
            text = (f"{phase}: bound {d.get('lower_bound', 0)}n reached · {d.get('nodes', 0):,} nodes"
                    + (f" · best so far {best}n" if best is not None else ""))
        prog.update(task, description=text)
        prog.refresh()

    return prog, cb


def run(args) -> int:
    from ..errors import InputError
    from ..generate import generate, shorten
    from ..notation import format_file, format_notation
    from .common import console, glue, hang, load_test, memory_from_args, retention_from_args, title_line

    from ..plan.cluster import MAX_LOCAL_WORKERS

    if args.workers is not None and not 0 <= args.workers <= MAX_LOCAL_WORKERS:
        raise InputError(f"--workers takes 0 (search in this process) up to {MAX_LOCAL_WORKERS} local workers "
                         f"(got {args.workers})")
    if args.scheduler is not None and not args.scheduler.startswith(("tcp://", "tls://", "inproc://")):
        raise InputError(f"--scheduler must be an address such as tcp://127.0.0.1:8786 (got {args.scheduler!r})")
    if args.scheduler is not None and args.workers:
        raise InputError("give --workers (a local cluster) or --scheduler (a running one), not both")
    if args.output:
        from pathlib import Path

        if Path(args.output).exists() and not args.force:
            raise InputError(f"{args.output} exists; use --force to replace it")
    mem = memory_from_args(args)
    retention = retention_from_args(args)
    options = _options_text(args)
    prog, cb = _progress(sys.stderr.isatty() and not args.json)

    executor = None
    if args.scheduler is not None or args.workers != 0:
        from ..plan.cluster import open_client

        def executor():        # opened only when the exact search has a bound worth shipping
            return open_client(args.workers, args.scheduler)

    def work():
        if args.like:
            test = load_test(args.like)
            return shorten(test, mem, args.faults, args.pairs, retention, progress=cb, options=options,
                           time_limit=args.time_limit)
        return generate(args.faults, mem, args.pairs, retention, max_length=args.max_length,
                        time_limit=args.time_limit, executor=executor, max_element=args.max_element,
                        progress=cb, options=options)

    if prog:
        with prog:
            res = work()
    else:
        res = work()
    if args.output:
        from ..files import write_file

        write_file(args.output, format_file([res.test]), force=args.force)
    if args.json:
        print(json.dumps(res.to_json(), indent=2, ensure_ascii=False))
        return 0
    from rich.markup import escape as e

    con = console()
    t = res.test
    title_line(con, t.name, t.length_text, format_notation(t))
    if res.origin == "like":
        hang(con, "shortened ", f"{e(args.like)} to {res.length}n, keeping every detection "
             f"({_n(res.nodes, 'candidate test')} graded); not proven minimal")
    elif res.proven_minimal:
        hang(con, "proven minimal: ", f"every test shorter than {res.length}n in the search space was ruled out "
             f"({_n(res.nodes, 'node')}, {_n(res.keys, 'fault key')})")
    else:
        why = f" — {res.stopped}" if res.stopped else ""
        hang(con, "not proven minimal: ", f"lower bound {res.lower_bound}n reached{e(why)} ({_n(res.nodes, 'node')})")
    g = res.grade
    hang(con, "confirmed on the memory: ", f"{g.total.detected:,} of {g.total.instances:,} fault instances detected "
         f"({glue(f'{100 * g.total.coverage:.2f} %')})")
    for f, where, reason in res.excluded[:10]:
        hang(con, e(f"excluded {f} ({where}): "), e(reason), indent=2)
    if len(res.excluded) > 10:
        con.print(f"... and {len(res.excluded) - 10} more excluded keys")
    for f, reason in res.unsupported:
        hang(con, e(f"not searched {f}: "), e(reason), indent=2)
    if res.origin == "like":
        con.print(f"[dim]{res.seconds:.3g} s[/dim]")
    else:
        con.print(f"[dim]{res.seconds:.3g} s (first solution after {res.first_solution_seconds:.3g} s)[/dim]")
    if args.output:
        con.print(f"written to {args.output}", markup=False)
    return 0


def _n(count: int, noun: str) -> str:
    """``1 node``, ``4,549 nodes``."""
    return f"{count:,} {noun}{'' if count == 1 else 's'}"
