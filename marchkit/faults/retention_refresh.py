"""The retention family on a DRAM (and for hammer-length repeats): kinds in
:mod:`marchkit.faults.dram`; the same class and kind names as the SRAM data-retention kinds,
which :func:`marchkit.faults.dram.adapt_kinds` turns into these when the memory refreshes or
the test repeats an operation more than 32 times."""

from __future__ import annotations

from .dram import retention_kinds
from .family import Family


class RetentionRefreshFamily(Family):
    name = "retention"
    classes = ()            # the class DRF is owned by the SRAM family; these kinds share it
    needs = {"DRF": "needs, for each value, a read after at least τ with neither an access to the cell's row "
                    "nor a refresh of it (on a DRAM: a pause of at least τ with refresh suspended)"}

    def kinds(self, retention):
        return retention_kinds(retention)

    def class_kinds(self, cls, retention):
        return retention_kinds(retention)

    def init_values(self, kind):
        return 1


FAMILY = RetentionRefreshFamily()
