"""The disturb family (read disturb / row hammer): kinds in :mod:`marchkit.faults.dram`,
selected with ``--faults disturb`` (or ``dram``) and ``--disturb-threshold N``."""

from __future__ import annotations

from .dram import DEFAULT_THRESHOLD, disturb_kinds
from .family import Family


class DisturbFamily(Family):
    name = "disturb"
    classes = ("disturb",)
    needs = {"disturb": "needs a neighbour row activated at least the threshold number of times "
                        "within one refresh window of the victim row (closed page: a repeated read "
                        "such as r0^N; open page: two rows in turn, as in ⇑hammer(-1,+1)^N), then a "
                        "read of the victim"}

    def kinds(self, retention):
        return disturb_kinds((DEFAULT_THRESHOLD,))

    def class_kinds(self, cls, retention):
        return disturb_kinds((DEFAULT_THRESHOLD,))

    def test_kinds(self, retention):
        return disturb_kinds((1, 2, 3, 5))

    def init_values(self, kind):
        return 1


FAMILY = DisturbFamily()
