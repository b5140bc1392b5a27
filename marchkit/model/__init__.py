"""Layer 2: the memory model — geometry, address map, neighbours, orders, backgrounds, timing."""

from .backgrounds import background_array, background_names, background_stack, intra_word_words
from .build import MemoryFile, load_memory_file, make_memory, read_memory_file, with_changes
from .geometry import Memory, neighbour_edges, neighbour_graph
from .orders import address_order, lfsr_sequence, parse_order, ranks
from .timing import (EXPAND_LIMIT, OpRun, Schedule, Segment, compared_reads, first_write, is_compared, op_cycle, parse_duration,
                     parse_frequency, schedule, seconds_to_cycles)

__all__ = [
    "Memory", "make_memory", "load_memory_file", "read_memory_file", "MemoryFile", "with_changes", "neighbour_edges",
    "neighbour_graph", "address_order", "lfsr_sequence", "parse_order", "ranks",
    "background_array", "background_names", "background_stack", "intra_word_words",
    "EXPAND_LIMIT", "OpRun", "Schedule", "Segment", "compared_reads", "first_write", "is_compared", "op_cycle", "schedule", "parse_duration",
    "parse_frequency", "seconds_to_cycles",
]
