"""Fast path of the retention family (retention with refresh): closed form in the repeat
counts, every cell at once (see :mod:`marchkit.engine.dram_fast`)."""

from __future__ import annotations

from ..dram_fast import dram_verdicts, grade_dram_kinds
from .base import FastPath


class RetentionRefreshFast(FastPath):
    def grade(self, eng, kinds, scope, results):
        return grade_dram_kinds(eng, kinds, results)

    def verdicts(self, eng, instances):
        return dram_verdicts(eng, instances)


FAST = RetentionRefreshFast()
