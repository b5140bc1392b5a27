"""The primitives family: the static and dynamic fault primitives and the classic models
built from them (SAF, TF, CFin, CFid, CFst) — each a value with a canonical text form —, and
the :class:`FaultKind` value every family uses.

Fault primitives use the ``<S/F/R>`` and ``<Sa;Sv/F/R>`` notation of van de Goor & Al-Ars,
"Functional memory faults: a formal notation and a taxonomy", VTS 2000: ``S`` the
sensitising state (``0``/``1``) or operation (``0w1``, ``1r1``, …) — for a two-cell
primitive first on the aggressor, then on the victim —, ``F`` the victim's value afterwards,
``R`` the read's output (``-`` when the victim is not read).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from fractions import Fraction

from ..errors import FaultSpecError
from .family import Family


@dataclass(frozen=True)
class Cond:
    """A sensitising condition on one cell: a state (``op`` None) or an operation.

    ``pre`` is the value the cell must hold; for ``op == 'w'`` ``val`` is the value written;
    for ``op == 'r'`` the read is of ``pre``.
    """

    pre: int
    op: str | None = None
    val: int | None = None

    @property
    def text(self) -> str:
        if self.op is None:
            return str(self.pre)
        if self.op == "w":
            return f"{self.pre}w{self.val}"
        return f"{self.pre}r{self.pre}"


@dataclass(frozen=True)
class Rule:
    """One fault primitive.  ``agg`` is None for a single-cell primitive."""

    vic: Cond
    f: int
    r: int | None = None
    agg: Cond | None = None
    then: Cond | None = None     # dynamic primitive: the second of two back-to-back operations

    @property
    def then_on_agg(self) -> bool:
        """A two-cell dynamic primitive whose two operations go to the aggressor (dCFds)."""
        return self.then is not None and self.agg is not None and self.agg.op is not None

    @property
    def text(self) -> str:
        second = ""
        if self.then is not None:
            t = self.then
            second = f"w{t.val}" if t.op == "w" else f"r{t.pre}"
        if self.agg is None:
            s = self.vic.text + second
        elif self.then_on_agg:
            s = f"{self.agg.text}{second};{self.vic.text}"
        else:
            s = f"{self.agg.text};{self.vic.text}{second}"
        return f"<{s}/{self.f}/{'-' if self.r is None else self.r}>"


_COND = r"([01])(?:([wr])([01]))?"
_FP_RE = re.compile(rf"^<(?:{_COND};)?{_COND}/([01])/([01-])>$")


_DYN_RE = re.compile(r"^<([01])([wr])([01])([wr])([01])/([01])/([01-])>$")
# two-cell dynamic: <x O1 O2; y/F/-> (both operations on the aggressor, dCFds) or
# <x; y O1 O2/F/R> (aggressor state, both operations on the victim)
_DYN_A_RE = re.compile(r"^<([01])([wr])([01])([wr])([01]);([01])/([01])/(-)>$")
_DYN_V_RE = re.compile(r"^<([01]);([01])([wr])([01])([wr])([01])/([01])/([01-])>$")


def _two_ops(text, x, o1, v1, o2, v2):
    """The two back-to-back operations on a cell holding ``x``: (first Cond, second Cond)."""
    x, v1, v2 = int(x), int(v1), int(v2)
    if o1 == "r" and v1 != x:
        raise FaultSpecError(f"{text!r}: the first read of a cell holding {x} is r{x}")
    s = v1 if o1 == "w" else x
    if o2 == "r" and v2 != s:
        raise FaultSpecError(f"{text!r}: after {o1}{v1} the cell holds {s}, so the read is r{s}")
    return Cond(x, o1, v1), Cond(s, o2, v2)


def _parse_dynamic(text: str, m) -> Rule:
    x, o1, v1, o2, v2, f, r = m.groups()
    x, v1, v2, f = int(x), int(v1), int(v2), int(f)
    if o1 == "r" and v1 != x:
        raise FaultSpecError(f"{text!r}: the first read of a cell holding {x} is r{x}")
    s = v1 if o1 == "w" else x            # the cell's value after the first operation
    if o2 == "r" and v2 != s:
        raise FaultSpecError(f"{text!r}: after {o1}{v1} the cell holds {s}, so the read is r{s}")
    rr = None if r == "-" else int(r)
    if (o2 == "r") != (rr is not None):
        raise FaultSpecError(f"{text!r}: R is a value exactly when the second operation is a read, '-' otherwise")
    good_f = v2 if o2 == "w" else s
    if f == good_f and (rr is None or rr == s):
        raise FaultSpecError(f"{text!r}: F and R are what a fault-free cell gives; that is no fault")
    return Rule(Cond(x, o1, v1), f, rr, None, Cond(s, o2, v2))


def parse_rule(text: str) -> Rule:
    """``<0w1/0/->``, ``<1;0w1/0/->`` or (dynamic) ``<0w1r1/0/0>`` → :class:`Rule`, checked
    for sense."""
    s = text.strip().replace(" ", "")
    dm = _DYN_RE.match(s)
    if dm:
        return _parse_dynamic(text, dm)
    dm = _DYN_A_RE.match(s)
    if dm:
        x, o1, v1, o2, v2, y, f, _ = dm.groups()
        first, second = _two_ops(text, x, o1, v1, o2, v2)
        if int(f) == int(y):
            raise FaultSpecError(f"{text!r}: F must differ from the victim's state {y}; that is no fault")
        return Rule(Cond(int(y)), int(f), None, first, second)
    dm = _DYN_V_RE.match(s)
    if dm:
        a, x, o1, v1, o2, v2, f, r = dm.groups()
        first, second = _two_ops(text, x, o1, v1, o2, v2)
        rr = None if r == "-" else int(r)
        if (o2 == "r") != (rr is not None):
            raise FaultSpecError(f"{text!r}: R is a value exactly when the second operation is a read, '-' otherwise")
        good_f = second.val if o2 == "w" else second.pre
        if int(f) == good_f and (rr is None or rr == second.pre):
            raise FaultSpecError(f"{text!r}: F and R are what a fault-free cell gives; that is no fault")
        return Rule(first, int(f), rr, Cond(int(a)), second)
    m = _FP_RE.match(s)
    if not m:
        raise FaultSpecError(f"{text!r} is not a fault primitive such as <0w1/0/-> or <1;0r0/1/1>")
    a_pre, a_op, a_val, v_pre, v_op, v_val, f, r = m.groups()

    def cond(pre, op, val):
        pre = int(pre)
        if op is None:
            return Cond(pre)
        if op == "r" and int(val) != pre:
            raise FaultSpecError(f"{text!r}: a read of a cell holding {pre} is written {pre}r{pre}")
        return Cond(pre, op, int(val))

    agg = cond(a_pre, a_op, a_val) if a_pre is not None else None
    vic = cond(v_pre, v_op, v_val)
    rr = None if r == "-" else int(r)
    if (vic.op == "r") != (rr is not None):
        raise FaultSpecError(f"{text!r}: R is a value exactly when the victim is read, '-' otherwise")
    if agg is not None and agg.op is not None and vic.op is not None:
        raise FaultSpecError(f"{text!r}: a static primitive sensitises with at most one operation")
    # a primitive describes a deviation: F or R must differ from what a fault-free cell gives
    good_f = vic.val if vic.op == "w" else vic.pre
    if int(f) == good_f and (rr is None or rr == vic.pre):
        raise FaultSpecError(f"{text!r}: F and R are what a fault-free cell gives; that is no fault")
    return Rule(vic, int(f), rr, agg)


@dataclass(frozen=True)
class FaultKind:
    """A fault model at the level of one instance's behaviour.

    ``family``: the name of its family in :mod:`marchkit.faults.registry` — ``rules`` (a
    set of primitives acting together), ``sof``, ``af``, ``drf``, …
    ``arity``: sites (cells, or for address families words) one instance involves.
    ``params``: data of families that need more than the fields below (free form, hashable).
    """

    text: str
    cls: str
    family: str
    arity: int
    rules: tuple[Rule, ...] = ()
    af: str | None = None          # none | alias | multi | cross
    drf_value: int | None = None   # the value the cell loses
    tau: Fraction | None = None    # seconds
    threshold: int | None = None   # disturb: aggressor-row activations that flip the victim
    params: tuple = ()
    description: str = field(default="", compare=False)

    def __str__(self) -> str:
        return self.text

    @property
    def is_primitive(self) -> bool:
        """True for the 48 static primitives (one rule, reported per primitive)."""
        return self.family == "rules" and len(self.rules) == 1 and self.cls in STATIC_CLASSES

    @property
    def is_dynamic(self) -> bool:
        """True when some rule needs two back-to-back operations."""
        return any(r.then is not None for r in self.rules)


def _r(text):
    return parse_rule(text)


def _classify(rule: Rule) -> str:
    v, a = rule.vic, rule.agg
    if rule.then is not None:
        if rule.then_on_agg:
            return "dCFds"
        t = rule.then
        pre = "dCF" if a is not None else "d"
        if t.op == "w":
            return pre + ("TF" if a is None else "tr") if t.val != t.pre else pre + ("WDF" if a is None else "wd")
        if rule.f != t.pre:
            return pre + ("RDF" if a is None else "rd") if rule.r != t.pre else pre + ("DRDF" if a is None else "drd")
        return pre + ("IRF" if a is None else "ir")
    if a is None:
        if v.op is None:
            return "SF"
        if v.op == "w":
            return "TF" if v.val != v.pre else "WDF"
        if rule.f != v.pre:
            return "RDF" if rule.r != v.pre else "DRDF"
        return "IRF"
    if a.op is None and v.op is None:
        return "CFst"
    if a.op is not None:
        return "CFds"
    if v.op == "w":
        return "CFtr" if v.val != v.pre else "CFwd"
    if rule.f != v.pre:
        return "CFrd" if rule.r != v.pre else "CFdrd"
    return "CFir"


SINGLE_CLASSES = ("SF", "TF", "WDF", "RDF", "DRDF", "IRF")
COUPLING_CLASSES = ("CFst", "CFds", "CFtr", "CFwd", "CFrd", "CFdrd", "CFir")
STATIC_CLASSES = SINGLE_CLASSES + COUPLING_CLASSES


def _static_texts() -> list[str]:
    out = []
    # single-cell, as listed by van de Goor & Al-Ars (VTS 2000)
    out += ["<0/1/->", "<1/0/->", "<0w1/0/->", "<1w0/1/->", "<0w0/1/->", "<1w1/0/->",
            "<0r0/1/1>", "<1r1/0/0>", "<0r0/1/0>", "<1r1/0/1>", "<0r0/0/1>", "<1r1/1/0>"]
    for x in (0, 1):
        for y in (0, 1):
            out.append(f"<{x};{y}/{1 - y}/->")                      # CFst
    for aop in ("0w0", "0w1", "1w0", "1w1", "0r0", "1r1"):
        for z in (0, 1):
            out.append(f"<{aop};{z}/{1 - z}/->")                    # CFds
    for x in (0, 1):
        out += [f"<{x};0w1/0/->", f"<{x};1w0/1/->"]                 # CFtr
    for x in (0, 1):
        out += [f"<{x};0w0/1/->", f"<{x};1w1/0/->"]                 # CFwd
    for x in (0, 1):
        out += [f"<{x};0r0/1/1>", f"<{x};1r1/0/0>"]                 # CFrd
    for x in (0, 1):
        out += [f"<{x};0r0/1/0>", f"<{x};1r1/0/1>"]                 # CFdrd
    for x in (0, 1):
        out += [f"<{x};0r0/0/1>", f"<{x};1r1/1/0>"]                 # CFir
    return out


def _primitive_kind(text: str) -> FaultKind:
    rule = parse_rule(text)
    return FaultKind(rule.text, _classify(rule), "rules", 1 if rule.agg is None else 2, (rule,))


STATIC = tuple(_primitive_kind(t) for t in _static_texts())

DYNAMIC_CLASSES = ("dRDF", "dDRDF", "dIRF", "dTF", "dWDF")


def _dynamic_texts() -> list[str]:
    """The 30 single-cell two-operation primitives: a state x, then two operations back to back;
    a fault on a final read is RDF-, DRDF- or IRF-like, on a final write it leaves the wrong value."""
    out = []
    for x in (0, 1):
        for o1 in ("w0", "w1", "r"):
            s1 = int(o1[1]) if o1[0] == "w" else x
            first = o1 if o1[0] == "w" else f"r{x}"
            for o2 in ("w0", "w1", "r"):
                if o2 == "r":
                    seq = f"{x}{first}r{s1}"
                    out += [f"<{seq}/{1 - s1}/{1 - s1}>", f"<{seq}/{1 - s1}/{s1}>", f"<{seq}/{s1}/{1 - s1}>"]
                else:
                    v2 = int(o2[1])
                    out.append(f"<{x}{first}{o2}/{1 - v2}/->")
    return out


DYNAMIC = tuple(_primitive_kind(t) for t in _dynamic_texts())

DYNAMIC2_CLASSES = ("dCFds", "dCFtr", "dCFwd", "dCFrd", "dCFdrd", "dCFir")


def _dynamic2_texts() -> list[str]:
    """The two-cell two-operation primitives, derived: both operations go to one cell.

    * on the aggressor (dCFds): a state x, two operations back to back (O1, O2 each w0, w1 or
      a read: 2·3·3 = 18 sequences) with the victim in state y (2), which flips: 36;
    * on the victim, the aggressor in state a (2): each of the 30 single-cell dynamic
      primitives: 60 (dCFtr, dCFwd: 24 write-ended; dCFrd, dCFdrd, dCFir: 36 read-ended).

    96 primitives; each occurs with the aggressor before and after the victim, 192 in all —
    the published count (Al-Ars & van de Goor; Hamdioui, Al-Ars, van de Goor, VTS 2002, from
    memory).  marchkit instances every two-cell kind on ordered (aggressor, victim) pairs,
    so the orientation is in the instances and the kind list holds the 96."""
    out = []
    for x in (0, 1):
        for o1 in ("w0", "w1", "r"):
            first = o1 if o1[0] == "w" else f"r{x}"
            s1 = int(o1[1]) if o1[0] == "w" else x
            for o2 in ("w0", "w1", "r"):
                second = o2 if o2[0] == "w" else f"r{s1}"
                for y in (0, 1):
                    out.append(f"<{x}{first}{second};{y}/{1 - y}/->")
    for a in (0, 1):
        for t in _dynamic_texts():
            out.append(f"<{a};{t[1:]}")
    return out


DYNAMIC2 = tuple(_primitive_kind(t) for t in _dynamic2_texts())
_BY_TEXT = {k.text: k for k in STATIC + DYNAMIC + DYNAMIC2}


def primitive(text: str) -> FaultKind:
    """The fault kind of one primitive, static catalogue first."""
    rule = parse_rule(text)
    return _BY_TEXT.get(rule.text) or _primitive_kind(rule.text)


SAF = (
    FaultKind("SA0", "SAF", "rules", 1, (_r("<1/0/->"),), description="stuck at 0"),
    FaultKind("SA1", "SAF", "rules", 1, (_r("<0/1/->"),), description="stuck at 1"),
)
TF = tuple(k for k in STATIC if k.cls == "TF")
CFST = tuple(k for k in STATIC if k.cls == "CFst")
CFIN = (
    FaultKind("CFin<↑;↕>", "CFin", "rules", 2, (_r("<0w1;0/1/->"), _r("<0w1;1/0/->")),
              description="an up transition of the aggressor inverts the victim"),
    FaultKind("CFin<↓;↕>", "CFin", "rules", 2, (_r("<1w0;0/1/->"), _r("<1w0;1/0/->")),
              description="a down transition of the aggressor inverts the victim"),
)
CFID = (
    FaultKind("CFid<↑;0>", "CFid", "rules", 2, (_r("<0w1;1/0/->"),)),
    FaultKind("CFid<↑;1>", "CFid", "rules", 2, (_r("<0w1;0/1/->"),)),
    FaultKind("CFid<↓;0>", "CFid", "rules", 2, (_r("<1w0;1/0/->"),)),
    FaultKind("CFid<↓;1>", "CFid", "rules", 2, (_r("<1w0;0/1/->"),)),
)
CLASSIC_CLASSES = ("SAF", "TF", "SOF", "AF", "CFin", "CFid", "CFst")


class RulesFamily(Family):
    """Kinds that are sets of fault primitives acting together (one or two cells)."""

    name = "rules"
    classes = (STATIC_CLASSES + ("SAF", "CFin", "CFid") + DYNAMIC_CLASSES + DYNAMIC2_CLASSES
               + ("LF1", "LF2aa", "LF2av", "LF2va"))
    labels = ("aggressor", "victim")
    short_labels = ("a", "v")
    needs = {
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
        "CFin": "needs each aggressor transition then a victim read, both positions",
        "CFid": "needs each aggressor transition, victim in each state, then a victim read",
        "dRDF": "needs the primitive's two operations back to back (adjacent in one visit, or where two elements meet on an address), the second a read",
        "dDRDF": "needs the two operations back to back, then another read before the cell is rewritten",
        "dIRF": "needs the primitive's two operations back to back (adjacent in one visit, or where two elements meet on an address), the second a read",
        "dTF": "needs the two operations back to back (ending in a transition write), then a read",
        "dWDF": "needs the two operations back to back (ending in a non-transition write), then a read",
        "dCFds": "needs each pair of back-to-back aggressor operations, victim in each state, then a victim read",
        "dCFtr": "needs back-to-back operations ending in a victim transition write, aggressor in each state, then a read",
        "dCFwd": "needs back-to-back operations ending in a victim non-transition write, aggressor in each state, then a read",
        "dCFrd": "needs back-to-back operations ending in a victim read, aggressor in each state",
        "dCFdrd": "needs back-to-back operations ending in a victim read, then another read, aggressor in each state",
        "dCFir": "needs back-to-back operations ending in a victim read, aggressor in each state",
        "LF1": "needs the first primitive sensitised and read before the second can undo it",
        "LF2aa": "needs the first primitive sensitised and the victim read before the second can undo it, both positions",
        "LF2av": "needs the coupling primitive sensitised and the victim read before its own fault undoes it",
        "LF2va": "needs the victim's own fault sensitised and read before the coupling primitive undoes it",
    }
    where = {
        "aggressor first": "missed with the aggressor first in ⇑",
        "victim first": "missed with the victim first in ⇑",
        "same word": "missed inside a word (try --backgrounds word)",
    }

    def groups(self, retention):
        from .linked import LINKED_RULES

        return {
            "static": [(0, STATIC)],
            "dynamic": [(0, DYNAMIC), (1, DYNAMIC2)],
            "linked": [(0, LINKED_RULES)],
            "classic": [(0, SAF), (1, TF), (4, CFIN), (5, CFID), (6, CFST)],
            "all": [(0, STATIC), (1, SAF), (4, CFIN), (5, CFID), (7, DYNAMIC), (8, DYNAMIC2),
                    (11, LINKED_RULES)],
        }

    def class_kinds(self, cls, retention):
        from .linked import LF1, LF2AA, LF2AV, LF2VA

        if cls in STATIC_CLASSES:
            return tuple(k for k in STATIC if k.cls == cls)
        if cls in DYNAMIC_CLASSES:
            return tuple(k for k in DYNAMIC if k.cls == cls)
        if cls in DYNAMIC2_CLASSES:
            return tuple(k for k in DYNAMIC2 if k.cls == cls)
        return {"SAF": SAF, "CFin": CFIN, "CFid": CFID, "LF1": LF1, "LF2aa": LF2AA, "LF2av": LF2AV,
                "LF2va": LF2VA}[cls]

    def parse_kind(self, text):
        return primitive(text) if text.startswith("<") else None

    def test_kinds(self, retention):
        """Every static, classic and single-cell dynamic kind; a quarter of the two-cell
        dynamic and a twelfth of the linked kinds (they are many; the draws rotate)."""
        from .linked import LINKED_RULES

        return STATIC + SAF + CFIN + CFID + DYNAMIC + DYNAMIC2[::4] + LINKED_RULES[::12]

    def init_values(self, kind):
        return kind.arity

    def describe(self, kind) -> str:
        if kind.description:
            return kind.description
        if len(kind.rules) == 1 and kind.rules[0].then is not None and kind.rules[0].agg is not None:
            r = kind.rules[0]
            if r.then_on_agg:
                o1, o2 = r.agg, r.then
                first = f"w{o1.val}" if o1.op == "w" else f"r{o1.pre}"
                second = f"w{o2.val}" if o2.op == "w" else f"r{o2.pre}"
                return (f"{first} then at once {second} on the aggressor holding {o1.pre} turns the "
                        f"victim from {r.vic.pre} to {r.f}")
            o1, o2 = r.vic, r.then
            first = f"w{o1.val}" if o1.op == "w" else f"r{o1.pre}"
            second = f"w{o2.val}" if o2.op == "w" else f"r{o2.pre}"
            out = (f"{first} then at once {second} on the victim holding {o1.pre}, the aggressor "
                   f"holding {r.agg.pre}: the victim is left {r.f}")
            return out + (f" and the read returns {r.r}" if r.r is not None else "")
        if len(kind.rules) == 1 and kind.rules[0].then is not None and kind.rules[0].agg is None:
            r = kind.rules[0]
            o1, o2 = r.vic, r.then
            first = f"w{o1.val}" if o1.op == "w" else f"r{o1.pre}"
            second = f"w{o2.val}" if o2.op == "w" else f"r{o2.pre}"
            out = f"{first} then at once {second} on the cell holding {o1.pre}: it is left {r.f}"
            return out + (f" and the read returns {r.r}" if r.r is not None else "")
        if len(kind.rules) == 1:
            r = kind.rules[0]
            v = r.vic
            who = "the cell" if r.agg is None else "the victim"
            if r.agg is None:
                cond = ""
            elif r.agg.op is None:
                cond = f" while the aggressor holds {r.agg.pre}"
            else:
                op = f"w{r.agg.val}" if r.agg.op == "w" else f"r{r.agg.pre}"
                cond = f" when the aggressor (holding {r.agg.pre}) gets {op}"
            if v.op is None:
                s = f"{who} cannot stay {v.pre}: it becomes {r.f}"
            elif v.op == "w":
                s = f"writing {v.val} to {who} holding {v.pre} leaves {r.f}"
            else:
                s = f"reading {who} holding {v.pre} returns {r.r} and leaves {r.f}"
            if r.agg is not None and r.agg.op is not None:
                s = f"{who} holding {v.pre} becomes {r.f}"
            if r.agg is not None and r.agg.op is None and v.op is None:
                return f"while the aggressor holds {r.agg.pre}, {who} cannot stay {v.pre}: it becomes {r.f}"
            return s + cond
        return ", ".join(r.text for r in kind.rules)


FAMILY = RulesFamily()
