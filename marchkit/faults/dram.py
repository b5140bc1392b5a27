"""DRAM fault kinds (data only): retention with refresh, and read disturb (row hammer).

``retention`` family (class ``DRF``; the same names as the SRAM data-retention kinds):
a cell with retention time τ holding the value it loses (``drf_value``) flips when a stretch
of at least τ passes without a restore of it.  Restores are: an access (read or write) of a
word in its row and a refresh of its row on a DRAM (``Memory.refresh`` > 0); an access of
its own word on a memory without refresh (the SRAM data-retention semantics exactly).  The
flip is seen by the next access; a read restores what it reads.

``disturb`` family (class ``disturb``): a victim cell holding ``drf_value`` flips once one
of the rows next to its row (the aggressor rows, physical row ± 1) has been *activated* at
least ``threshold`` times since the victim's row was last activated or refreshed.  Double-
sided model chosen: each neighbour row is counted on its own and the victim flips when
either count reaches the threshold (hammering both neighbours N times each flips at N, as
the published per-aggressor-row counts are stated; a model that adds both sides would flip
a double-sided victim at N/2 per aggressor).  Activations follow the page policy of the
memory (``Memory.page``).  Sources for thresholds: about 139 K activations to the first error
on DDR3 (Kim et al., "Flipping bits in memory without accessing them", ISCA 2014); as few
as 4.8 K per aggressor row on LPDDR4 (Kim et al., "Revisiting RowHammer", ISCA 2020).
"""

from __future__ import annotations

from fractions import Fraction

from ..errors import FaultSpecError
from .primitives import FaultKind

DDR3_FIRST_ERROR = 139_000      # Kim et al., ISCA 2014 (about 139 K activations)
LPDDR4_PER_AGGRESSOR = 4_800    # Kim et al., ISCA 2020 (as few as 4.8 K per aggressor row)
DEFAULT_THRESHOLD = DDR3_FIRST_ERROR
MAX_THRESHOLD = 10**12

FAMILIES = ("retention", "disturb")


def _seconds(tau) -> str:
    from .catalogue import format_seconds

    return format_seconds(tau)


def retention_kinds(taus) -> tuple[FaultKind, ...]:
    out = []
    for tau in taus:
        for x in (0, 1):
            out.append(FaultKind(
                f"DRF{x}(τ={_seconds(tau)})", "DRF", "retention", 1, drf_value=x, tau=Fraction(tau),
                description=f"a cell holding {x} loses it when {_seconds(tau)} pass without an access "
                            "to its row or a refresh of its row",
            ))
    return tuple(out)


def check_threshold(n) -> int:
    try:
        v = int(n)
    except (TypeError, ValueError):
        raise FaultSpecError(f"disturb threshold {n!r} is not a whole number") from None
    if isinstance(n, float) and n != v:
        raise FaultSpecError(f"disturb threshold {n!r} is not a whole number")
    if not 1 <= v <= MAX_THRESHOLD:
        raise FaultSpecError(f"disturb threshold must be 1 to {MAX_THRESHOLD:,} activations (got {n})")
    return v


def parse_thresholds(text) -> tuple[int, ...]:
    if isinstance(text, int):
        return (check_threshold(text),)
    if isinstance(text, (tuple, list)):
        return tuple(check_threshold(t) for t in text)
    parts = [p.strip().replace("_", "") for p in str(text).split(",") if p.strip()]
    if not parts:
        raise FaultSpecError("give at least one disturb threshold")
    out = []
    for p in parts:
        mult = 1
        if p[-1:].lower() == "k":
            p, mult = p[:-1], 1000
        try:
            v = Fraction(p) * mult
        except (ValueError, ZeroDivisionError):
            raise FaultSpecError(f"disturb threshold {p!r} is not a number such as 139000 or 4.8k") from None
        if v.denominator != 1:
            raise FaultSpecError(f"disturb threshold {p!r} is not a whole number of activations")
        if v <= 0:
            raise FaultSpecError(f"disturb threshold must be at least 1 activation (got {p})")
        out.append(check_threshold(int(v)))
    return tuple(dict.fromkeys(out))


def disturb_kinds(thresholds=(DEFAULT_THRESHOLD,)) -> tuple[FaultKind, ...]:
    out = []
    for n in thresholds:
        n = check_threshold(n)
        for x in (0, 1):
            out.append(FaultKind(
                f"disturb{x}(N={n})", "disturb", "disturb", 1, drf_value=x, threshold=n,
                description=f"a cell holding {x} flips once a neighbour row is activated {n:,} times "
                            "since its own row was last activated or refreshed",
            ))
    return tuple(out)


def long_repeats(test, limit: int = 32) -> bool:
    return any(op.repeat > limit for e in test.elements for op in e.ops)


def adapt_kinds(kinds, mem, test) -> tuple[FaultKind, ...]:
    """The SRAM data-retention kinds become the retention family on a DRAM (row restores,
    refresh) and when the test has hammer-length repeats (graded in closed form; the same
    verdicts as the SRAM semantics on a memory without refresh)."""
    if not (mem.dram or long_repeats(test) or test.hammers):
        return tuple(kinds)
    out = []
    for k in kinds:
        if k.family == "drf":
            k = retention_kinds((k.tau,))[k.drf_value]
        out.append(k)
    return tuple(out)
