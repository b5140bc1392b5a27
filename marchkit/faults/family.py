"""The data-layer face of a fault family, and what every family shares.

A *family* is a set of fault kinds whose instances the engine simulates the same way
(the static and dynamic primitives and the classic models built from them; stuck-open;
address decoder; retention; …).  Each family lives in one module per layer:

* ``marchkit/faults/<module>.py`` — its kinds (data) and one :class:`Family` object;
* ``marchkit/engine/oracles/<name>.py`` — its literal semantics, used by the reference;
* ``marchkit/engine/fastpaths/<name>.py`` — its exact fast path;

and it is registered once, in :mod:`marchkit.faults.registry`.  Everything that differs
between families — selection words, classes, instance counts and enumeration, how a missed
instance's cells sit, the reasons shown for misses, how the ``faults`` command describes a
kind — goes through the :class:`Family` object; nothing else switches on a family's name.

**Sites and structures.**  An instance involves ``k`` *sites*: cells (``word·bits + bit``)
or, for families that act on addresses, words.  Its *structure* is how those sites sit
in the ⇑ address order: :func:`order_pattern` gives, per site, the dense rank of its word
among the instance's words (equal numbers: same word).  Two cells give ``(0,)``
(``single``), ``(0, 1)`` (first site's word first), ``(1, 0)`` and ``(0, 0)`` (same word);
three cells give patterns such as ``(0, 2, 1)``.  A family names its patterns
(:meth:`Family.structure_name`); the grader collects the names of the patterns with misses.
"""

from __future__ import annotations

from typing import Iterator, Sequence

SINGLE = "single"


def order_pattern(words: Sequence[int], rank) -> tuple[int, ...]:
    """Dense ranks, in the ⇑ order, of the words of an instance's sites (same word: same
    number).  ``rank[w]`` is word ``w``'s position in the ⇑ order."""
    ranks_ = [int(rank[w]) for w in words]
    distinct = sorted(set(ranks_))
    pos = {r: i for i, r in enumerate(distinct)}
    return tuple(pos[r] for r in ranks_)


def pattern_name(pattern: tuple[int, ...], labels: Sequence[str]) -> str:
    """Generic text of an order pattern: ``single``, ``same word``, ``aggressor first``
    (two sites), or for more sites the labels in ⇑ order, ``=`` joining sites of one word
    (``a < v = b``)."""
    if len(pattern) == 1:
        return SINGLE
    if len(set(pattern)) == 1:
        return "same word"
    if len(pattern) == 2:
        return f"{labels[0] if pattern[0] < pattern[1] else labels[1]} first"
    groups: dict[int, list[str]] = {}
    for lab, p in zip(labels, pattern):
        groups.setdefault(p, []).append(lab)
    return " < ".join(" = ".join(groups[p]) for p in sorted(groups))


class Family:
    """One fault family, as the catalogue, the grader and the CLI see it.

    Subclasses set the class attributes and override what differs; the defaults suit a
    family of kinds on cells with a fixed number of sites (``kind.arity``).
    """

    name: str = ""                       # also the engine modules' name (oracles/<name>.py, fastpaths/<name>.py)
    classes: tuple[str, ...] = ()        # the class names it owns
    needs: dict = {}                     # class → what a test needs to detect it (reason text)
    site: str = "cells"                  # "cells" or "words": what Instance.sites index
    labels: tuple[str, ...] = ("a", "v")  # names of the sites in structure names (Instance.sites order)
    short_labels: tuple[str, ...] = ("a", "v")  # names of the sites in instance texts
    where: dict = {}                     # structure name → phrase for the reasons

    # ---- the catalogue ---------------------------------------------------------------
    def groups(self, retention) -> dict:
        """Selection words this family contributes to → list of ``(slot, kinds)``; the
        catalogue concatenates every family's contributions to a word in slot order."""
        return {}

    def class_kinds(self, cls: str, retention) -> tuple:
        """The kinds of class ``cls`` (one of :attr:`classes`)."""
        return tuple(k for k in self.kinds(retention) if k.cls == cls)

    def kinds(self, retention) -> tuple:
        """Every named kind of the family (looked up by ``--faults SA0``)."""
        out: dict = {}
        for _, ks in sorted(self.groups(retention).get("all", []), key=lambda x: x[0]):
            for k in ks:
                out.setdefault(k.text, k)
        return tuple(out.values())

    def parse_kind(self, text: str):
        """A kind written in the family's own notation (``<0w1/0/->``), or None."""
        return None

    def test_kinds(self, retention) -> tuple:
        """The pool the differential tests draw kinds from (default: every kind)."""
        return self.kinds(retention)

    # ---- instances -------------------------------------------------------------------
    def arity(self, kind) -> int:
        return kind.arity

    def instance_count(self, kind, mem, scope) -> int:
        from .catalogue import cell_pair_count, word_pair_count

        if self.arity(kind) == 1:
            return mem.cells if self.site == "cells" else mem.words
        if self.arity(kind) != 2:
            raise NotImplementedError(f"{self.name}: instance_count for {self.arity(kind)} sites")
        return cell_pair_count(mem, scope) if self.site == "cells" else word_pair_count(mem, scope)

    def enumerate_instances(self, kind, mem, scope) -> Iterator:
        from .catalogue import Instance, cell_pairs, word_pairs

        n = mem.cells if self.site == "cells" else mem.words
        if self.arity(kind) == 1:
            for c in range(n):
                yield Instance(kind, (c,))
            return
        pairs = cell_pairs(mem, scope) if self.site == "cells" else word_pairs(mem, scope)
        if pairs is None:
            for a in range(n):
                for v in range(n):
                    if a != v:
                        yield Instance(kind, (a, v))
        else:
            for a, v in zip(pairs[0].tolist(), pairs[1].tolist()):
                yield Instance(kind, (a, v))

    def init_values(self, kind) -> int:
        """How many unknown initial bits the oracle tries for one instance (2^this runs)."""
        return self.arity(kind)

    def site_words(self, inst, mem) -> tuple[int, ...]:
        return tuple(inst.sites) if self.site == "words" else tuple(s // mem.bits for s in inst.sites)

    def structure(self, inst, mem, rank) -> str:
        """How a (missed) instance's sites sit, by name (see :func:`order_pattern`)."""
        return self.structure_name(order_pattern(self.site_words(inst, mem), rank))

    def structure_name(self, pattern: tuple[int, ...]) -> str:
        return pattern_name(pattern, self.labels)

    def instance_text(self, inst, mem) -> str:
        if self.site == "words":
            return f"{inst.kind.text} " + " ".join(f"{lab}={s}" for lab, s in zip(self.short_labels, inst.sites))

        def cell(c):
            w, b = divmod(c, mem.bits)
            return f"w{w}" if mem.bits == 1 else f"w{w}.b{b}"

        if len(inst.sites) == 1:
            return f"{inst.kind.text} v={cell(inst.sites[0])}"
        return f"{inst.kind.text} " + " ".join(f"{lab}={cell(s)}" for lab, s in zip(self.short_labels, inst.sites))

    # ---- presentation ----------------------------------------------------------------
    def describe(self, kind) -> str:
        return kind.description

    def site_counts(self, kind) -> tuple[int, int]:
        """(cells, words) one instance involves, for the ``faults`` listing."""
        return (self.arity(kind), 0) if self.site == "cells" else (0, self.arity(kind))
