"""What a family's fast path provides to :class:`marchkit.engine.fast.Engine`."""

from __future__ import annotations


class FastPath:
    """One family's exact fast path.

    ``grade(eng, kinds, scope, results)`` adds a :class:`~marchkit.engine.results.KindResult`
    per kind (keyed by ``kind.text``) to ``results`` — counts over every instance in
    ``scope`` — and returns ``results``.  It must be a pure function of ``eng.prep`` (the
    shared set-up of the test and memory) and its arguments: the engine may run it in a
    forked worker.  ``verdicts(eng, instances)`` gives, for instances of this family only,
    ``(detected, Detection | None)`` each, equal to the reference's.  ``prepare(eng, kinds,
    scope)`` builds lazily shared state before the engine forks (optional).
    """

    def prepare(self, eng, kinds, scope) -> None:
        pass

    def grade(self, eng, kinds, scope, results):  # pragma: no cover - every path overrides it
        raise NotImplementedError

    def verdicts(self, eng, instances):  # pragma: no cover - every path overrides it
        raise NotImplementedError
