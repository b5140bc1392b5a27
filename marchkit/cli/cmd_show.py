"""`marchkit show TEST`: a test in either spelling, with its length."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("show", help="print a test in the published or the ASCII spelling",
                       description="Print a test (a library name, a file, or a notation starting with '{').")
    p.add_argument("test", metavar="TEST")
    p.add_argument("--ascii", action="store_true", help="ASCII spelling (up/down/any, del)")
    p.add_argument("--file-format", action="store_true", help="print it as a test block of a .march file")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..notation import format_notation
    from ..notation.printer import format_test_block
    from .common import load_test

    t = load_test(args.test, check=False)
    if args.file_format:
        print(format_test_block(t, ascii=args.ascii))
        return 0
    from rich.markup import escape

    from .common import console, hang

    print(f"{t.display_name}: {t.length_text}")
    print(format_notation(t, ascii=args.ascii), flush=True)     # one line, to copy whole
    con = console()
    for label, text in (("source: ", t.source), ("targets: ", ", ".join(t.targets)), ("note: ", t.note)):
        if text:
            hang(con, label, escape(text))
    return 0
