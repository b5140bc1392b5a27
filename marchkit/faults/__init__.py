"""Layer 3: the fault catalogue — families of kinds (data), selections, pair scopes, instances.

Families are registered in :mod:`marchkit.faults.registry`; see DEVELOPERS.md."""

from .catalogue import (DEFAULT_RETENTION, FaultSelection, Instance, PairScope, all_classes, all_kinds,
                        cell_pair_count, cell_pairs, enumerate_instances, format_seconds, instance_count,
                        parse_pairs, select_faults, word_pair_count, word_pairs)
from .decoder import AF
from .family import Family, order_pattern, pattern_name
from .primitives import (CFID, CFIN, CFST, CLASSIC_CLASSES, COUPLING_CLASSES, DYNAMIC,
                         DYNAMIC_CLASSES, SAF, SINGLE_CLASSES, STATIC, STATIC_CLASSES, TF, Cond,
                         FaultKind, Rule, parse_rule, primitive)
from .registry import FAMILIES, class_family, family, family_of
from .retention import drf_kinds
from .stuck_open import SOF

__all__ = [
    "DEFAULT_RETENTION", "FaultSelection", "Instance", "PairScope", "all_classes", "all_kinds", "cell_pairs",
    "enumerate_instances", "format_seconds", "instance_count", "parse_pairs", "select_faults",
    "word_pairs", "cell_pair_count", "word_pair_count", "AF", "CFID", "DYNAMIC", "DYNAMIC_CLASSES", "CFIN", "CFST", "CLASSIC_CLASSES",
    "COUPLING_CLASSES", "SAF", "SINGLE_CLASSES", "SOF", "STATIC", "STATIC_CLASSES", "TF", "Cond",
    "FaultKind", "Rule", "drf_kinds", "parse_rule", "primitive", "FAMILIES", "Family", "family",
    "family_of", "class_family", "order_pattern", "pattern_name",
]
