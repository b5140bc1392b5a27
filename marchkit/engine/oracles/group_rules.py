"""Oracle of the group-rule families (``linked3``: LF3; ``npsf``; :mod:`marchkit.faults.group`).

Each ``GRule`` fires when its operation is applied to its role's cell while every role it
names holds the required value (judged on the values before the operation); the victim then
holds ``f`` (overriding what a simultaneous write of the same word put there) and a read of
the victim returns ``r``.  State rules (no operation) act at the start and after every
operation.  A role cut off by the array's edge (an NPSF neighbour that does not exist)
imposes nothing.
"""

from __future__ import annotations

from ...faults.group import grules
from ..core import OracleFault


class Fault(OracleFault):
    def __init__(self, ctx, inst, inits, run):
        bits = ctx.bits
        self.rules = grules(inst.kind)
        self.cells = [divmod(c, bits) if c >= 0 else None for c in inst.sites]
        for c, v in zip(self.cells, inits):
            if c is not None:
                run.vals[c[0]][c[1]] = v
        self.apply_states(run)

    def _values(self, run):
        return [run.vals[c[0]][c[1]] if c is not None else None for c in self.cells]

    def _holds(self, g, pre) -> bool:
        return all(need is None or self.cells[i] is None or pre[i] == need
                   for i, need in enumerate(g.need))

    def apply_states(self, run):
        for g in self.rules:
            if g.op is None and self._holds(g, self._values(run)):
                vw, vb = self.cells[g.victim]
                run.vals[vw][vb] = g.f

    def access(self, run, w, kind, data, t):
        pre = self._values(run)
        out = list(run.vals[w]) if kind == "r" else None
        post = []
        for g in self.rules:
            if g.op is None:
                continue
            role, op, val = g.op
            c = self.cells[role]
            if c is None or c[0] != w or op != kind or (kind == "w" and data[c[1]] != val):
                continue
            if not self._holds(g, pre):
                continue
            post.append((self.cells[g.victim], g.f))
            if kind == "r" and role == g.victim:
                out[self.cells[g.victim][1]] = g.r
        if kind == "w":
            run.vals[w] = list(data)
        for (vw, vb), f in post:
            run.vals[vw][vb] = f
        self.apply_states(run)
        return out
