"""Area of a generated controller: yosys generic synthesis (``synth -flatten``), then counts of
cells and flip-flops from ``stat -json``.

``program`` style: the instruction memory module is made a black box, so the figures are the
controller's; the instruction memory is reported as its size in bits (``PROG_DEPTH`` × 40), to
be built as a ROM or register-file macro.  A run that leaves latches or cells yosys could not
map to its generic gate library is an error (it would mean the RTL is not what we meant).
"""

from __future__ import annotations

import json
import shutil
import subprocess
import tempfile
from pathlib import Path

from ..errors import MarchkitError
from .verilog import IW

YOSYS_TIMEOUT = 600


class SynthesisError(MarchkitError):
    """yosys failed or produced latches / unmapped cells (a bug: exit status 1)."""


def have_yosys() -> bool:
    return shutil.which("yosys") is not None


def is_ff(cell_type: str) -> bool:
    t = cell_type.lstrip("\\")
    return t.startswith("$_") and ("DFF" in t or "SR_" in t)


def synth_stats(directory, top: str, blackbox: str | None = None, flatten: bool = True) -> dict:
    """Run yosys on ``DIR/<top>.v`` (in that directory) → {type: count} of the top module."""
    script = [f"read_verilog {top}.v"]
    if blackbox:                       # before hierarchy: no parameterised copy is derived
        script.append(f"blackbox {blackbox}")
    script.append(f"hierarchy -top {top}")
    script.append(f"synth -top {top}" + (" -flatten" if flatten else ""))
    script.append("tee -q -o stat.json stat -json")
    try:
        res = subprocess.run(["yosys", "-q", "-p", "; ".join(script)], cwd=directory,
                             capture_output=True, text=True, timeout=YOSYS_TIMEOUT)
    except (OSError, subprocess.TimeoutExpired) as e:
        raise SynthesisError(f"yosys did not run: {e}") from None
    if res.returncode != 0:
        raise SynthesisError("yosys failed:\n" + (res.stderr or res.stdout)[-2000:])
    data = json.loads((Path(directory) / "stat.json").read_text())
    mods = data["modules"]
    key = next(k for k in mods if k.lstrip("\\") == top)
    return dict(mods[key]["num_cells_by_type"])


def summarize(types: dict, blackbox: str | None = None) -> dict:
    latches = {t: n for t, n in types.items() if "LATCH" in t.upper()}
    boxes = {t: n for t, n in types.items() if blackbox and t.lstrip("\\") == blackbox}
    unmapped = {t: n for t, n in types.items()
                if not t.startswith("$_") and t not in boxes}
    if latches or unmapped:
        raise SynthesisError(f"synthesis left latches {latches} or unmapped cells {unmapped}")
    cells = sum(n for t, n in types.items() if t not in boxes)
    ffs = sum(n for t, n in types.items() if is_ff(t))
    return {"cells": cells, "flip_flops": ffs, "by_type": types}


def synth_area(files: dict, top: str, style: str, prog_depth: int | None) -> dict:
    """Area of the controller in ``files`` ({name: text}); see the module text."""
    if not have_yosys():
        return {"skipped": "yosys is not installed"}
    with tempfile.TemporaryDirectory(prefix="marchkit-area-") as d:
        for name, text in files.items():
            (Path(d) / name).write_text(text, encoding="utf-8")
        box = f"{top}_program_rom" if style == "program" else None
        out = summarize(synth_stats(d, top, box), box)
    if style == "program":
        out["program_bits"] = prog_depth * IW
        out["program_depth"] = prog_depth
    return out
