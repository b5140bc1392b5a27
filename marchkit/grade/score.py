"""Summaries a test engineer can accept: the class-weighted score and pass requirements.

*Total coverage* counts every fault instance once, so the classes with the most instances
(coupling faults between cell pairs, growing with the pair scope) swamp the small ones
(stuck-at, address decoder, retention).  The **score** is the weighted mean of the per-class
coverages: each class counts with its weight, whatever its number of instances.  Equal
weights by default; user weights (for example defect likelihoods from yield learning) come
from ``--weights CLASS=W,…`` or the ``[weights]`` table of the memory file.  Classes without
instances on the memory (an empty pair scope) do not count.

A requirement list ``CLASS=PCT,…`` (``SAF=100,TF=100,CFid=99.5``; ``score`` and ``total``
are accepted too) says what a test must reach; :func:`unmet` lists what it does not.
"""

from __future__ import annotations

import difflib
import math
from fractions import Fraction

from ..errors import InputError

SPECIAL = ("score", "total")


def _did_you_mean(word: str, choices) -> str:
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _number(text: str, what: str, lo: float, hi: float | None) -> float:
    t = text.strip().rstrip("%")
    try:
        if len(t) > 24:
            raise ValueError
        v = float(t)
    except ValueError:
        raise InputError(f"{what}: {text[:30]!r} is not a number") from None
    if not math.isfinite(v) or v < lo or (hi is not None and v > hi):
        rng = f"{lo:g} to {hi:g}" if hi is not None else f"{lo:g} or more"
        raise InputError(f"{what}: {text[:30]!r} is outside {rng}")
    return v


def _pairs(text: str, option: str):
    items = [p.strip() for p in text.split(",")]
    if not text.strip() or any(not p for p in items):
        raise InputError(f"{option} {text[:40]!r}: write CLASS=VALUE,CLASS=VALUE (no empty items)")
    if len(items) > 256:
        raise InputError(f"{option}: at most 256 items")
    out = []
    for p in items:
        name, eq, value = p.partition("=")
        if not eq or not name.strip():
            raise InputError(f"{option} {p[:40]!r}: write CLASS=VALUE, e.g. SAF=100")
        out.append((name.strip(), value))
    return out


def _class_name(name: str, classes, option: str, special=()) -> str:
    lookup = {c.casefold(): c for c in list(classes) + list(special)}
    c = lookup.get(name.casefold())
    if c is None:
        raise InputError(f"{option}: {name[:40]!r} is not a class of this fault selection"
                         + _did_you_mean(name, list(classes) + list(special))
                         + "; classes: " + ", ".join(classes))
    return c


def parse_weights(text: str | None, classes, file_weights: dict | None = None) -> dict[str, float]:
    """Weights per class: 1 each, then the memory file's, then ``text`` (``CLASS=W,…``)."""
    w = {c: 1.0 for c in classes}
    for name, value in (file_weights or {}).items():
        c = _class_name(name, classes, "memory file [weights]") if name.casefold() in {x.casefold() for x in classes} else None
        if c is not None:          # a weight for a class not graded this time is not an error
            w[c] = float(value)
    if text:
        for name, value in _pairs(text, "--weights"):
            w[_class_name(name, classes, "--weights")] = _number(value, f"--weights {name}", 0, 1e6)
    if not any(v > 0 for v in w.values()):
        raise InputError("--weights: at least one class needs a weight above 0")
    return w


def parse_requirements(text: str | None, classes) -> dict[str, float]:
    """``CLASS=PCT,…`` → {class or 'score'/'total': percent}."""
    if text is None:
        return {}
    req = {}
    for name, value in _pairs(text, "--require"):
        req[_class_name(name, classes, "--require", SPECIAL)] = _number(value, f"--require {name}", 0, 100)
    return req


def class_score(class_rows, weights: dict[str, float] | None = None) -> Fraction:
    """The weighted mean of per-class coverage (exact); rows are the grade's class rows."""
    num = Fraction(0)
    den = Fraction(0)
    for c in class_rows:
        if not c.instances:
            continue
        w = Fraction(weights.get(c.cls, 1.0)) if weights else Fraction(1)
        num += w * Fraction(c.detected, c.instances)
        den += w
    return num / den if den else Fraction(0)


def unmet(result, requirements: dict[str, float], weights=None) -> list[str]:
    """The requirements ``result`` (a grade result) misses, as texts ``SAF 97.5 % < 100 %``."""
    out = []
    rows = {c.cls: c for c in result.classes}
    for name, pct in requirements.items():
        if name == "score":
            got = class_score(result.classes, weights)
        elif name == "total":
            got = Fraction(result.total.detected, result.total.instances) if result.total.instances else Fraction(1)
        else:
            c = rows.get(name)
            if c is None or not c.instances:
                continue
            got = Fraction(c.detected, c.instances)
        if got * 100 < Fraction(str(pct)):
            out.append(f"{name} {_pct(got)} % < {pct:g} %")
    return out


def _pct(f: Fraction) -> str:
    v = float(f) * 100
    if f == 1:
        return "100"
    if f == 0:
        return "0"
    return f"{min(max(v, 0.01), 99.99):.2f}"
