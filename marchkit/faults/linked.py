"""Static linked faults: two fault primitives on one victim, the second able to mask the first.

Definition (Hamdioui, Al-Ars, van de Goor, Rodgers, "Linked faults in random access memories:
concept, fault models, test algorithms and industrial results", IEEE TCAD 23(5), 2004; the
idea goes back to van de Goor & Gaydadjiev, IEE Proc. CDS 144(3), 1997 — both from memory):
FP1 = <S1/F1/R1> and FP2 = <S2/F2/R2> act on the same victim and are *linked*, written
``FP1 → FP2``, when

1. FP1 leaves a wrong value in the victim: F1 differs from what S1 leaves in a fault-free
   cell (an incorrect-read primitive, which leaves the right value, has nothing to mask);
2. FP2 can be sensitised on the victim as FP1 left it: the victim value S2 asks for is F1;
3. FP2 masks FP1: F2 = ¬F1, the value the victim should hold;
4. both are sensitised by an operation (S2 is *applied after* S1): state faults (SF, CFst)
   are left out — one fires whenever its state holds, so it is never masked, and as FP2 it
   would fire at once and leave only its own, unlinked, behaviour.  This reading of the
   paper's "S2 applied after S1" is ours.

Both primitives are present at once (an instance is one place where both act); whichever
conditions hold fire.  The classes by where the cells are:

* ``LF1``   both single-cell primitives on one cell;
* ``LF2aa`` both two-cell primitives with the same aggressor and victim;
* ``LF2av`` FP1 two-cell (aggressor a, victim v), FP2 single-cell on v;
* ``LF2va`` FP1 single-cell on v, FP2 two-cell (a, v);
* ``LF3``   FP1 two-cell (a1, v), FP2 two-cell (a2, v), two distinct aggressors
  (a kind of the ``group`` family, see :mod:`marchkit.faults.group`).

The primitives linked are the 48 static ones (the realistic static set of van de Goor &
Al-Ars, VTS 2000).  Counts (derived here and checked by the tests against a hand count):
LF1 16, LF2aa 96, LF2av 48, LF2va 48, LF3 288 kinds.
"""

from __future__ import annotations

from .primitives import STATIC, FaultKind, Rule

LINKED_CLASSES = ("LF1", "LF2aa", "LF2av", "LF2va", "LF3")


def _good_after(rule: Rule) -> int:
    """The value a fault-free victim holds after the primitive's sensitising condition."""
    v = rule.vic
    return v.val if v.op == "w" else v.pre


def _operated(rule: Rule) -> bool:
    return rule.vic.op is not None or (rule.agg is not None and rule.agg.op is not None)


def links(fp1: Rule, fp2: Rule) -> bool:
    """``fp1 → fp2`` is a linked pair (conditions 1–3 above)."""
    if not _operated(fp1) or not _operated(fp2):  # 4. both sensitised by an operation
        return False
    return (fp1.f != _good_after(fp1)            # 1. FP1 leaves a wrong value
            and fp2.vic.pre == fp1.f              # 2. FP2 is sensitised on that value
            and fp2.f == 1 - fp1.f)               # 3. and restores the right one


def link_text(fp1: Rule, fp2: Rule) -> str:
    return f"{fp1.text}→{fp2.text}"


_SINGLE = [k.rules[0] for k in STATIC if k.arity == 1]
_TWO = [k.rules[0] for k in STATIC if k.arity == 2]


def _kind(cls, fp1, fp2, arity):
    return FaultKind(link_text(fp1, fp2), cls, "rules", arity, (fp1, fp2),
                     description=f"{fp1.text} then {fp2.text} on the same victim; the second can undo the first")


def _pairs(firsts, seconds):
    return [(a, b) for a in firsts for b in seconds if links(a, b)]


LF1 = tuple(_kind("LF1", a, b, 1) for a, b in _pairs(_SINGLE, _SINGLE))
LF2AA = tuple(_kind("LF2aa", a, b, 2) for a, b in _pairs(_TWO, _TWO))
LF2AV = tuple(_kind("LF2av", a, b, 2) for a, b in _pairs(_TWO, _SINGLE))
LF2VA = tuple(_kind("LF2va", a, b, 2) for a, b in _pairs(_SINGLE, _TWO))
LF3_PAIRS = tuple(_pairs(_TWO, _TWO))       # (FP1 on a1, FP2 on a2): built in faults.group
LINKED_RULES = LF1 + LF2AA + LF2AV + LF2VA
