"""`marchkit bist TEST`: a memory BIST controller as synthesizable Verilog."""

from __future__ import annotations


def register(sub):
    from .common import add_memory_options

    p = sub.add_parser(
        "bist", help="write a memory BIST controller (Verilog) for a test, with a testbench and its area",
        description="Generate a memory BIST controller that runs TEST on the memory: --style fsm (hard-wired "
        "for this test) or --style program (an instruction memory loaded with $readmemh from the file named "
        "by the parameter PROGRAM; the same RTL runs any test on this memory).  Writes DIR/TOP.v, "
        "DIR/TOP_tb.v (self-checking testbench with a fault-injecting SRAM model) and, for program, "
        "DIR/TOP_program.hex; the directory appears only when complete.  fail_cycle numbers cycles as "
        "`marchkit export` does.  Not generated: repair, a diagnostics port, clock-domain crossing.",
    )
    p.add_argument("test", metavar="TEST", help="a library name, a file, or a notation starting with '{'")
    add_memory_options(p)
    g = p.add_argument_group("output")
    g.add_argument("--style", choices=("fsm", "program"), default="fsm",
                   help="fsm: hard-wired controller (default); program: programmable controller")
    g.add_argument("--top", default="mbist", metavar="NAME", help="top module name (default mbist)")
    g.add_argument("-o", "--output", required=True, metavar="DIR",
                   help="output directory (with --program-only: the program file)")
    g.add_argument("--force", action="store_true", help="replace an existing directory or file")
    g.add_argument("--area", action="store_true",
                   help="synthesize with yosys (generic cells) and print cells and flip-flops")
    g.add_argument("--program-only", action="store_true",
                   help="only assemble TEST into a $readmemh program for the programmable controller")
    g.add_argument("--latency", type=int, default=None, metavar="N",
                   help="memory read latency in clock edges (the LAT parameter's default; 1 to 16; default: the "
                        "memory's read latency + 1, i.e. 1 for a memory whose data comes in the read's cycle)")
    g.add_argument("--transparent", action="store_true",
                   help="transparent test (Nicolaidis 1996): keeps the memory's contents; run 0 predicts a "
                        "signature, run 1 tests; only fail is reported (fail_addr/bits/cycle stay 0)")
    g.add_argument("--quiet", "-q", action="store_true", help="print nothing on success")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from ..bist import MAX_LAT, write_bist, write_program
    from ..errors import InputError
    from ..report.compare import format_time
    from .common import load_test, memory_from_args

    if args.latency is not None and not 1 <= args.latency <= MAX_LAT:
        raise InputError(f"--latency {args.latency}: give a read latency of 1 to {MAX_LAT} cycles")
    mem = memory_from_args(args)
    if args.latency is None:        # read_latency counts cycles after the read's own edge
        args.latency = mem.read_latency + 1
        if args.latency > MAX_LAT:
            raise InputError(f"read latency {mem.read_latency}: the controller takes at most {MAX_LAT - 1} "
                             "cycles after the read (LAT 16)")
    test = load_test(args.test)
    out = sys.stdout
    if args.program_only:
        ir, depth = write_program(test, mem, args.output, args.top, args.force, transparent=args.transparent)
        if not args.quiet:
            out.write(f"wrote {args.output}: {len(ir.steps)} instructions (PROG_DEPTH {depth}) for "
                      f"{ir.test_name} on {ir.memory_name} {ir.words} × {ir.dw} bits, {ir.cycles:,} cycles\n")
        return 0
    res = write_bist(test, mem, args.output, args.style, args.top, args.force, args.latency, args.area,
                     args.transparent)
    if args.quiet:
        return 0
    ir = res.ir
    mhz = float(ir.clock_hz) / 1e6
    out.write(f"wrote {res.directory}: {', '.join(res.files)} ({res.style} style)\n")
    out.write(f"test: {ir.cycles:,} cycles, {ir.ops:,} operations, {format_time(ir.seconds)} at {mhz:g} MHz"
              + (" (transparent: signature prediction, then the test)\n" if ir.transparent else
                 f" ({ir.runs} background run{'s' if ir.runs != 1 else ''})\n"))
    if mem.read_latency:
        from ..model import schedule

        from .common import console, hang

        out.flush()
        hang(console(), f"read latency {mem.read_latency}: ", f"LAT {args.latency}; done rises {args.latency} cycles "
             f"after the last operation; grade and export count {schedule(test, mem).cycles:,} cycles (the test "
             "ends when the last read's data is back)")
    if res.area is not None:
        a = res.area
        if "skipped" in a:
            out.write(f"area: not measured ({a['skipped']})\n")
        else:
            line = f"area: {a['cells']} cells, {a['flip_flops']} flip-flops (yosys generic synthesis)"
            if "program_bits" in a:
                line += f"; instruction memory {a['program_depth']} x 40 = {a['program_bits']} bits, not counted"
            out.write(line + "\n")
    out.write(f"simulate: cd {res.directory} && iverilog -o sim.vvp {res.top}_tb.v {res.top}.v && vvp -n sim.vvp\n")
    return 0
