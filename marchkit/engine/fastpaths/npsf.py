"""Fast path of the ``npsf`` family (type-1 NPSF): the keyed group-rule path of :mod:`.group_rules`."""

from .group_rules import GroupFast

FAST = GroupFast()
