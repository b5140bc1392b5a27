"""Short, honest reasons why a test misses a class of faults (for the grade view).

The texts come from each family (``Family.needs`` per class, ``Family.where`` per structure)."""

from __future__ import annotations

SAME_WORD_WITH_WORD_BACKGROUNDS = ("missed inside a word (writes of a background or its complement "
                                   "move all bits of the word together)")


def reason_for(cls: str, missed: set, partial: bool = True, word_backgrounds: bool = False) -> str:
    """Why ``cls`` is (partly) missed; ``missed`` names where, shown only when ``partial``.
    ``word_backgrounds``: the memory already runs the intra-word backgrounds."""
    from ..faults import class_family

    fam = class_family(cls)
    base = (fam.needs.get(cls) if fam is not None else None) or "not sensitised and observed by this test"
    where = []
    if partial:
        for m in sorted(missed):
            if m == "same word" and word_backgrounds:
                where.append(SAME_WORD_WITH_WORD_BACKGROUNDS)
            elif fam is not None and m in fam.where:
                where.append(fam.where[m])
    return base + ("; " + "; ".join(where) if where else "")
