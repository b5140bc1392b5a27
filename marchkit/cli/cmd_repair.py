"""`marchkit repair`: which rows and columns to replace with spares."""

from __future__ import annotations

import json
import os
from pathlib import Path

MAX_SIDE = 1 << 24      # rows or columns of a --bitmap array (the bitmap classifier counts per line)


def register(sub):
    from .common import add_memory_options

    p = sub.add_parser(
        "repair", help="allocate spare rows and columns to the failing cells (exact, fewest spares)",
        description="Plan the repair of the failing cells of a fail log (--fails, placed on the physical "
        "array of the memory options) or of a bitmap (--bitmap: CSV with header row,col, with --rows and "
        "--cols): must-repair analysis, then an exact branch and bound after Kuo & Fuchs (1987).  Exit "
        "status 0 when the spares repair the array, 1 when they cannot.",
    )
    g = p.add_argument_group("input (one of)")
    g.add_argument("--fails", metavar="FILE", help="a fail log (cycle,address,expected,observed; CSV or JSON lines)")
    g.add_argument("--bitmap", metavar="FILE", help="failing physical cells: CSV with header row,col")
    g.add_argument("--rows", type=int, metavar="R", help="rows of the array (with --bitmap)")
    g.add_argument("--cols", type=int, metavar="C", help="columns of the array (with --bitmap)")
    add_memory_options(p)
    g = p.add_argument_group("spares")
    g.add_argument("--spare-rows", type=int, required=True, metavar="R", help="spare rows available")
    g.add_argument("--spare-cols", type=int, required=True, metavar="C", help="spare columns available")
    g = p.add_argument_group("output")
    g.add_argument("--json", action="store_true", help="print the plan as JSON")
    g.add_argument("--picture", metavar="FILE", help="draw the bitmap with the replaced lines (.png or .svg)")
    g.add_argument("--force", action="store_true", help="replace an existing picture")
    p.set_defaults(func=run)


def _cells(args):
    """(rows, cols, r, c, mux, source name)."""
    import numpy as np

    from ..errors import InputError

    if bool(args.fails) == bool(args.bitmap):
        raise InputError("give the failing cells with --fails FILE or with --bitmap FILE (one of them)")
    if args.bitmap:
        if args.rows is None or args.cols is None:
            raise InputError("--bitmap needs the array size: --rows R --cols C")
        if args.rows < 1 or args.cols < 1:
            raise InputError("--rows and --cols must be at least 1")
        if max(args.rows, args.cols) > MAX_SIDE:
            raise InputError(f"--rows {args.rows:,} --cols {args.cols:,}: an array side is at most {MAX_SIDE:,} "
                             "rows or columns here")
        from ..diagnose.repair import read_bitmap

        r, c = read_bitmap(args.bitmap, args.rows, args.cols)
        return args.rows, args.cols, r, c, 1, args.bitmap
    if args.rows is not None or args.cols is not None:
        raise InputError("--rows and --cols go with --bitmap; with --fails the memory options give the array")
    from ..diagnose import read_fail_log
    from .common import memory_from_args

    mem = memory_from_args(args)
    log = read_fail_log(args.fails, mem)
    cells = log.cells(mem.bits)
    a = np.array(cells, dtype=np.int64).reshape(-1, 2)
    r, c = mem.place(a[:, 0], a[:, 1])
    return mem.rows, mem.columns, np.asarray(r), np.asarray(c), mem.mux, args.fails


def run(args) -> int:
    from ..diagnose import bitmap_from_rc
    from ..diagnose.repair import plan_repair
    from ..errors import InputError
    from .common import console, hang

    if args.spare_rows < 0 or args.spare_cols < 0:
        raise InputError("--spare-rows and --spare-cols must not be negative")
    if args.picture:
        from ..report.style import plot_format

        plot_format(args.picture)
        if os.path.lexists(args.picture) and not args.force:     # before the work, not after it
            from ..errors import OutputError

            raise OutputError(f"{args.picture} exists; use --force to replace it")
    rows, cols, r, c, mux, name = _cells(args)
    plan = plan_repair(r, c, rows, cols, args.spare_rows, args.spare_cols)
    if args.picture:
        from ..report.bitmap import write_bitmap_picture

        bm = bitmap_from_rc(rows, cols, r, c)
        bm.mux = mux
        if plan.repairable:
            verdict = (f"repairable: uses {len(plan.rows)} of {args.spare_rows} spare rows, "
                       f"{len(plan.cols)} of {args.spare_cols} columns")
        else:
            verdict = f"NOT repairable with {args.spare_rows} spare rows, {args.spare_cols} spare columns"
        write_bitmap_picture(bm, args.picture, title=f"{Path(name).name}: {verdict}",
                             plan=plan, force=args.force)
    if args.json:
        print(json.dumps(plan.to_json(), indent=2))
        return 0 if plan.repairable else 1
    from rich.markup import escape

    con = console()
    hang(con, f"{escape(name)}: ", f"{plan.fails:,} failing cell{'s' if plan.fails != 1 else ''} in a {rows} × {cols} array; "
              f"spares {args.spare_rows} row{'s' if args.spare_rows != 1 else ''} + "
              f"{args.spare_cols} column{'s' if args.spare_cols != 1 else ''}")
    if plan.must_rows or plan.must_cols:
        hang(con, "must repair: ", f"rows {_list(plan.must_rows)}; columns {_list(plan.must_cols)}")
    if plan.repairable:
        hang(con, "[bold green]repairable[/bold green] ", f"with {plan.spares_used} spare{'s' if plan.spares_used != 1 else ''} "
                  f"(the fewest possible): {len(plan.rows)} row{'s' if len(plan.rows) != 1 else ''}, "
                  f"{len(plan.cols)} column{'s' if len(plan.cols) != 1 else ''}")
        hang(con, "replace rows    ", _list(plan.rows))
        hang(con, "replace columns ", _list(plan.cols))
    else:
        hang(con, "[bold red]NOT repairable[/bold red] ", f"with these spares: {escape(plan.reason)}")
        con.print("do not ship this part")
    if args.picture:
        con.print(f"picture written to {args.picture}", markup=False)
    return 0 if plan.repairable else 1


def _list(xs) -> str:
    return ", ".join(map(str, xs)) if xs else "none"
