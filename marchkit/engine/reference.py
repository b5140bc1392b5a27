"""The literal reference simulator: for each fault instance, the whole array, every
operation in order, every initial value, and every ⇕ choice (carried as a set of reachable
states, see :mod:`marchkit.engine.core`).  Slow and obviously correct — the oracle the fast
engine is tested against, and selectable for audits (``--engine reference``).
"""

from __future__ import annotations

from ..errors import EngineLimitError
from .core import Context, verdict
from .results import Detection

REFERENCE_LIMIT = 5_000_000_000  # op-steps; beyond this the reference refuses

__all__ = ["Detection", "REFERENCE_LIMIT", "full_context", "reference_verdicts", "reference_cost"]


def full_context(test, mem, sched):
    from ..model import address_order, background_stack, ranks

    order = address_order(mem)
    bg = background_stack(mem)
    bgl = [[list(map(int, bg[r, w])) for w in range(mem.words)] for r in range(bg.shape[0])]
    return Context(test, mem, sched, bgl, order.tolist(), ranks(order).tolist(), mem.words)


def event_detection(ctx, ev) -> Detection:
    from ..model import op_cycle

    seg = ctx.sched.segments[ev.seg]
    up = seg.order != "down"       # canonical: ⇕ as ⇑
    pos = ctx.rank[ev.word] if up else ctx.n - 1 - ctx.rank[ev.word]
    return Detection(seg.run, seg.element, ev.op, ev.word, op_cycle(seg, ev.op, pos))


def reference_cost(test, sched, n_instances: int) -> int:
    """Op-steps the reference needs for ``n_instances`` (4 initial values at most; a ⇕
    element runs each carried state both ways, counted as 2 more runs)."""
    n_any = sum(e.order == "any" for e in test.elements)
    acts = sum(s.cycles // s.row_cycle for s in sched.segments if s.hammer is not None)
    return n_instances * max(1, sched.ops + acts) * 4 * (3 if n_any else 1)


def reference_verdicts(test, mem, instances, sched=None, limit=REFERENCE_LIMIT):
    """List of (detected, Detection | None), one per instance, in order."""
    from ..model import schedule

    sched = sched or schedule(test, mem)
    instances = list(instances)
    cost = reference_cost(test, sched, len(instances))
    if cost > limit:
        raise EngineLimitError(
            f"the reference simulator would take about {cost:.2g} steps here; use it on a smaller "
            "memory or fault list (it is meant for audits), or use the default engine"
        )
    ctx = full_context(test, mem, sched)
    out = []
    for inst in instances:
        det, ev = verdict(ctx, inst)
        out.append((det, event_detection(ctx, ev) if ev is not None else None))
    return out
