"""How large an export will be, known before a byte is written.

The estimate counts the cycles of the plan (operation cycles and idle cycles of delays) and
multiplies them by the size of one line of each format, from the widths of the fields
(cycle number digits, address and data hex digits, bits).  It is a rule of thumb, within
about ±30 % of the real size (the tests compare it with files actually written); what it is
for is the difference between kilobytes and terabytes.  Beyond :data:`DEFAULT_LIMIT` the
export is refused unless the user says ``--force-size``.
"""

from __future__ import annotations

import math

DEFAULT_LIMIT = 100 * 10**6      # 100 MB
LIMIT_TEXT = "100 MB"


def cycle_split(plan) -> tuple[int, int, int]:
    """(operation cycles, idle cycles, number of delays) of a plan."""
    active = idle = delays = 0
    for s in plan.segments:
        if s.is_delay:
            idle += s.cycles
            delays += 1
        else:
            active += s.cycles
    return active, idle, delays


def estimate_bytes(plan, fmt: str) -> int:
    active, idle, delays = cycle_split(plan)
    d = len(str(max(plan.cycles, 1)))
    ab = max(plan.address_bits, 1)
    b = plan.bits
    ha, hb = math.ceil(ab / 4), math.ceil(b / 4)
    if fmt == "csv":
        per_op = d + ha + 3 * hb + 21
        per_idle = d + ha + 3 * hb + 18
        return 64 + active * per_op + idle * per_idle
    if fmt == "jsonl":
        per_op = d + ha + 3 * hb + 115
        per_idle = d + ha + 3 * hb + 122
        return active * per_op + idle * per_idle
    if fmt == "vcd":
        per_op = 2 * (d + 2) + (ab + 3) + 2 * (b + 3) + 10
        per_idle = 2 * (d + 2) + 8
        return 2000 + active * per_op + idle * per_idle
    if fmt == "stil":
        per_op = 49 + ab + (12 * b) // 5
        return 4000 + active * per_op + delays * 200
    if fmt == "hex":
        # an idle run is one word per 2^32 - 1 cycles (marchkit.export.hexfile)
        idle_words = sum(-(-s.cycles // ((1 << 32) - 1)) for s in plan.segments if s.is_delay)
        per = 12 + ha + hb + (hb if getattr(plan, "latency", 0) else 0)   # pipelined reads: expected data apart
        return 14000 + active * per + idle_words * per   # + testbench and SRAM model text
    return active + idle


def human_bytes(n: float) -> str:
    for unit in ("bytes", "KB", "MB", "GB", "TB", "PB", "EB"):
        if n < 1000 or unit == "EB":
            return f"{n:,.0f} {unit}" if unit == "bytes" else f"{n:.3g} {unit}"
        n /= 1000
    return f"{n:.3g} EB"  # pragma: no cover


def check_budget(plan, fmt: str, out: str, limit: int | None = DEFAULT_LIMIT) -> int:
    """The estimate; raises :class:`OutputError` beyond ``limit`` (None: no limit) or beyond
    the free space of the target's file system."""
    import os
    import shutil
    from pathlib import Path

    from ..errors import OutputError

    if fmt == "stil" and getattr(plan, "looped", False):
        return 0          # long repeats are written as loops: the file does not grow with them
    est = estimate_bytes(plan, fmt)
    active, idle, _ = cycle_split(plan)
    share = f", {100 * idle / plan.cycles:.0f} % of them idle" if plan.cycles and idle else ""
    what = f"about {human_bytes(est)} of {fmt} ({plan.cycles:,} cycles{share})"
    alt = ""
    if fmt in ("csv", "jsonl", "vcd") and idle:
        alt = f"; STIL writes idle runs as loops (--format stil: about {human_bytes(estimate_bytes(plan, 'stil'))})"
    if limit is not None and est > limit:
        raise OutputError(f"the export would write {what}, more than the {human_bytes(limit)} limit; "
                          f"use --force-size to write it anyway{alt}")
    if out != "-":
        p = Path(out)
        d = p.parent if str(p.parent) else Path(".")
        try:
            free = shutil.disk_usage(d).free
        except OSError:
            free = None
        if free is not None and est > free and not (p.exists() and not p.is_file()):
            raise OutputError(f"the export would write {what}, but only {human_bytes(free)} are free in "
                              f"{os.path.abspath(d)}{alt}")
    return est
