"""Oracle of the address-decoder family.

``AF:none`` — address a selects no cell; a read of it returns a fixed value, the same in
every bit, unknown which (tried both ways).  ``AF:alias`` — address b selects cell a instead
of its own.  ``AF:multi`` — address a selects cells a and b.  ``AF:cross`` — a and b both
select both cells.  A read of several cells returns their bitwise AND; a write writes all
selected cells.
"""

from __future__ import annotations

from ..core import OracleFault, and3


class Fault(OracleFault):
    def __init__(self, ctx, inst, inits, run):
        self.bits = ctx.bits
        kind = inst.kind
        a = inst.sites[0]
        b = inst.sites[1] if len(inst.sites) > 1 else None
        self.dec = {}
        self.floating = None
        if kind.af == "none":
            self.dec[a] = []
            self.floating = inits[0]
        elif kind.af == "alias":
            self.dec[b] = [a]
        elif kind.af == "multi":
            self.dec[a] = [a, b]
        else:
            self.dec[a] = [a, b]
            self.dec[b] = [a, b]

    def access(self, run, w, kind, data, t):
        targets = self.dec.get(w, [w])
        if kind == "w":
            for p in targets:
                run.vals[p] = list(data)
            return None
        if not targets:
            return [self.floating] * self.bits
        out = list(run.vals[targets[0]])
        for p in targets[1:]:
            out = [and3(x, y) for x, y in zip(out, run.vals[p])]
        return out
