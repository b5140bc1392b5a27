"""Layer 6: tester and simulator stimulus.

:class:`~marchkit.export.stream.Plan` expands a test on a memory into clock-cycle vectors
(a stream of blocks; see :mod:`marchkit.export.stream` for what a cycle carries) and the
writers turn the stream into files:

========  ===========================================================  =====================
format    what                                                         layout documented in
========  ===========================================================  =====================
``csv``   one header row, one row per cycle                            :mod:`.tabular`
``jsonl`` one JSON object per cycle                                    :mod:`.tabular`
``stil``  IEEE 1450-1999 STIL, idle runs as ``Loop``                   :mod:`.stil`
``vcd``   IEEE 1364 value change dump                                  :mod:`.vcd`
``hex``   Verilog ``$readmemh`` words + testbench + behavioural SRAM  :mod:`.hexfile`
========  ===========================================================  =====================

Every writer streams (memory use does not depend on the length of the test) and every file
is written under a temporary name and renamed when complete (:mod:`.output`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..errors import OutputError
from ..model.timing import EXPAND_LIMIT
from .stream import Plan, Vector, expand

FORMATS = ("csv", "jsonl", "stil", "vcd", "hex")
EXTENSIONS = {".csv": "csv", ".jsonl": "jsonl", ".stil": "stil", ".vcd": "vcd", ".hex": "hex"}


def writer(fmt: str):
    if fmt == "csv":
        from .tabular import write_csv
        return write_csv
    if fmt == "jsonl":
        from .tabular import write_jsonl
        return write_jsonl
    if fmt == "stil":
        from .stil import write_stil
        return write_stil
    if fmt == "vcd":
        from .vcd import write_vcd
        return write_vcd
    if fmt == "hex":
        from .hexfile import write_hex
        return write_hex
    raise OutputError(f"unknown export format {fmt!r}; choose one of: {', '.join(FORMATS)}")


def format_for(path: str, fmt: str | None) -> str:
    if fmt:
        if fmt not in FORMATS:
            raise OutputError(f"unknown export format {fmt!r}; choose one of: {', '.join(FORMATS)}")
        return fmt
    if path == "-":
        raise OutputError("writing to standard output needs --format")
    ext = Path(path).suffix.lower()
    if ext not in EXTENSIONS:
        raise OutputError(f"cannot tell the format from {path!r}; give --format ({', '.join(FORMATS)})")
    return EXTENSIONS[ext]


class _Counting:
    """A binary file wrapper that counts bytes."""

    def __init__(self, f):
        self.f = f
        self.bytes = 0

    def write(self, b):
        n = memoryview(b).nbytes
        self.bytes += n
        self.f.write(b)
        return n


@dataclass
class ExportResult:
    format: str
    files: list[str]
    cycles: int
    seconds: object          # Fraction
    bytes: int
    details: dict = field(default_factory=dict)


def companion_paths(path: str) -> tuple[Path, Path]:
    """The testbench and SRAM model written beside a hex pattern: NAME_tb.v, NAME_sram.v."""
    p = Path(path)
    return p.with_name(p.stem + "_tb.v"), p.with_name(p.stem + "_sram.v")


def check_stuck(mem, stuck) -> None:
    if stuck is None:
        return
    word, bit, value = stuck
    if not 0 <= word < mem.words:
        raise OutputError(f"stuck-at cell: word {word} is outside 0..{mem.words - 1}")
    if not 0 <= bit < mem.bits:
        raise OutputError(f"stuck-at cell: bit {bit} is outside 0..{mem.bits - 1}")
    if value not in (0, 1):
        raise OutputError("stuck-at cell: the value must be 0 or 1")


def export(test, mem, out: str, fmt: str | None = None, *, physical: bool = False,
           force: bool = False, stuck=None, max_bytes: int | None = None, pins=None) -> ExportResult:
    """Write ``test`` on ``mem`` to ``out`` (a path or ``-``) in ``fmt``.

    ``stuck`` (hex only): ``(logical word, bit, value)`` of a stuck-at cell that the
    generated testbench injects into its SRAM model by default.

    ``pins``: a :class:`~marchkit.export.pins.PinMap` (signal names, polarity, chip enable,
    byte enables, compare strobe) for the STIL and VCD writers; the default names otherwise.

    ``max_bytes``: refuse, before writing, an export estimated larger than this (default
    :data:`.budget.DEFAULT_LIMIT`, 100 MB; ``0`` for no limit).  The estimate is in
    ``details["estimated_bytes"]``.
    """
    from .output import Targets

    from ..files import target_kind

    target_kind(out, force)          # empty names, directories, "newdir/", ... before any work
    fmt = format_for(out, fmt)
    if stuck is not None and fmt != "hex":
        raise OutputError("a stuck-at cell can only be injected with --format hex (into its SRAM model)")
    check_stuck(mem, stuck)
    plan = Plan(test, mem, physical=physical)
    if plan.looped and fmt != "stil" and plan.test.hammers:
        raise OutputError(
            f"this test has a hammer item ({plan.cycles:,} cycles in all); {fmt} writes every clock cycle — "
            "export it as stil (its rounds become loops)")
    if plan.looped and fmt != "stil":
        longest = max(op.repeat for e in test.elements for op in e.ops)
        raise OutputError(
            f"this test repeats an operation {longest:,} times in a row ({plan.cycles:,} cycles in all); "
            f"{fmt} writes every clock cycle, so it takes at most {EXPAND_LIMIT:,} operations per address "
            "visit — export it as stil (repeats become loops) or shorten the repeat")
    if pins is not None:
        if fmt not in ("stil", "vcd") and not pins.is_default:
            raise OutputError("a pin map (signal names, polarity, enables, strobe) applies to --format stil and vcd")
        plan.pins = pins
    from .budget import DEFAULT_LIMIT, check_budget

    estimate = check_budget(plan, fmt, out, DEFAULT_LIMIT if max_bytes is None else (max_bytes or None))
    paths = [out]
    tb_path = sram_path = None
    streamed = out == "-" or (Path(out).exists() and not Path(out).is_file() and not Path(out).is_dir())
    if stuck is not None and streamed:
        raise OutputError("a stuck-at cell goes into the testbench, which is written only beside a hex file (-o FILE.hex)")
    if fmt == "hex" and not streamed:
        tb_path, sram_path = companion_paths(out)
        paths += [str(tb_path), str(sram_path)]
    try:
        res = _export(plan, out, fmt, paths, tb_path, sram_path, mem, physical, force, stuck)
        res.details.setdefault("estimated_bytes", estimate)
        return res
    except OSError as e:
        if isinstance(e, BrokenPipeError) and out == "-":
            raise
        from ..files import os_error_text

        where = "standard output" if out == "-" else out
        raise OutputError(f"cannot write {where}: {os_error_text(e)}") from None


def _export(plan, out, fmt, paths, tb_path, sram_path, mem, physical, force, stuck) -> ExportResult:
    from .output import Targets

    with Targets(paths, force=force) as targets:
        f = _Counting(targets.open(out))
        details = writer(fmt)(plan, f) or {}
        total = f.bytes
        if tb_path is not None:
            from .hexfile import module_name, sram_text, testbench_text

            stuck_addr = None
            if stuck is not None:
                w, b, v = stuck
                if physical:
                    w = int(mem.physical_word(w))
                stuck_addr = (w, b, v)
            tb_mod = module_name(tb_path.stem)
            sram_mod = module_name(sram_path.stem)
            tb = testbench_text(plan, tb_mod, sram_mod, Path(out).name, details["words"], stuck_addr)
            sr = sram_text(plan, sram_mod)
            for p, text in ((tb_path, tb), (sram_path, sr)):
                g = targets.open(p)
                g.write(text.encode())
                total += len(text.encode())
    files = [out] + ([str(tb_path), str(sram_path)] if tb_path is not None else [])
    return ExportResult(fmt, files, plan.cycles, plan.seconds, total, details)


__all__ = ["FORMATS", "EXTENSIONS", "Plan", "Vector", "expand", "export", "ExportResult", "writer",
           "format_for", "companion_paths"]
