"""Oracle of the ``npsf`` family (type-1 NPSF): the group rules of :mod:`.group_rules`."""

from .group_rules import Fault  # noqa: F401
