"""What the engines return: per-instance :class:`Detection` and per-kind :class:`KindResult`."""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Detection:
    """Where an instance is first detected (canonical scenario: ⇕ run as ⇑)."""

    run: int
    element: int
    op: int
    address: int
    cycle: int


@dataclass
class KindResult:
    """Verdicts for every instance of one kind, as counts."""

    kind: object
    instances: int = 0
    detected: int = 0
    complete_by: int | None = None          # element index by which all detected ones are
    first_by: int | None = None             # earliest element where one is first detected
    missed_structures: set = field(default_factory=set)   # e.g. {"aggressor first"}
    missed_examples: list = field(default_factory=list)   # a few undetected Instances

    def merge_element(self, e):
        """Note that some detected instances are first detected in element ``e``."""
        if e is None:
            return
        if self.complete_by is None or e > self.complete_by:
            self.complete_by = e
        if self.first_by is None or e < self.first_by:
            self.first_by = e

    def merge(self, other: "KindResult") -> None:
        """Add the counts of ``other`` (same kind, other instances)."""
        self.instances += other.instances
        self.detected += other.detected
        self.merge_element(other.complete_by)
        self.merge_element(other.first_by)
        self.missed_structures |= other.missed_structures
        self.missed_examples.extend(other.missed_examples)
