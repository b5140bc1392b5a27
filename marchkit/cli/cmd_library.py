"""`marchkit library`: the published tests marchkit ships."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("library", help="list the published march tests in the library",
                       description="List the published march tests marchkit ships, with length, targets and source.")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.set_defaults(func=run)


def run(args) -> int:
    import json

    from ..notation import format_notation, library
    from .common import console

    tests = library()
    if args.json:
        print(json.dumps([
            {"name": t.name, "notation": format_notation(t), "ops_per_cell": t.ops_per_cell,
             "length": t.length_text, "published_length": t.length, "delays": len(t.delays),
             "targets": list(t.targets), "source": t.source}
            for t in tests
        ], indent=2, ensure_ascii=False))
        return 0
    from rich.table import Table

    table = Table(title=f"{len(tests)} published march tests", title_justify="left")
    table.add_column("test", style="bold", no_wrap=True)
    table.add_column("length", justify="right", no_wrap=True)
    table.add_column("targets")
    table.add_column("source")
    for t in tests:
        table.add_row(t.name, t.length_text, " ".join(t.targets), t.source)
    console().print(table)
    return 0
