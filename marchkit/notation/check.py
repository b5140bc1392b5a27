"""Checks on a march test that need no memory model: does a fault-free memory pass it?"""

from __future__ import annotations

import re

from ..errors import ConsistencyError, Diagnostic
from .ast import Delay, Element, Hammer, MarchTest
from .printer import UNICODE_ORDER, format_item


def _where(ei: int, el: Element, oi: int, op) -> str:
    """Elements M0, M1, … and their operations op 0, op 1, … count from 0, as everywhere
    in marchkit (grade tables, HTML, the exports' element and op fields)."""
    return f"M{ei} {format_item(el)} op {oi} '{op.kind}{op.value}'"


def check_test(test: MarchTest) -> list[Diagnostic]:
    """Errors and warnings for ``test``.

    Every cell receives the same operations in the same sequence, so the fault-free value of
    any cell before each operation is known (or unknown, before the first write) without a
    memory model.  A read expecting the other value is an error: a good memory fails it.
    """
    diags: list[Diagnostic] = []
    state: int | None = None
    last_write = None
    warned_unwritten = False
    any_read = False
    seen_write = False
    ei = -1
    for item in test.items:
        if isinstance(item, Hammer):      # activations read and write no cell
            continue
        if isinstance(item, Delay):
            if not seen_write:
                diags.append(Diagnostic("warning", "a delay before the first write waits on unknown contents", item.pos))
            continue
        ei += 1
        for oi, op in enumerate(item.ops):
            if op.kind == "w":
                state = op.value
                last_write = (ei, item, oi, op)
                seen_write = True
                continue
            any_read = True
            if state is None:
                if not warned_unwritten:
                    diags.append(Diagnostic(
                        "warning",
                        f"{_where(ei, item, oi, op)} reads cells that were never written: their "
                        "contents are unknown, so this read detects nothing",
                        op.pos or item.pos,
                    ))
                    warned_unwritten = True
            elif state != op.value:
                lw = last_write
                diags.append(Diagnostic(
                    "error",
                    f"{_where(ei, item, oi, op)} expects {op.value}, but a fault-free cell holds "
                    f"{state} here (written by {_where(*lw)}): a good memory would fail this test",
                    op.pos or item.pos,
                ))
    if not any_read:
        diags.append(Diagnostic("warning", "the test has no read: it can detect no fault", test.pos))
    if test.length:
        m = re.match(r"(\d+)n", test.length)
        if m and int(m.group(1)) != test.ops_per_cell:
            diags.append(Diagnostic(
                "warning",
                f"declared length {test.length} but the notation has {test.ops_per_cell} operations per cell",
                test.pos,
            ))
    return diags


def ensure_consistent(test: MarchTest) -> MarchTest:
    """Raise :class:`ConsistencyError` for the first error :func:`check_test` finds."""
    for d in check_test(test):
        if d.severity == "error":
            raise ConsistencyError(f"test {test.display_name!r}: {d.message}", d.pos, _source_of(test))
    return test


def _source_of(test: MarchTest):
    return test.text
