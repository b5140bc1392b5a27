"""The literal reference simulator: for each fault instance, the whole array, every
operation in order, every initial value and ⇕ choice.  Slow and obviously correct — the
oracle the fast engine is tested against, and selectable for audits (``--engine reference``).
"""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import EngineLimitError
from .core import Context, verdict

REFERENCE_LIMIT = 5_000_000_000  # op-steps; beyond this the reference refuses


@dataclass(frozen=True)
class Detection:
    """Where an instance is first detected (canonical scenario: ⇕ run as ⇑)."""

    run: int
    element: int
    op: int
    address: int
    cycle: int


def full_context(test, mem, sched):
    from ..model import address_order, background_stack, ranks

    order = address_order(mem)
    bg = background_stack(mem)
    bgl = [[list(map(int, bg[r, w])) for w in range(mem.words)] for r in range(bg.shape[0])]
    return Context(test, mem, sched, bgl, order.tolist(), ranks(order).tolist(), mem.words)


def event_detection(ctx, ev) -> Detection:
    seg = ctx.sched.segments[ev.seg]
    up = seg.order != "down"       # canonical: ⇕ as ⇑
    pos = ctx.rank[ev.word] if up else ctx.n - 1 - ctx.rank[ev.word]
    cycle = seg.start + pos * seg.per_address + seg.op_offsets[ev.op]
    return Detection(seg.run, seg.element, ev.op, ev.word, cycle)


def reference_verdicts(test, mem, instances, sched=None, limit=REFERENCE_LIMIT):
    """List of (detected, Detection | None), one per instance, in order."""
    from ..model import schedule

    sched = sched or schedule(test, mem)
    instances = list(instances)
    cost = len(instances) * max(1, sched.ops) * 4 * (2 ** sum(e.order == "any" for e in test.elements))
    if cost > limit:
        raise EngineLimitError(
            f"the reference simulator would take about {cost:.2g} steps here; use it on a smaller "
            "memory or fault list (it is meant for audits), or use the default engine"
        )
    dram = [i for i, x in enumerate(instances) if x.kind.family in ("retention", "disturb")]
    out = [None] * len(instances)
    if dram:
        from .dram_reference import dram_reference_verdicts

        for i, v in zip(dram, dram_reference_verdicts(test, mem, [instances[i] for i in dram], sched)):
            out[i] = v
    if len(dram) == len(instances):
        return out
    ctx = full_context(test, mem, sched)
    for i, inst in enumerate(instances):
        if out[i] is None:
            det, ev = verdict(ctx, inst)
            out[i] = (det, event_detection(ctx, ev) if ev is not None else None)
    return out
