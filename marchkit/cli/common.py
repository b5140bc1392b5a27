"""Options and helpers shared by the commands."""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

DEMO_MEMORY = dict(
    name="kestrel_l1_sram", words=1024, bits=16, mux=4, clock="200MHz",
    order="linear", backgrounds=("solid",),
)
DEFAULT_WORDS = 64


def console(stderr: bool = False):
    """A rich console.  Width: the terminal's, else $COLUMNS, else 132 columns (files, pipes).
    A closed pipe is reported to the command-line guard (quiet exit 0), not as rich's exit 1."""
    from rich.console import Console

    class _Console(Console):
        def on_broken_pipe(self) -> None:
            raise BrokenPipeError

    stream = sys.stderr if stderr else sys.stdout
    width = None
    cols = os.environ.get("COLUMNS", "")
    if cols.isdigit() and 20 <= int(cols) <= 1000:
        width = int(cols)
    elif not _isatty(stream):
        width = 132
    return _Console(file=stream, highlight=False, soft_wrap=False, width=width)


def _isatty(stream) -> bool:
    try:
        return stream.isatty()
    except (ValueError, AttributeError):
        return False


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


def memory_from_args(args):
    from ..model import load_memory_file, make_memory

    flags = dict(
        words=args.words, bits=args.bits, mux=args.mux, order=args.order,
        backgrounds=args.backgrounds, clock=args.clock, read_cycles=args.read_cycles,
        write_cycles=args.write_cycles, scramble_bits=args.scramble_bits,
        scramble_xor=args.scramble_xor, neighbours=args.neighbours,
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
    g.add_argument("--engine", choices=("fast", "reference"), default="fast",
                   help="fast (default) or the literal reference simulator (audits; small memories only)")


def retention_from_args(args):
    from ..model import parse_duration

    return tuple(parse_duration(t) for t in args.retention.split(",") if t.strip())


def load_test(spec: str, check: bool = True):
    from ..notation import ensure_consistent, resolve_test

    t = resolve_test(spec)
    return ensure_consistent(t) if check else t


def atomic_write(path: str | Path, data: bytes | str, force: bool = False) -> None:
    """Write a whole file under a temporary name, then rename it into place."""
    from ..files import write_file

    write_file(path, data, force=force)
