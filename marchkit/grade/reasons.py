"""Short, honest reasons why a test misses a class of faults (for the grade view).

The texts come from each family (``Family.needs`` per class, ``Family.where`` per structure)."""

from __future__ import annotations

SAME_WORD_WITH_WORD_BACKGROUNDS = ("missed inside a word (writes of a background or its complement "
                                   "move all bits of the word together)")


# Intra-word CFid/CFin: a word write moves every bit with the background or none, so the
# aggressor bit changes while the victim bit holds only at the first write of a background run.
# Measured (March C-, March SS, MATS++ on 8 × 4, --pairs word): --backgrounds word gives CFid
# 17 %, CFin 33 %; a list that flips each bit alone from all-0 and from all-1 and back gives
# 100 %.
SAME_WORD_TRANSITION = ("missed inside a word: an aggressor bit must flip while the victim bit "
                        "holds, which only the first write of a background run does (--backgrounds "
                        "word is not enough); flip each bit alone from all-0 and from all-1, e.g. "
                        "for 4 bits --backgrounds 0x0,0x1,0x0,0x2,0x0,0x4,0x0,0x8,0x0,0xf,0xe,0xf,0xd,0xf,0xb,0xf,0x7,0xf")
TRANSITION_CLASSES = ("CFid", "CFin")


def reason_for(cls: str, missed: set, partial: bool = True, word_backgrounds: bool = False,
               kind=None) -> str:
    """Why ``cls`` is (partly) missed; ``missed`` names where, shown only when ``partial``.
    ``word_backgrounds``: the memory already runs the intra-word backgrounds.  ``kind``: a kind
    of the class as graded — its family's words come first (the DRAM retention kinds share
    the class DRF with the SRAM ones but need other things)."""
    from ..faults import class_family, family_of

    fam = class_family(cls)
    own = family_of(kind) if kind is not None else None
    base = ((own.needs.get(cls) if own is not None else None)
            or (fam.needs.get(cls) if fam is not None else None) or "not sensitised and observed by this test")
    where = []
    if partial:
        for m in sorted(missed):
            if m == "same word" and cls in TRANSITION_CLASSES:
                where.append(SAME_WORD_TRANSITION)
            elif m == "same word" and word_backgrounds:
                where.append(SAME_WORD_WITH_WORD_BACKGROUNDS)
            elif fam is not None and m in fam.where:
                where.append(fam.where[m])
    return base + ("; " + "; ".join(where) if where else "")
