"""Layer 3: the fault catalogue — kinds, selections, pair scopes, instances."""

from .catalogue import (DEFAULT_RETENTION, FaultSelection, Instance, PairScope, all_kinds,
                        cell_pairs, enumerate_instances, format_seconds, instance_count,
                        parse_pairs, select_faults, word_pairs)
from .catalogue import LINKED
from .group import LF3, NPSF, NPSF_CLASSES, GRule
from .linked import LF1, LF2AA, LF2AV, LF2VA, LINKED_CLASSES
from .primitives import DYNAMIC2, DYNAMIC2_CLASSES
from .primitives import (AF, CFID, CFIN, CFST, CLASSIC_CLASSES, COUPLING_CLASSES, DYNAMIC,
                         DYNAMIC_CLASSES, SAF,
                         SINGLE_CLASSES, SOF, STATIC, STATIC_CLASSES, TF, Cond, FaultKind, Rule,
                         drf_kinds, parse_rule, primitive)

__all__ = [
    "DEFAULT_RETENTION", "FaultSelection", "Instance", "PairScope", "all_kinds", "cell_pairs",
    "enumerate_instances", "format_seconds", "instance_count", "parse_pairs", "select_faults",
    "word_pairs", "AF", "CFID", "DYNAMIC", "DYNAMIC_CLASSES", "CFIN", "CFST", "CLASSIC_CLASSES", "COUPLING_CLASSES", "SAF",
    "SINGLE_CLASSES", "SOF", "STATIC", "STATIC_CLASSES", "TF", "Cond", "FaultKind", "Rule",
    "drf_kinds", "parse_rule", "primitive", "LINKED", "LF1", "LF2AA", "LF2AV", "LF2VA", "LF3",
    "LINKED_CLASSES", "NPSF", "NPSF_CLASSES", "GRule", "DYNAMIC2", "DYNAMIC2_CLASSES",
]
