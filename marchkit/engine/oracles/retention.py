"""Oracle of the retention family (retention with refresh; see :mod:`marchkit.faults.dram`).

The victim cell's restore events are the accesses of its row and the activations of its row
by a hammer item (of its own word on a memory without refresh: activations restore nothing) and the refreshes of its row (refresh slots at cycle s come before an
operation at the same cycle); when a stretch of ≥ τ between two consecutive restore events
ends while the cell holds the value it loses, the cell flips (and the restore keeps the
flipped value).  The start of the test counts as a restore.
"""

from __future__ import annotations

from ..core import OracleFault
from .dram_common import dram_facts


class Fault(OracleFault):
    mutable = ("last", "now")

    def __init__(self, ctx, inst, inits, run):
        self.cw, self.cb = divmod(inst.sites[0], ctx.bits)
        run.vals[self.cw][self.cb] = inits[0]
        self.x = inst.kind.drf_value
        self.tau = ctx.tau_cycles(inst.kind.tau)
        self.rows, self.plan = dram_facts(ctx)
        self.vrow = self.rows[self.cw]
        self.row_mode = ctx.mem.dram
        self.last = 0          # cycle of the last restore
        self.now = -1          # refresh slots up to this cycle are done

    def _restore(self, run, t):
        if run.vals[self.cw][self.cb] == self.x and t - self.last >= self.tau:
            run.vals[self.cw][self.cb] = 1 - self.x
        self.last = t

    def _refreshes(self, run, t):
        if t > self.now:
            for s in self.plan.slots(self.vrow, self.now + 1, t + 1):
                self._restore(run, s)
            self.now = t

    def activate(self, run, row, t):
        self._refreshes(run, t)
        if self.row_mode and row == self.vrow:
            self._restore(run, t)

    def access(self, run, w, kind, data, t):
        self._refreshes(run, t)
        touches = self.rows[w] == self.vrow if self.row_mode else w == self.cw
        if touches:
            self._restore(run, t)
        if kind == "w":
            run.vals[w] = list(data)
            return None
        return list(run.vals[w])
