"""Short, honest reasons why a test misses a class of faults (for the grade view)."""

from __future__ import annotations

NEEDS = {
    "SF": "needs each cell read after it was written with the value it cannot hold",
    "TF": "needs a transition write (0w1, 1w0) then a read of that cell",
    "WDF": "needs a non-transition write (0w0, 1w1) then a read of that cell",
    "RDF": "needs a read of each cell holding 0 and holding 1",
    "DRDF": "needs two reads in a row of the victim",
    "IRF": "needs a read of each cell holding 0 and holding 1",
    "CFst": "needs victim reads in every aggressor/victim state",
    "CFds": "needs every aggressor operation (incl. non-transition writes and reads) then a victim read",
    "CFtr": "needs a victim transition write then read, aggressor in each state",
    "CFwd": "needs a victim non-transition write then read, aggressor in each state",
    "CFrd": "needs a victim read with the aggressor in each state",
    "CFdrd": "needs two victim reads in a row, aggressor in each state",
    "CFir": "needs a victim read with the aggressor in each state",
    "SAF": "needs each cell read as 0 and as 1",
    "SOF": "needs a read expecting the opposite of the read before it, as in ⇑(r0,w1,r1)",
    "AF": "needs ⇑(rx,…,wx̄) and ⇓(rx̄,…,wx) (van de Goor)",
    "CFin": "needs each aggressor transition then a victim read, both positions",
    "CFid": "needs each aggressor transition, victim in each state, then a victim read",
    "DRF": "needs a read after a pause longer than τ (a delay element) for each value",
    "dRDF": "needs the primitive's two operations back to back in one element, the second a read",
    "dDRDF": "needs the two operations back to back, then another read before the cell is rewritten",
    "dIRF": "needs the primitive's two operations back to back in one element, the second a read",
    "dTF": "needs the two operations back to back (ending in a transition write), then a read",
    "dWDF": "needs the two operations back to back (ending in a non-transition write), then a read",
}

WHERE = {
    "aggressor first": "missed with the aggressor first in ⇑",
    "victim first": "missed with the victim first in ⇑",
    "same word": "missed inside a word (try --backgrounds word)",
    "a first": "missed with a before b in ⇑",
    "b first": "missed with b before a in ⇑",
}


SAME_WORD_WITH_WORD_BACKGROUNDS = ("missed inside a word (writes of a background or its complement "
                                   "move all bits of the word together)")


def reason_for(cls: str, missed: set, partial: bool = True, word_backgrounds: bool = False) -> str:
    """Why ``cls`` is (partly) missed; ``missed`` names where, shown only when ``partial``.
    ``word_backgrounds``: the memory already runs the intra-word backgrounds."""
    base = NEEDS.get(cls, "not sensitised and observed by this test")
    where = []
    if partial:
        for m in sorted(missed):
            if m == "same word" and word_backgrounds:
                where.append(SAME_WORD_WITH_WORD_BACKGROUNDS)
            elif m in WHERE:
                where.append(WHERE[m])
    return base + ("; " + "; ".join(where) if where else "")
