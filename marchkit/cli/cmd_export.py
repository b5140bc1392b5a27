"""`marchkit export TEST`: clock-cycle stimulus for a tester or an HDL simulator."""

from __future__ import annotations

import sys

# the export formats (marchkit.export.FORMATS; kept here so that building the command line
# does not import the exporters and numpy — a test checks the two agree)
FORMAT_HELP = {
    "csv": "one header row, then one row per clock cycle",
    "jsonl": "one JSON object per clock cycle",
    "stil": "IEEE 1450-1999 STIL (idle runs as Loop)",
    "vcd": "IEEE 1364 value change dump",
    "hex": "Verilog $readmemh words, plus NAME_tb.v (self-checking testbench) and NAME_sram.v (SRAM model)",
}


def register(sub):
    from .common import add_memory_options

    p = sub.add_parser(
        "export", help="write the test's cycle-by-cycle stimulus (csv, jsonl, stil, vcd, hex)",
        description="Expand a test on a memory into clock cycles (address, write data, write enable, "
        "read strobe, expected data, compare mask; delays as idle cycles at the clock) and write them "
        "for a tester or an HDL simulator.  The number of cycles and the test time are those "
        "`marchkit grade` reports; order-free (⇕) elements run ascending.  Formats: "
        + "; ".join(f"{k}: {v}" for k, v in FORMAT_HELP.items()) + ".",
    )
    p.add_argument("test", metavar="TEST", help="a library name, a file, or a notation starting with '{'")
    add_memory_options(p)
    g = p.add_argument_group("output")
    g.add_argument("--format", "-f", choices=tuple(FORMAT_HELP), help="output format (default: from the extension of -o)")
    g.add_argument("-o", "--output", required=True, metavar="FILE",
                   help="output file ('-' for standard output; hex then writes no testbench, nor to a device or pipe)")
    g.add_argument("--force", action="store_true", help="replace existing files")
    g.add_argument("--force-size", action="store_true",
                   help="write even when the size estimated before writing exceeds 100 MB (the estimate is "
                   "printed either way; long delays make csv, jsonl and vcd huge, stil writes them as loops)")
    g.add_argument("--physical", action="store_true",
                   help="physical (scrambled) word addresses instead of logical ones")
    g.add_argument("--stuck-at", metavar="WORD:BIT:VALUE",
                   help="hex: the testbench makes this cell (logical word, bit) of its SRAM model stuck at VALUE")
    g.add_argument("--pins", metavar="KEY=VALUE,...",
                   help="stil, vcd: pin map over the memory file's [pins]: clock, address, data_in, data_out, "
                   "write_enable, read_enable (names), write_enable_active, read_enable_active (high/low), "
                   "chip_enable (a name; active on operation cycles, inactive on idle ones), chip_enable_active, "
                   "byte_enables (a bus name), byte_enables_active, byte_bits (default 8), strobe (compare "
                   "point as a fraction of the period, default 0.75; stil only)")
    g.add_argument("--quiet", "-q", action="store_true", help="print nothing on success")
    p.set_defaults(func=run)


def parse_stuck(text: str | None):
    from ..errors import OutputError

    if text is None:
        return None
    parts = text.split(":")
    try:
        if len(parts) != 3:
            raise ValueError
        return tuple(int(x, 0) for x in parts)
    except ValueError:
        raise OutputError(f"--stuck-at {text!r}: give WORD:BIT:VALUE, e.g. 5:2:1") from None


def _stop_on_term():
    """Make SIGTERM unwind like Ctrl-C, so that a stopped export removes its temporary files."""
    import signal

    def handler(signum, frame):
        raise KeyboardInterrupt

    try:
        signal.signal(signal.SIGTERM, handler)
    except (ValueError, OSError):  # not the main thread
        pass


def run(args) -> int:
    from ..export import export
    from ..units import format_time
    from .common import load_test, memory_from_args

    mem = memory_from_args(args)
    test = load_test(args.test)
    stuck = parse_stuck(args.stuck_at)
    pins = None
    mf = getattr(args, "memory_file", None)
    if args.pins or (mf is not None and mf.pins):
        from ..export.pins import pin_map

        pins = pin_map(mf.pins if mf is not None else None, args.pins)
    _stop_on_term()
    res = export(test, mem, args.output, args.format, physical=args.physical, force=args.force,
                 stuck=stuck, max_bytes=0 if args.force_size else None, pins=pins)
    if not args.quiet:
        out = sys.stderr if args.output == "-" else sys.stdout
        where = "standard output" if args.output == "-" else ", ".join(res.files)
        mhz = float(mem.clock_hz) / 1e6
        out.write(f"wrote {where} ({res.format}): {res.cycles:,} cycles, {format_time(res.seconds)} "
                  f"at {mhz:g} MHz, {res.bytes:,} bytes\n")    # times and counts as grade writes them
        if res.format == "hex" and len(res.files) == 3:
            tb = res.files[1]
            out.write(f"simulate: iverilog -o sim.vvp {tb} {res.files[2]} && vvp -n sim.vvp"
                      f" (from the directory of {res.files[0]})\n")
    return 0
