"""`marchkit demo`: grade a published test on the built-in demo memory."""

from __future__ import annotations


def register(sub):
    p = sub.add_parser("demo", help="grade March C- and March SS on a built-in demo memory",
                       description="Grade two published tests on the built-in demo memory (an invented "
                       "1024 × 16 SRAM, column mux 4, 200 MHz) against static, classic and retention faults, then a "
                       "retention test and two hammer tests on an invented embedded DRAM with refresh.")
    p.set_defaults(func=run)


def run(args) -> int:
    from fractions import Fraction

    from ..grade import grade
    from ..model import make_memory
    from .cmd_grade import show_result
    from .common import DEMO_DRAM, DEMO_MEMORY, DEMO_RETENTION, DEMO_THRESHOLDS, console, glue, hang, load_test

    con = console()
    mem = make_memory(**DEMO_MEMORY)
    hang(con, "[bold]marchkit demo[/bold] — ", "the Kestrel-7 sensor hub's L1 data SRAM (an invented part)")
    con.print()
    for name in ("March C-", "March SS"):
        res = grade(load_test(name), mem, "static,classic,retention", "neighbours")
        show_result(res, con)
        con.print()
    hang(con, "[bold]and a DRAM[/bold] — ", "the Corvid-3 accelerator's embedded DRAM (invented): 64 K × 16, "
         "512 rows, refresh every 64 ms, suspended during the test's pauses")
    con.print()
    dram = make_memory(**DEMO_DRAM)
    from ..model import with_changes
    from ..notation import parse_notation

    for name, text, faults, page in (
            ("Corvid retention", "{⇕(w0); Del(100ms); ⇑(r0,w1); Del(100ms); ⇓(r1,w0)}", "dram", None),
            ("Corvid hammer", "{⇑(w0); ⇑(r0^140000); ⇑(r0,w1); ⇓(r1^140000); ⇓(r1)}", "disturb", None),
            ("Corvid double-sided hammer, open page",
             "{⇑(w0); ⇑hammer(-1,+1)^70000; ⇑(r0,w1); ⇓hammer(-1,+1)^70000; ⇓(r1)}", "disturb", "open")):
        mem_d = with_changes(dram, page=page) if page else dram
        res = grade(parse_notation(text, name=name), mem_d, faults, "neighbours",
                    retention=[Fraction(x) for x in DEMO_RETENTION], thresholds=DEMO_THRESHOLDS)
        show_result(res, con)
        con.print()
    nexts = ("marchkit library", "marchkit grade 'March C-' --words 256 --faults all --pairs all",
             "marchkit grade --help")
    # each command whole on its line when the line wraps
    hang(con, "Next: ", " · ".join(glue(c) for c in nexts))
    return 0
