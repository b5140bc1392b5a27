"""Layer 4: the engines — one interface, two implementations.

* :func:`reference_verdicts` — the literal simulator (``reference.py`` on the semantics of
  ``core.py`` and the per-family oracles in ``oracles/``);
* :class:`Engine` — the exact fast engine (``fast.py`` dispatching to ``fastpaths/``).

Both give, per instance, ``(detected, Detection | None)``; ``Engine.grade`` gives a
:class:`KindResult` per kind.  Families are found through :mod:`marchkit.faults.registry`
(see :mod:`marchkit.engine.registry`).  Importing this package imports numpy lazily: the
names below are loaded on first use.
"""

from __future__ import annotations

from .results import Detection, KindResult

__all__ = ["Detection", "KindResult", "Engine", "reference_verdicts"]


def __getattr__(name):
    if name == "Engine":
        from .fast import Engine

        return Engine
    if name == "reference_verdicts":
        from .reference import reference_verdicts

        return reference_verdicts
    raise AttributeError(name)
