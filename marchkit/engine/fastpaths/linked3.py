"""Fast path of the ``linked3`` family (LF3): the keyed group-rule path of :mod:`.group_rules`."""

from .group_rules import GroupFast

FAST = GroupFast()
