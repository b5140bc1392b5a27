"""`marchkit diagnose TEST --fails FILE`: what is broken, from a tester's fail log."""

from __future__ import annotations

import json
import os
from pathlib import Path


# One defect at a time: linked faults (two faults at once) and faults of three or more cells
# are left out unless asked for.
SINGLE_FAULTS = "static,classic,dynamic,retention"


def register(sub):
    from .common import add_memory_options

    p = sub.add_parser(
        "diagnose", help="rank fault candidates for a fail log; classify and draw the fail bitmap",
        description="Read a fail log of TEST on a memory (CSV with header cycle,address,expected,observed, "
        "or JSON lines; cycles numbered as in `marchkit export`, address and data in hex) and rank the "
        "fault instances whose predicted failing compares match it, grouped into classes the test cannot "
        "tell apart.  Also classifies the fail bitmap on the physical array and proposes an element "
        "that would split the largest class.",
    )
    p.add_argument("test", metavar="TEST", help="the test the log comes from: a library name, a file, or a notation")
    add_memory_options(p)
    g = p.add_argument_group("diagnosis")
    g.add_argument("--fails", required=True, metavar="FILE", help="the fail log (CSV or JSON lines)")
    g.add_argument("--faults", default=SINGLE_FAULTS, metavar="LIST",
                   help="fault kinds to consider (as for grade; default: every single fault, "
                        f"{SINGLE_FAULTS})")
    g.add_argument("--pairs", default="neighbours", metavar="SCOPE",
                   help="aggressors and decoder partners: all, neighbours, word, sample:K[:SEED] (default neighbours)")
    g.add_argument("--retention", default="1ms", metavar="TIMES", help="DRF leakage times τ, comma list (default 1ms)")
    g.add_argument("--no-hint", action="store_true", help="skip the search for an element that splits the largest class")
    g = p.add_argument_group("output")
    g.add_argument("--json", action="store_true", help="print the result as JSON")
    g.add_argument("--top", type=int, default=10, metavar="N", help="classes to list (default 10)")
    g.add_argument("--members", type=int, default=None, metavar="N",
                   help="members to list per class (default 6 on the terminal, 50 in JSON)")
    g.add_argument("--picture", metavar="FILE", help="draw the fail bitmap on the physical array (.png or .svg)")
    g.add_argument("--force", action="store_true", help="replace an existing picture")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..diagnose import diagnose, read_fail_log
    from ..errors import InputError
    from .common import console, load_test, memory_from_args, retention_from_args

    if args.top < 1:
        raise InputError("--top takes a number of classes, 1 or more")
    if args.members is not None and args.members < 1:
        raise InputError("--members takes a number, 1 or more")
    if args.picture:
        from ..report.style import plot_format

        plot_format(args.picture)                   # a bad extension fails before any work
        if os.path.lexists(args.picture) and not args.force:     # before the work, not after it
            from ..errors import OutputError

            raise OutputError(f"{args.picture} exists; use --force to replace it")
    test = load_test(args.test)
    mem = memory_from_args(args)
    log = read_fail_log(args.fails, mem, test)
    d = diagnose(test, mem, log, args.faults, args.pairs, retention_from_args(args), hint=not args.no_hint)
    if args.picture:
        from ..report.bitmap import write_bitmap_picture

        write_bitmap_picture(d.bitmap, args.picture, title=f"{test.display_name}: {Path(str(log.name)).name}", force=args.force)
    if args.json:
        print(json.dumps(d.to_json(args.top, args.members or 50), indent=2, ensure_ascii=False))
        return 0
    show(d, console(), args.top, args.members or 6)
    if args.picture:
        console().print(f"picture written to {args.picture}", markup=False)
    return 0


def show(d, con, top=10, members=6) -> None:
    from rich.markup import escape as e
    from rich.table import Table

    from ..diagnose.diagnosis import member_text
    from ..notation import format_notation
    from .cmd_grade import memory_line
    from .common import hang, title_line

    mem = d.memory

    def facts(rows) -> None:
        """``label  text`` lines; a long text wraps under itself, not under the label."""
        g = Table.grid(padding=(0, 2))
        g.add_column(no_wrap=True)
        g.add_column()
        for label, text in rows:
            g.add_row(label, text)
        con.print(g)

    title_line(con, d.test.display_name, "", format_notation(d.test))
    nc = len(d.log.cells(mem.bits))
    nw = len(d.log.words())
    head = [("memory", e(memory_line(mem))),
            ("log", f"{e(str(d.log.name))}: {len(d.log.fails)} failing compare{'s' if len(d.log.fails) != 1 else ''}, "
                    f"{nc} failing cell{'s' if nc != 1 else ''} in {nw} word{'s' if nw != 1 else ''}"),
            ("bitmap", f"[bold]{d.bitmap.kind}[/bold]: {d.bitmap.detail}")]
    if len(d.bitmap.parts) > 1:
        for p in d.bitmap.parts[:8]:
            head.append(("", f"{p.kind}: {p.cells} cell{'s' if p.cells != 1 else ''}, rows {p.rows[0]}–{p.rows[1]}, "
                             f"columns {p.cols[0]}–{p.cols[1]}"))
        if len(d.bitmap.parts) > 8:
            head.append(("", f"… and {len(d.bitmap.parts) - 8} more parts"))
    head.append(("faults", f"{e(str(d.faults_spec))}   pairs {e(str(d.pairs_spec))}"))
    facts(head)
    if not d.candidates:
        hang(con, "", "no candidate fault of the listed kinds involves the failing cells")
    else:
        hang(con, "candidates: ", "one row per equivalence class (faults this test cannot tell apart); "
             "ties share a rank")
        t = Table(show_edge=False, pad_edge=False)
        t.add_column("rank", justify="right")
        t.add_column("mismatches", justify="right")
        t.add_column("faults", justify="right")
        t.add_column("members")
        for c in d.candidates[:top]:
            names = [member_text(k, s, mem.bits) for k, s in c.members(members)]
            if c.size > len(names):
                names.append(f"… {c.size - len(names):,} more")
            mm = "0 (exact)" if c.mismatches == 0 else str(c.mismatches)
            t.add_row(str(c.rank), mm, f"{c.size:,}", e("\n".join(names)))
        con.print(t)
        if len(d.candidates) > top:
            con.print(f"[dim]… {len(d.candidates) - top} more classes (--top N)[/dim]")
        hang(con, "", "[dim]mismatches: compares where the fault's predicted fails differ from the log; members: "
             "fault primitive <S/F/R> or fault name, then its cells: wW.bB is word W (decimal) bit B, "
             "a= the aggressor, v= the victim[/dim]")
    rest = []
    cons = d.consistent
    if cons:
        best = cons[0].mismatches
        one = len(cons) == 1
        how = (("matches" if one else "match") + " the log exactly" if best == 0
               else ("is" if one else "are") + f" nearest ({best} mismatch{'es' if best != 1 else ''})")
        sizes = ", ".join(f"{c.size:,}" for c in cons[:12]) + (" …" if len(cons) > 12 else "")
        rest.append(("resolution", f"{len(cons)} class{'es' if len(cons) != 1 else ''} {how}, of size{'' if one else 's'} "
                                   f"{sizes}; {len(d.candidates):,} classes and {d.total_candidates:,} candidate faults "
                                   "considered"))
        if best:
            diffs = d.candidates[0].diffs
            rest.append(("", f"the best class differs from the log in {len(diffs['missing'])} predicted fail(s) "
                             f"not logged, {len(diffs['unexpected'])} logged fail(s) not predicted, "
                             f"{len(diffs['different'])} with other data"))
    if d.hint:
        rest.append(("hint", f"class of rank {d.hint['class_rank']} with {d.hint['class_size']:,} faults: "
                             f"{e(d.hint['text'])}"))
        for alt in d.hint.get("alternatives", [])[:3]:
            rest.append(("", f"or {e(alt['element'])}: {len(alt['split'])} classes of "
                             f"{', '.join(map(str, alt['split']))}"))
    for n in d.notes:
        rest.append(("[yellow]note[/yellow]", e(n)))
    if rest:
        facts(rest)
