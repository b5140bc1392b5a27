"""The stuck-open family: writes do not reach the cell; a read returns the sense amplifier's
previous value for that bit."""

from __future__ import annotations

from .family import Family
from .primitives import FaultKind

SOF = (FaultKind("SOF", "SOF", "sof", 1,
                 description="stuck-open: writes do not reach the cell; a read returns the sense amplifier's previous value"),)


class StuckOpenFamily(Family):
    name = "sof"
    classes = ("SOF",)
    needs = {"SOF": "needs a read expecting the opposite of the read before it, as in ⇑(r0,w1,r1)"}

    def groups(self, retention):
        return {"classic": [(2, SOF)], "all": [(2, SOF)]}

    def init_values(self, kind):
        return 0


FAMILY = StuckOpenFamily()
