"""Where the engines find a family's oracle and fast path: by the family's registered name
(:mod:`marchkit.faults.registry`), ``marchkit.engine.oracles.<name>`` and
``marchkit.engine.fastpaths.<name>``.  Nothing to edit here when a family is added."""

from __future__ import annotations

import importlib
from functools import lru_cache


@lru_cache(maxsize=None)
def _module(pkg: str, name: str):
    return importlib.import_module(f"marchkit.engine.{pkg}.{name}")


def oracle(kind):
    """The oracle module (with its ``Fault`` class) of ``kind``'s family."""
    return _module("oracles", kind.family)


def fast_path(name: str):
    """The fast-path module (with its ``FAST`` object) of the family called ``name``."""
    return _module("fastpaths", name)
