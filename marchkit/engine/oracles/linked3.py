"""Oracle of the ``linked3`` family (LF3): the group rules of :mod:`.group_rules`."""

from .group_rules import Fault  # noqa: F401
