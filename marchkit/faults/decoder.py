"""The address-decoder family (van de Goor's four fault types A–D in realistic combinations).

Sites are *words* (addresses): ``AF:none`` involves one address, the others two, ``a`` and ``b``.
"""

from __future__ import annotations

from .family import Family
from .primitives import FaultKind

AF = (
    FaultKind("AF:none", "AF", "af", 1, af="none",
              description="address a selects no cell (so cell a is selected by no address); a read of a returns a fixed value, all bits alike, unknown which"),
    FaultKind("AF:alias", "AF", "af", 2, af="alias",
              description="address b selects cell a instead of cell b (cell a has two addresses, cell b none)"),
    FaultKind("AF:multi", "AF", "af", 2, af="multi",
              description="address a selects cells a and b; a read returns the AND of both"),
    FaultKind("AF:cross", "AF", "af", 2, af="cross",
              description="addresses a and b both select cells a and b; a read returns the AND of both"),
)


class DecoderFamily(Family):
    name = "af"
    classes = ("AF",)
    site = "words"
    labels = ("a", "b")
    short_labels = ("a", "b")
    needs = {"AF": "needs ⇑(rx,…,wx̄) and ⇓(rx̄,…,wx) (van de Goor)"}
    where = {"a first": "missed with a before b in ⇑", "b first": "missed with b before a in ⇑"}

    def groups(self, retention):
        return {"classic": [(3, AF)], "all": [(3, AF)]}

    def init_values(self, kind):
        return 1 if kind.af == "none" else 0   # the floating read value


FAMILY = DecoderFamily()
