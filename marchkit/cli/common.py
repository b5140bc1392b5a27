"""Options and helpers shared by the commands."""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

def thresholds_from_args(args):
    t = getattr(args, "disturb_threshold", None)
    if t is None:
        return None
    from ..faults.dram import parse_thresholds

    return parse_thresholds(t)


DEMO_MEMORY = dict(
    name="kestrel_l1_sram", words=1024, bits=16, mux=4, clock="200MHz",
    order="linear", backgrounds=("solid",),
)
DEFAULT_WORDS = 64
# the DRAM of the demo (also examples/corvid_dram.toml): an invented 1 Mbit embedded DRAM
DEMO_DRAM = dict(
    name="corvid_edram", words=65536, bits=16, mux=128, clock="400MHz", read_cycles=2, write_cycles=2,
    refresh="64ms", refresh_scheme="distributed", refresh_during_delays="no", page="closed",
)
DEMO_RETENTION = ("1/20", "1/10", "1/5")          # 50, 100, 200 ms (placeholders, not a technology's)
DEMO_THRESHOLDS = (139_000, 4_800)               # Kim et al., ISCA 2014 (DDR3); ISCA 2020 (LPDDR4)


def console(stderr: bool = False):
    from rich.console import Console

    stream = sys.stderr if stderr else sys.stdout
    width = None if stream.isatty() else 132
    return Console(stderr=stderr, highlight=False, soft_wrap=False, width=width)


def add_memory_options(p) -> None:
    g = p.add_argument_group("memory (a TOML file with --memory, and/or these; flags win)")
    g.add_argument("--memory", metavar="FILE", help="memory description (TOML); 'demo' for the built-in demo memory")
    g.add_argument("--words", type=int, metavar="N", help=f"number of words (default {DEFAULT_WORDS})")
    g.add_argument("--bits", type=int, metavar="B", help="bits per word (default 1)")
    g.add_argument("--mux", type=int, metavar="M", help="column mux: words per physical row (default 1)")
    g.add_argument("--order", metavar="ORDER", help="address order: linear, gray, complement, stride:I, random:SEED")
    g.add_argument("--backgrounds", metavar="LIST", help="data backgrounds: solid, checkerboard, rows, columns, word, 0xHEX (comma list; one run each)")
    g.add_argument("--clock", metavar="FREQ", help="clock, e.g. 200MHz (default 100MHz)")
    g.add_argument("--read-cycles", type=int, metavar="C", help="clock cycles per read (default 1)")
    g.add_argument("--write-cycles", type=int, metavar="C", help="clock cycles per write (default 1)")
    g.add_argument("--scramble-bits", metavar="LIST", help="address scrambling: physical bit i takes logical bit LIST[i]")
    g.add_argument("--scramble-xor", metavar="MASK", help="address scrambling: XOR mask applied after the bit order")
    g.add_argument("--neighbours", type=int, choices=(4, 8), help="physical neighbours: 4 (N/S/E/W) or 8 (with diagonals; default)")
    d = p.add_argument_group("DRAM (same names as memory-file keys)")
    d.add_argument("--refresh", metavar="PERIOD", help="refresh period, e.g. 64ms (0 = none, an SRAM; default)")
    d.add_argument("--refresh-scheme", choices=("distributed", "burst"),
                   help="distributed: one row every PERIOD/rows (default); burst: all rows at the start of each period")
    d.add_argument("--refresh-during-delays", choices=("yes", "no"),
                   help="does refresh run during the test's delays? (default no: a retention pause suspends it)")
    d.add_argument("--page", choices=("open", "closed"),
                   help="closed: every access activates its row (default); open: only an access to another row does")


def memory_from_args(args):
    from ..model import load_memory_file, make_memory

    flags = dict(
        words=args.words, bits=args.bits, mux=args.mux, order=args.order,
        backgrounds=args.backgrounds, clock=args.clock, read_cycles=args.read_cycles,
        write_cycles=args.write_cycles, scramble_bits=args.scramble_bits,
        scramble_xor=args.scramble_xor, neighbours=args.neighbours,
        refresh=getattr(args, "refresh", None), refresh_scheme=getattr(args, "refresh_scheme", None),
        refresh_during_delays=getattr(args, "refresh_during_delays", None), page=getattr(args, "page", None),
    )
    if args.memory == "demo":
        base = dict(DEMO_MEMORY)
        base.update({k: v for k, v in flags.items() if v is not None})
        return make_memory(**base)
    if args.memory:
        return load_memory_file(args.memory, **flags)
    kw = {k: v for k, v in flags.items() if v is not None}
    kw.setdefault("words", DEFAULT_WORDS)
    return make_memory(**kw)


def add_fault_options(p) -> None:
    g = p.add_argument_group("faults")
    g.add_argument("--faults", default="static", metavar="LIST",
                   help="fault selection: static, classic, retention, all, class names (SAF, CFds, DRF, ...), kinds (SA0, AF:alias) or primitives like '<0w1/0/->' (comma list; default static)")
    g.add_argument("--pairs", default="neighbours", metavar="SCOPE",
                   help="cell pairs for two-cell faults: all, neighbours, word, sample:K[:SEED] (comma list = union; default neighbours)")
    g.add_argument("--retention", default="1ms", metavar="TIMES",
                   help="DRF leakage times τ, comma list (default 1ms)")
    g.add_argument("--retention-spread", metavar="SPREAD",
                   help="grade a spread of retention times and report the expected fraction of weak cells "
                        "caught: lognormal:MEDIAN:SIGMA[:POINTS] or a comma list of times (replaces --retention)")
    g.add_argument("--disturb-threshold", metavar="N", default=None,
                   help="activations of a neighbour row that flip a disturb victim (comma list; default "
                        "139000, about the first error on DDR3 per Kim et al., ISCA 2014; LPDDR4: as few as 4.8k, "
                        "Kim et al., ISCA 2020)")
    g.add_argument("--engine", choices=("fast", "reference"), default="fast",
                   help="fast (default) or the literal reference simulator (audits; small memories only)")


def retention_from_args(args):
    from ..model import parse_duration

    if getattr(args, "retention_spread", None):
        from ..grade.spread import parse_spread

        return parse_spread(args.retention_spread).taus
    return tuple(parse_duration(t) for t in args.retention.split(",") if t.strip())


def load_test(spec: str, check: bool = True):
    from ..notation import ensure_consistent, resolve_test

    t = resolve_test(spec)
    return ensure_consistent(t) if check else t


def atomic_write(path: str | Path, data: bytes | str, force: bool = False) -> None:
    """Write a whole file under a temporary name, then rename it into place."""
    from ..files import write_file

    write_file(path, data, force=force)
