"""`marchkit demo`: grade a published test on the built-in demo memory."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("demo", help="grade March C- and March SS on a built-in demo memory",
                       description="Grade two published tests on the built-in demo memory (an invented "
                       "1024 × 16 SRAM, column mux 4, 200 MHz) against static, classic and retention faults.")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..grade import grade
    from ..model import make_memory
    from .cmd_grade import show_result
    from .common import DEMO_MEMORY, console, load_test

    con = console()
    mem = make_memory(**DEMO_MEMORY)
    con.print("[bold]marchkit demo[/bold] — the Kestrel-7 sensor hub's L1 data SRAM (an invented part)\n")
    for name in ("March C-", "March SS"):
        res = grade(load_test(name), mem, "static,classic,retention", "neighbours")
        show_result(res, con)
        con.print()
    con.print("Next: marchkit library · marchkit grade 'March C-' --words 256 --faults all --pairs all · "
              "marchkit grade --help")
    return 0
