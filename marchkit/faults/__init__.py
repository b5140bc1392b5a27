"""Layer 3: the fault catalogue — kinds, selections, pair scopes, instances."""

from .catalogue import (DEFAULT_RETENTION, FaultSelection, Instance, PairScope, all_kinds,
                        cell_pairs, enumerate_instances, format_seconds, instance_count,
                        parse_pairs, select_faults, word_pairs)
from .primitives import (AF, CFID, CFIN, CFST, CLASSIC_CLASSES, COUPLING_CLASSES, DYNAMIC,
                         DYNAMIC_CLASSES, SAF,
                         SINGLE_CLASSES, SOF, STATIC, STATIC_CLASSES, TF, Cond, FaultKind, Rule,
                         drf_kinds, parse_rule, primitive)

__all__ = [
    "DEFAULT_RETENTION", "FaultSelection", "Instance", "PairScope", "all_kinds", "cell_pairs",
    "enumerate_instances", "format_seconds", "instance_count", "parse_pairs", "select_faults",
    "word_pairs", "AF", "CFID", "DYNAMIC", "DYNAMIC_CLASSES", "CFIN", "CFST", "CLASSIC_CLASSES", "COUPLING_CLASSES", "SAF",
    "SINGLE_CLASSES", "SOF", "STATIC", "STATIC_CLASSES", "TF", "Cond", "FaultKind", "Rule",
    "drf_kinds", "parse_rule", "primitive",
]
