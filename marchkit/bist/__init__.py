"""Memory BIST controllers as synthesizable Verilog (``marchkit bist``).

A pipeline in the manner of amaranth: :func:`ir.lower` turns a march test on a memory into a
small program IR (:mod:`.ir`); the back ends read only the IR — :func:`verilog.controller`
with ``style="fsm"`` (hard-wired state machine) or ``style="program"`` (programmable: an
instruction memory loaded with ``$readmemh``; :func:`verilog.program_text` assembles a test into
it), and :func:`testbench.testbench` (self-checking, with the fault-injecting SRAM model of
:mod:`marchkit.rtl`).  :func:`write_bist` writes a directory atomically; :mod:`.area` asks yosys
for the area.

Layer: beside ``export``; imports notation, model, errors, files and rtl only.
"""

from __future__ import annotations

import os
import re
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError, OutputError
from .ir import BistError, BistIR, lower

STYLES = ("fsm", "program")
MIN_PROG_DEPTH = 16
MAX_LAT = 16

_KEYWORDS = set("""always and assign automatic begin buf bufif0 bufif1 case casex casez cell cmos config
deassign default defparam design disable edge else end endcase endconfig endfunction endgenerate
endmodule endprimitive endspecify endtable endtask event for force forever fork function generate
genvar highz0 highz1 if ifnone incdir include initial inout input instance integer join large
liblist library localparam macromodule medium module nand negedge nmos nor noshowcancelled not
notif0 notif1 or output parameter pmos posedge primitive pull0 pull1 pulldown pullup
pulsestyle_onevent pulsestyle_ondetect rcmos real realtime reg release repeat rnmos rpmos rtran
rtranif0 rtranif1 scalared showcancelled signed small specify specparam strong0 strong1 supply0
supply1 table task time tran tranif0 tranif1 tri tri0 tri1 triand trior trireg unsigned use uwire
vectored wait wand weak0 weak1 while wire wor xnor xor logic bit byte int""".split())


def check_top(name: str) -> str:
    if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]{0,62}", name or "") or name in _KEYWORDS:
        raise InputError(
            f"--top {name!r}: give a plain Verilog module name (a letter or _, then letters, digits "
            "or _, at most 63 characters, not a keyword)")
    return name


def default_depth(ir: BistIR, mem, transparent: bool = False) -> int:
    """Instruction memory depth: a power of two holding this test and every library test
    that runs on this memory (so the same RTL runs them all)."""
    from ..notation import library

    need = len(ir.steps)
    for t in library():
        try:
            need = max(need, len(lower(t, mem, transparent).steps))
        except InputError:
            continue
    d = MIN_PROG_DEPTH
    while d < need:
        d *= 2
    return d


@dataclass
class BistResult:
    directory: str
    files: list[str]
    ir: BistIR
    style: str
    top: str
    prog_depth: int | None = None
    area: dict | None = field(default=None)


def generate(test, mem, style: str, top: str, lat: int = 1, prog_depth: int | None = None,
             transparent: bool = False):
    """(IR, {file name: text}) of the BIST for ``test`` on ``mem``."""
    from .testbench import testbench
    from .verilog import controller, program_text

    if style not in STYLES:
        raise InputError(f"--style {style!r}: choose fsm or program")
    check_top(top)
    if not 1 <= lat <= MAX_LAT:
        raise InputError(f"read latency {lat}: give 1 to {MAX_LAT} cycles")
    ir = lower(test, mem, transparent)
    if transparent and lat > min(mem.read_cycles, mem.write_cycles):
        raise BistError(f"transparent test: the read latency ({lat}) must not exceed the cycles of an "
                        "operation (the write after a read uses the data it returned)")
    files = {}
    if style == "program":
        prog_depth = prog_depth or default_depth(ir, mem, transparent)
        if len(ir.steps) > prog_depth:
            raise BistError(f"the program has {len(ir.steps)} instructions, more than PROG_DEPTH {prog_depth}")
        files[f"{top}.v"] = controller(ir, top, style, prog_depth, lat)
        files[f"{top}_program.hex"] = program_text(ir, top, prog_depth)
    else:
        files[f"{top}.v"] = controller(ir, top, style, None, lat)
    files[f"{top}_tb.v"] = testbench(ir, top, style, lat)
    return ir, files, prog_depth


# What a directory written by `bist` may hold besides our files, and still be replaced by --force:
# the outputs of simulating and linting it (Icarus, Verilator) in place.
_REPLACEABLE_SUFFIXES = (".v", ".hex", ".vvp", ".vcd", ".fst", ".log")
_REPLACEABLE_DIRS = ("obj_dir",)


def _check_replaceable(out: Path) -> None:
    """--force replaces a directory as a whole: only one that looks like an earlier controller
    directory (never the working directory or one above it, never one holding other files)."""
    here = Path.cwd().resolve()
    real = out.resolve()
    if real == here or real in here.parents:
        raise OutputError(f"{out} is the working directory or holds it; --force will not replace it")
    try:
        entries = sorted(os.listdir(out))
    except OSError as e:
        raise OutputError(f"cannot replace {out}: {e.strerror}") from None
    other = [n for n in entries
             if not ((out / n).is_file() and n.endswith(_REPLACEABLE_SUFFIXES))
             and not ((out / n).is_dir() and n in _REPLACEABLE_DIRS)]
    if other:
        shown = ", ".join(other[:3]) + (", …" if len(other) > 3 else "")
        raise OutputError(f"{out} holds files bist did not write ({shown}); --force replaces only a "
                          "controller directory: choose another -o or empty it yourself")


def check_output_dir(outdir, force: bool = False) -> tuple[Path, Path]:
    """Refuse an output directory before any work: (the directory, its parent)."""
    if not str(outdir).strip():
        raise OutputError("give the output directory a name (-o DIR)")
    out = Path(outdir)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out} exists and is not a directory")
    if out.exists() and not force:
        raise OutputError(f"{out} exists; use --force to replace it")
    if out.exists():
        _check_replaceable(out)
    parent = out.parent if str(out.parent) else Path(".")
    if not parent.is_dir():
        raise OutputError(f"cannot write {out}: no directory {parent}")
    return out, parent


def write_directory(files: dict, outdir, force: bool = False) -> None:
    """Write ``files`` into a new directory next to ``outdir`` and rename it into place at the
    end: a reader never sees a half-written directory.  An existing ``outdir`` is an error
    without ``force``; with it, the old directory is replaced as a whole."""
    out, parent = check_output_dir(outdir, force)
    try:
        tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".part", dir=parent))
    except OSError as e:
        raise OutputError(f"cannot write {out}: {e.strerror}") from None
    try:
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(tmp, 0o777 & ~mask)
        for name, text in files.items():
            (tmp / name).write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
            os.chmod(tmp / name, 0o666 & ~mask)
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.", suffix=".old", dir=parent))
            os.rename(out, old / "d")
            try:
                os.rename(tmp, out)
            except BaseException:
                os.rename(old / "d", out)       # put the old directory back
                shutil.rmtree(old, ignore_errors=True)
                raise
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def write_bist(test, mem, outdir, style: str = "fsm", top: str = "mbist", force: bool = False,
               lat: int = 1, area: bool = False, transparent: bool = False) -> BistResult:
    check_output_dir(outdir, force)             # before the RTL and its synthesis
    ir, files, depth = generate(test, mem, style, top, lat, transparent=transparent)
    rep = None
    if area:
        from .area import synth_area

        rep = synth_area(files, top, style, depth)
    write_directory(files, outdir, force)
    return BistResult(str(outdir), list(files), ir, style, top, depth, rep)


def write_program(test, mem, path, top: str = "mbist", force: bool = False,
                  prog_depth: int | None = None, transparent: bool = False) -> tuple[BistIR, int]:
    """``--program-only``: the ``$readmemh`` program of ``test`` (atomic single file)."""
    from ..files import write_file
    from .verilog import program_text

    check_top(top)
    ir = lower(test, mem, transparent)
    depth = prog_depth or default_depth(ir, mem, transparent)
    write_file(path, program_text(ir, top, depth), force=force)
    return ir, depth


__all__ = ["lower", "generate", "write_bist", "write_program", "write_directory", "BistError",
           "BistIR", "BistResult", "STYLES"]
