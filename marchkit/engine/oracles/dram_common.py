"""What the two DRAM oracles share: per context, each word's physical row and the refresh
plan (refresh slots listed literally, :meth:`RefreshPlan.slots`)."""

from __future__ import annotations


def dram_facts(ctx):
    """(row of each word (list), RefreshPlan), cached on the context."""
    facts = getattr(ctx, "_dram_facts", None)
    if facts is None:
        from ...model.dram import RefreshPlan

        mem = ctx.mem
        rows = [int(p) // mem.mux for p in mem.physical_word(list(range(mem.words)))]
        facts = (rows, RefreshPlan(mem, ctx.sched))
        ctx._dram_facts = facts
    return facts
