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
    name="kestrel_demo_sram", words=1024, bits=16, mux=4, clock="200MHz",
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


# a space between a number and its unit: never a line break ("100 MHz", "6.4 µs")
_UNIT_SPACE = r"(?<=\d) (?=(?:[kMG]?Hz|[mµnp]?s)\b)"


def glue(text: str) -> str:
    """``text`` with its spaces made no-break: :func:`hang` keeps it on one line."""
    return text.replace(" ", "\u00a0")


def _break_points(plain: str, room: int) -> list[int]:
    """Where to cut ``plain`` into lines of at most ``room`` cells: only at plain spaces,
    never at a no-break space (U+00A0) nor between a number and its unit."""
    import re
    from itertools import accumulate

    from rich.cells import get_character_cell_size

    width = [0, *accumulate(get_character_cell_size(c) for c in plain)]   # cells before each index
    glued = {m.start() for m in re.finditer(_UNIT_SPACE, plain)}
    cuts, start, last_space = [], 0, -1
    for k, ch in enumerate(plain):
        if ch == " ":                   # trailing spaces do not count towards a line's width
            if k not in glued:
                last_space = k
        elif width[k + 1] - width[start] > room and last_space > start:
            cuts.append(last_space + 1)
            start = last_space + 1
    return cuts


def hang(con, label: str, text: str, indent: int | None = None) -> None:
    """Print ``label`` followed by ``text`` (both rich markup); lines that wrap start under the
    text, not at the margin (a hanging indent), so narrow terminals stay readable.  Lines
    break only at plain spaces; a no-break space in ``text`` glues two words (and prints as
    a space).  ``indent``: the continuation lines' indent when not the label's width (two
    for a label longer than 24 cells)."""
    from rich.text import Text

    lab = Text.from_markup(label)
    body = Text.from_markup(text)
    if indent is None and lab.cell_len > 24:     # a long label (a file name): indent by two
        indent = 2
    ind = lab.cell_len if indent is None else indent
    if con.width - ind < 24:                     # too narrow to indent: wrap at the margin
        con.print(_spaces(Text.assemble(lab, body)))
        return
    first_room = con.width - lab.cell_len
    if first_room >= 24:
        parts = body.divide(_break_points(body.plain, first_room)[:1])
        lines, rest = [Text.assemble(lab, parts[0])], (parts[1] if len(parts) > 1 else None)
    else:                                        # the label fills the line: the text goes below
        lines, rest = [lab], body
    if rest is not None and rest.plain.strip():
        lines += [Text.assemble(" " * ind, piece) for piece in rest.divide(_break_points(rest.plain, con.width - ind))]
    for line in lines:
        line.rstrip()
        con.print(_spaces(line), no_wrap=line.cell_len <= con.width, soft_wrap=line.cell_len > con.width)


def _spaces(line):
    """The no-break spaces that glued words while wrapping, printed as plain spaces."""
    if "\u00a0" in line.plain:
        line.plain = line.plain.replace("\u00a0", " ")
    return line


def title_line(con, name: str, length: str, notation: str) -> None:
    """A test's name, length and notation on one line when it fits; otherwise the notation
    goes on the lines below, indented (it wraps between elements, never inside a number)."""
    from rich.text import Text

    head = Text.assemble((name, "bold"), f"  {length}" if length else "")
    line = Text.assemble(head, f"   {notation}")
    if line.cell_len <= con.width:
        con.print(line, no_wrap=True)
        return
    con.print(head)
    hang(con, "  ", glue(notation).replace(";\u00a0", "; "))


def _isatty(stream) -> bool:
    try:
        return stream.isatty()
    except (ValueError, AttributeError):
        return False


def bounded_int(lo: int, hi: int):
    """An argparse type: a whole number from ``lo`` to ``hi`` (refused before any work, with
    the range in the message)."""
    import argparse

    def conv(text: str) -> int:
        t = text.strip().replace("_", "")
        try:
            if len(t) > 24:
                raise ValueError
            v = int(t, 0)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text[:30]!r} is not a whole number ({lo} to {hi:,})") from None
        if not lo <= v <= hi:
            raise argparse.ArgumentTypeError(f"{v:,} is outside {lo} to {hi:,}")
        return v

    conv.__name__ = "whole number"
    return conv


def add_memory_options(p) -> None:
    g = p.add_argument_group("memory (a TOML file with --memory, and/or these; flags win)")
    g.add_argument("--memory", metavar="FILE", help="memory description (TOML); 'demo' for the built-in demo memory")
    g.add_argument("--words", type=bounded_int(2, 1 << 26), metavar="N", help=f"number of words, 2 to 2^26 (default {DEFAULT_WORDS})")
    g.add_argument("--bits", type=bounded_int(1, 1024), metavar="B", help="bits per word, 1 to 1024 (default 1)")
    g.add_argument("--mux", type=bounded_int(1, 1 << 26), metavar="M", help="column mux: words per physical row (default 1)")
    g.add_argument("--order", metavar="ORDER", help="address order: linear, gray, complement, stride:I, random:SEED")
    g.add_argument("--backgrounds", metavar="LIST", help="data backgrounds: solid, checkerboard, rows, columns, word, 0xHEX (comma list; one run each)")
    g.add_argument("--clock", metavar="FREQ", help="clock with its unit (Hz, kHz, MHz, GHz), e.g. 200MHz; 1Hz to 100GHz (default 100MHz)")
    g.add_argument("--read-cycles", type=bounded_int(1, 1024), metavar="C", help="clock cycles per read, 1 to 1024 (default 1)")
    g.add_argument("--write-cycles", type=bounded_int(1, 1024), metavar="C", help="clock cycles per write, 1 to 1024 (default 1)")
    g.add_argument("--read-latency", type=bounded_int(0, 64), metavar="N",
                   help="pipelined reads: the data comes back N cycles after the read while the next operation "
                        "is issued, 0 to 64 (default 0)")
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
    """The memory the options describe; the memory file's other settings (retention times,
    class weights) are kept on ``args.memory_file`` for the commands that use them."""
    from ..model import make_memory, parse_frequency, read_memory_file

    if args.clock is not None:
        parse_frequency(args.clock, require_unit=True)

    flags = dict(
        words=args.words, bits=args.bits, mux=args.mux, order=args.order,
        backgrounds=args.backgrounds, clock=args.clock, read_cycles=args.read_cycles,
        write_cycles=args.write_cycles, read_latency=getattr(args, "read_latency", None),
        scramble_bits=args.scramble_bits,
        scramble_xor=args.scramble_xor, neighbours=args.neighbours,
        refresh=getattr(args, "refresh", None), refresh_scheme=getattr(args, "refresh_scheme", None),
        refresh_during_delays=getattr(args, "refresh_during_delays", None), page=getattr(args, "page", None),
    )
    if args.memory == "demo":
        base = dict(DEMO_MEMORY)
        base.update({k: v for k, v in flags.items() if v is not None})
        return make_memory(**base)
    if args.memory:
        mf = read_memory_file(args.memory, **flags)
        args.memory_file = mf
        return mf.memory
    kw = {k: v for k, v in flags.items() if v is not None}
    kw.setdefault("words", DEFAULT_WORDS)
    return make_memory(**kw)


def add_fault_options(p) -> None:
    g = p.add_argument_group("faults")
    g.add_argument("--faults", default="static", metavar="LIST",
                   help="fault selection: static (48 primitives), classic (SAF TF SOF AF CFin CFid CFst), retention (DRF), "
                   "dynamic (30 single-cell two-operation primitives), all, class names (SAF, CFds, DRF, dRDF, ...), "
                   "kinds (SA0, AF:alias) or primitives like '<0w1/0/->' (comma list; default static)")
    g.add_argument("--pairs", default="neighbours", metavar="SCOPE",
                   help="cell pairs for two-cell faults: all, neighbours, word, sample:K[:SEED] (comma list = union; default neighbours)")
    g.add_argument("--retention", default=None, metavar="TIMES",
                   help="DRF leakage times τ with units, comma list, each 1ns to 10000s (default: the memory "
                   "file's retention list, else 1ms)")
    g.add_argument("--retention-spread", metavar="SPREAD",
                   help="grade a spread of retention times and report the expected fraction of weak cells "
                        "caught: lognormal:MEDIAN:SIGMA[:POINTS] or a comma list of times (replaces --retention)")
    g.add_argument("--disturb-threshold", metavar="N", default=None,
                   help="activations of a neighbour row that flip a disturb victim (comma list; default "
                        "139000, about the first error on DDR3 per Kim et al., ISCA 2014; LPDDR4: as few as 4.8k, "
                        "Kim et al., ISCA 2020)")
    g.add_argument("--engine", choices=("fast", "reference"), default="fast",
                   help="fast (default) or the literal reference simulator (audits; small memories only: its "
                   "run time is estimated first and runs over 2 minutes are refused without --force-time)")
    g.add_argument("--force-time", action="store_true",
                   help="run the reference engine even when its estimated run time exceeds 2 minutes")


def retention_from_args(args, mem=None):
    """The leakage times: --retention, else the memory file's ``retention``, else 1 ms."""
    from ..errors import InputError
    from ..model import parse_duration

    if getattr(args, "retention_spread", None):
        from ..grade.spread import parse_spread

        return parse_spread(args.retention_spread).taus
    text = args.retention
    if text is None:
        mf = getattr(args, "memory_file", None)
        file_times = mf.retention if mf is not None else None
        if file_times:
            return tuple(file_times)
        text = "1ms"
    parts = [t.strip() for t in text.split(",")]
    if not any(parts) or len(parts) > 64:
        raise InputError(f"--retention {text[:40]!r}: give 1 to 64 leakage times with units, e.g. 5ms,50ms")
    if "" in parts:
        raise InputError(f"--retention {text[:40]!r}: an empty item in the list")
    return tuple(parse_duration(t) for t in parts)


def check_sizes(mem, faults_spec: str, pairs_spec: str, retention) -> None:
    """Refuse, before any work, pair scopes that cannot be held in memory (limits stated)."""
    from ..errors import EngineLimitError
    from ..faults import parse_pairs, select_faults
    from ..faults.catalogue import MAX_EXPLICIT_PAIRS

    sel = select_faults(faults_spec, retention)
    scope = parse_pairs(pairs_spec)
    cell_kinds = any(k.arity >= 2 and k.family != "af" for k in sel.kinds)
    word_kinds = any(k.arity >= 2 and k.family == "af" for k in sel.kinds)
    if not (cell_kinds or word_kinds) or scope.is_all:
        return
    total = 0
    for part in scope.parts:
        if part[0] == "sample":
            n = mem.words if not cell_kinds else mem.cells
            total += min(part[1], n * (n - 1))
        elif part[0] == "word" and cell_kinds:
            total += mem.words * mem.bits * (mem.bits - 1)
        # neighbours are counted on the cell grid, never listed: no limit
    if total > MAX_EXPLICIT_PAIRS:
        raise EngineLimitError(
            f"--pairs {pairs_spec}: about {total:,} cell pairs on {mem.words:,} × {mem.bits} cells, more "
            f"than marchkit lists at once ({MAX_EXPLICIT_PAIRS:,}); use --pairs all (counted, not listed), "
            "a smaller sample or a smaller memory")


def load_test(spec: str, check: bool = True):
    from ..notation import ensure_consistent, resolve_test

    t = resolve_test(spec)
    return ensure_consistent(t) if check else t


def atomic_write(path: str | Path, data: bytes | str, force: bool = False) -> None:
    """Write a whole file under a temporary name, then rename it into place."""
    from ..files import write_file

    write_file(path, data, force=force)


EXIT_REQUIREMENT = 3     # --require not met (distinct from 2, bad input)


def add_summary_options(p) -> None:
    g = p.add_argument_group("summary and pass requirements")
    g.add_argument("--weights", metavar="CLASS=W,...",
                   help="class weights for the class-weighted score (default 1 each; also the memory "
                   "file's [weights]), e.g. SAF=5,AF=3,CFid=1")
    g.add_argument("--require", metavar="CLASS=PCT,...",
                   help="pass requirements, e.g. SAF=100,TF=100,CFid=99.5 (also score=PCT, total=PCT); "
                   f"exit status {EXIT_REQUIREMENT} when one is not met")


def summary_from_args(args, selection):
    """(weights, requirements) checked against the fault selection before any grading."""
    from ..grade.score import parse_requirements, parse_weights

    mf = getattr(args, "memory_file", None)
    classes = selection.classes
    weights = parse_weights(args.weights, classes, mf.weights if mf is not None else None)
    return weights, parse_requirements(args.require, classes)


def provenance(args, mem, retention, engine: str, notation=None) -> dict:
    """What produced a JSON result: enough to run it again."""
    from .. import __version__
    from ..faults import format_seconds

    out = {"tool": "marchkit", "version": __version__, "engine": engine,
           "faults": args.faults, "pairs": args.pairs,
           "retention": [format_seconds(t) for t in retention],
           "memory": mem.describe(), "memory_file": getattr(args, "memory", None)}
    thresholds = thresholds_from_args(args)
    if thresholds:
        out["disturb_thresholds"] = list(thresholds)
    if notation is not None:
        out["notation"] = notation
    return out


REFERENCE_STEPS_PER_SECOND = 500_000     # measured: 0.5-0.9 million op-steps/s (benchmarks/bench_engine.py)
REFERENCE_TIME_LIMIT = 120.0             # seconds


def reference_estimate(tests, mem, faults_spec: str, pairs_spec: str, retention) -> tuple[int, float]:
    """(op-steps, seconds) the literal reference simulator needs: per instance, every
    operation of the schedule, for each initial value and ⇕ choice.  Instances are counted
    exactly without listing them."""
    from ..faults import instance_count, parse_pairs, select_faults
    from ..model import schedule

    sel = select_faults(faults_spec, retention)
    scope = parse_pairs(pairs_spec)
    n = sum(instance_count(k, mem, scope) for k in sel.kinds)
    steps = 0
    for t in tests:
        anys = sum(e.order == "any" for e in t.elements)
        steps += n * max(1, schedule(t, mem).ops) * 4 * (2 ** min(anys, 64))
    return steps, steps / REFERENCE_STEPS_PER_SECOND


def check_reference_time(args, tests, mem, retention) -> None:
    if getattr(args, "engine", "fast") != "reference":
        return
    from ..errors import EngineLimitError

    steps, secs = reference_estimate(tests, mem, args.faults, args.pairs, retention)
    if secs > REFERENCE_TIME_LIMIT and not getattr(args, "force_time", False):
        raise EngineLimitError(
            f"the reference engine would take about {_duration(secs)} here ({steps:.2g} op-steps at about "
            f"{REFERENCE_STTEXT}); it refuses runs over {REFERENCE_TIME_LIMIT / 60:g} minutes: use --force-time, "
            "a smaller memory or fault list, or the default engine (same verdicts)")
    if secs > 5:
        sys.stderr.write(f"note: the reference engine will take about {_duration(secs)}\n")


REFERENCE_STTEXT = f"{REFERENCE_STEPS_PER_SECOND:,} per second"


def _duration(secs: float) -> str:
    if secs < 90:
        return f"{secs:.0f} s"
    if secs < 5400:
        return f"{secs / 60:.0f} min"
    if secs < 86400 * 3:
        return f"{secs / 3600:.1f} hours"
    if secs < 86400 * 365 * 3:
        return f"{secs / 86400:.0f} days"
    return f"{secs / 86400 / 365:.2g} years"
