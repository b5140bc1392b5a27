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
    if kind.description:
        return kind.description
    if kind.family == "rules" and len(kind.rules) == 1 and kind.rules[0].then is not None:
        r = kind.rules[0]
        o1, o2 = r.vic, r.then
        first = f"w{o1.val}" if o1.op == "w" else f"r{o1.pre}"
        second = f"w{o2.val}" if o2.op == "w" else f"r{o2.pre}"
        out = f"{first} then at once {second} on the cell holding {o1.pre}: it is left {r.f}"
        return out + (f" and the read returns {r.r}" if r.r is not None else "")
    if kind.family == "rules" and len(kind.rules) == 1:
        r = kind.rules[0]
        v = r.vic
        who = "the cell" if r.agg is None else "the victim"
        if r.agg is None:
            cond = ""
        elif r.agg.op is None:
            cond = f" while the aggressor holds {r.agg.pre}"
        else:
            op = f"w{r.agg.val}" if r.agg.op == "w" else f"r{r.agg.pre}"
            cond = f" when the aggressor (holding {r.agg.pre}) gets {op}"
        if v.op is None:
            s = f"{who} cannot stay {v.pre}: it becomes {r.f}"
        elif v.op == "w":
            s = f"writing {v.val} to {who} holding {v.pre} leaves {r.f}"
        else:
            s = f"reading {who} holding {v.pre} returns {r.r} and leaves {r.f}"
        if r.agg is not None and r.agg.op is not None:
            s = f"{who} holding {v.pre} becomes {r.f}"
        if r.agg is not None and r.agg.op is None and v.op is None:
            return f"while the aggressor holds {r.agg.pre}, {who} cannot stay {v.pre}: it becomes {r.f}"
        return s + cond
    return ", ".join(r.text for r in kind.rules)


def run(args) -> int:
    import json

    from rich.table import Table

    from ..faults import instance_count, parse_pairs, select_faults
    from .common import console, retention_from_args

    sel = select_faults(args.selection, retention_from_args(args))
    mem = None
    if args.words:
        from ..model import make_memory

        mem = make_memory(args.words, args.bits)
        scope = parse_pairs(args.pairs)
    rows = []
    for k in sel.kinds:
        row = {"kind": k.text, "class": k.cls, "cells": k.arity if k.family != "af" else 0,
               "words": k.arity if k.family == "af" else 0, "what": describe(k)}
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
