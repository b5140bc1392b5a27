"""Oracle of the data-retention family: when a cell holding the lost value is accessed (read
or write of its word) at least τ after its last access (or the start), it has flipped before
the operation acts.  A read restores the cell like a write (DRAM-like read-restore)."""

from __future__ import annotations

from ..core import OracleFault


class Fault(OracleFault):
    mutable = ("last",)

    def __init__(self, ctx, inst, inits, run):
        self.cw, self.cb = divmod(inst.sites[0], ctx.bits)
        run.vals[self.cw][self.cb] = inits[0]
        self.x = inst.kind.drf_value
        self.last = 0
        self.tau = ctx.tau_cycles(inst.kind.tau)

    def access(self, run, w, kind, data, t):
        cw, cb = self.cw, self.cb
        if w == cw:
            if run.vals[cw][cb] == self.x and t - self.last >= self.tau:
                run.vals[cw][cb] = 1 - self.x
            self.last = t
        if kind == "w":
            run.vals[w] = list(data)
            return None
        return list(run.vals[w])
