"""Oracle of the disturb family (read disturb / row hammer; see :mod:`marchkit.faults.dram`).

Every access, and every activation of a hammer item, activates its row (closed page) or only
when another row, or none, is open (open page; refresh is hidden and closes the open row:
one bank).  An activation of the victim's
row or a refresh of it (slots at cycle s come before an operation at the same cycle) sets
both neighbour counts to 0; an activation of row v − 1 or v + 1 adds one to that side's
count; when a count reaches the threshold, a victim holding the vulnerable value flips.
"""

from __future__ import annotations

from ..core import OracleFault
from .dram_common import dram_facts


class Fault(OracleFault):
    mutable = ("cnt", "open_row", "now", "last")

    def __init__(self, ctx, inst, inits, run):
        self.cw, self.cb = divmod(inst.sites[0], ctx.bits)
        run.vals[self.cw][self.cb] = inits[0]
        self.x = inst.kind.drf_value
        self.n = inst.kind.threshold
        self.rows, self.plan = dram_facts(ctx)
        self.vrow = self.rows[self.cw]
        self.closed = ctx.mem.page == "closed"
        self.cnt = [0, 0]      # activations of row v - 1, of row v + 1 since the last reset
        self.open_row = -1
        self.now = -1
        self.last = -1         # cycle of the last access or activation
        self.all_rows = range(ctx.mem.rows)

    def access(self, run, w, kind, data, t):
        self._touch(run, self.rows[w], t)
        if kind == "w":
            run.vals[w] = list(data)
            return None
        return list(run.vals[w])

    def activate(self, run, row, t):
        self._touch(run, row, t)

    def _touch(self, run, r, t):
        """An access to (or a hammer activation of) row ``r`` at cycle ``t``."""
        if t > self.now:
            if self.plan.slots(self.vrow, self.now + 1, t + 1):
                self.cnt = [0, 0]
            self.now = t
        # a refresh of any row since the last access closed the open row (one bank)
        if not self.closed and any(self.plan.slots(q, self.last + 1, t + 1) for q in self.all_rows):
            self.open_row = -1
        self.last = t
        activates = self.closed or self.open_row != r
        self.open_row = r
        if activates:
            if r == self.vrow:
                self.cnt = [0, 0]
            elif abs(r - self.vrow) == 1:
                side = 0 if r < self.vrow else 1
                self.cnt[side] += 1
                if self.cnt[side] >= self.n and run.vals[self.cw][self.cb] == self.x:
                    run.vals[self.cw][self.cb] = 1 - self.x
