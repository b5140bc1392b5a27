"""The fault families marchkit knows, registered once.

To add a family, write its kinds and :class:`~marchkit.faults.family.Family` object in a
module of this package and add that object to :data:`FAMILIES` (see DEVELOPERS.md, "Adding a
fault family").  The catalogue, the grader, the CLI and both engines find it here.
"""

from __future__ import annotations

from . import decoder, disturb, group, primitives, retention, retention_refresh, stuck_open

FAMILIES = (
    primitives.FAMILY,
    stuck_open.FAMILY,
    decoder.FAMILY,
    retention.FAMILY,
    group.LINKED3,
    group.NPSF_FAMILY,
    retention_refresh.FAMILY,
    disturb.FAMILY,
)

_BY_NAME = {f.name: f for f in FAMILIES}
assert len(_BY_NAME) == len(FAMILIES), "two families share a name"


def family(name: str):
    """The family registered under ``name``."""
    return _BY_NAME[name]


def family_of(kind):
    """The family of a fault kind."""
    return _BY_NAME[kind.family]


def class_family(cls: str):
    """The family that owns class ``cls``, or None."""
    for f in FAMILIES:
        if cls in f.classes:
            return f
    return None
