"""Oracle of the stuck-open family: writes do not reach the cell; a read returns, for that
bit, the sense amplifier's previous value (the last value read, per bit; unknown at first)."""

from __future__ import annotations

from ..core import OracleFault


class Fault(OracleFault):
    def __init__(self, ctx, inst, inits, run):
        self.cw, self.cb = divmod(inst.sites[0], ctx.bits)

    def access(self, run, w, kind, data, t):
        cw, cb = self.cw, self.cb
        if kind == "w":
            keep = run.vals[w][cb]
            run.vals[w] = list(data)
            if w == cw:
                run.vals[w][cb] = keep
            return None
        out = list(run.vals[w])
        if w == cw:
            out[cb] = run.sa[cb]
        return out
