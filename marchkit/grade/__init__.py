"""Layer 5: grading — coverage per fault class and per primitive, with cost in operations,
cycles and time."""

from .grader import ClassRow, GradeResult, PrimitiveRow, Total, grade, grade_kinds
from .reasons import reason_for

__all__ = ["ClassRow", "GradeResult", "PrimitiveRow", "Total", "grade", "grade_kinds", "reason_for"]
