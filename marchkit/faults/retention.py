"""The data-retention family: a cell holding the value it loses, accessed at least τ after its
last access (or the start), has flipped before the operation acts."""

from __future__ import annotations

from fractions import Fraction

from ..units import format_seconds
from .family import Family
from .primitives import FaultKind


def drf_kinds(taus) -> tuple[FaultKind, ...]:
    out = []
    for tau in taus:
        for x in (0, 1):
            out.append(FaultKind(
                f"DRF{x}(τ={format_seconds(tau)})", "DRF", "drf", 1, drf_value=x, tau=Fraction(tau),
                description=f"a cell holding {x} loses it {format_seconds(tau)} after it was last written or read",
            ))
    return tuple(out)


class RetentionFamily(Family):
    name = "drf"
    classes = ("DRF",)
    needs = {"DRF": "needs a read after a pause longer than τ (a delay element) for each value"}

    def groups(self, retention):
        return {"retention": [(0, drf_kinds(retention))], "all": [(6, drf_kinds(retention))]}

    def class_kinds(self, cls, retention):
        return drf_kinds(retention)


FAMILY = RetentionFamily()
