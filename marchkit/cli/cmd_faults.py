"""`marchkit faults`: the fault catalogue — what each selection name means."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("faults", help="list the fault models marchkit grades",
                       description="List the fault classes and kinds of a selection (default: all), "
                       "with what each kind does and, for a memory, how many instances it has.")
    p.add_argument("selection", nargs="?", default="all", metavar="SELECTION",
                   help="a --faults value: static, classic, retention, all, class names, kinds, primitives")
    p.add_argument("--retention", default="1ms", metavar="TIMES", help="DRF leakage times τ (comma list)")
    p.add_argument("--pairs", default="neighbours", metavar="SCOPE", help="pair scope for the counts")
    p.add_argument("--words", type=int, metavar="N", help="count instances on a memory of N words")
    p.add_argument("--bits", type=int, default=1, metavar="B", help="bits per word for the counts")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.set_defaults(func=run)


def describe(kind) -> str:
    from ..faults import family_of

    return family_of(kind).describe(kind)


def run(args) -> int:
    import json

    from rich.table import Table

    from ..faults import family_of, instance_count, parse_pairs, select_faults
    from .common import console, retention_from_args

    sel = select_faults(args.selection, retention_from_args(args))
    mem = None
    if args.words:
        from ..model import make_memory

        mem = make_memory(args.words, args.bits)
        scope = parse_pairs(args.pairs)
    rows = []
    for k in sel.kinds:
        cells, words = family_of(k).site_counts(k)
        row = {"kind": k.text, "class": k.cls, "cells": cells, "words": words, "what": describe(k)}
        if mem is not None:
            row["instances"] = instance_count(k, mem, scope)
        rows.append(row)
    if args.json:
        print(json.dumps(rows, indent=2, ensure_ascii=False))
        return 0
    table = Table(title=f"{len(rows)} fault kinds in {args.selection!r}", title_justify="left")
    table.add_column("class", style="bold")
    table.add_column("kind", no_wrap=True)
    table.add_column("what it does")
    if mem is not None:
        table.add_column(f"instances ({mem.words}×{mem.bits}, {args.pairs})", justify="right")
    for r in rows:
        cells = [r["class"], r["kind"], r["what"]]
        if mem is not None:
            cells.append(f"{r['instances']:,}")
        table.add_row(*cells)
    console().print(table)
    return 0
