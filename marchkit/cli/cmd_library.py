"""`marchkit library`: the published tests marchkit ships."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("library", help="list the published march tests in the library",
                       description="List the published march tests marchkit ships, with length, targets and source.")
    p.add_argument("--json", action="store_true", help="print JSON instead of a table")
    p.add_argument("--full", action="store_true", help="show the whole citation of each test")
    p.set_defaults(func=run)


def short_source(source: str) -> str:
    """Authors and year of a citation: 'A. J. van de Goor, Testing …, 1991' → 'A. J. van de Goor, 1991'."""
    import re

    parts = [x.strip() for x in source.split(",")]
    names = [parts[0]]
    for x in parts[1:]:
        if re.match(r"^(and )?([A-Z][a-z]?\. ?)+[A-Z]", x):
            names.append(x)
        else:
            break
    authors = names[0] if len(names) == 1 else f"{names[0].split(' and ')[0]} et al."
    year = re.search(r"\b(19|20)\d\d\b", source)
    return f"{authors}, {year.group(0)}" if year else authors


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
        table.add_row(t.name, t.length_text, " ".join(t.targets), t.source if args.full else short_source(t.source))
    console().print(table)
    return 0
