"""marchkit: write, fault-simulate, grade, compare and export march tests.

Importing the package is cheap: the layers (``marchkit.notation``, ``marchkit.model``,
``marchkit.faults``, ``marchkit.engine``, ``marchkit.grade``, ``marchkit.export``,
``marchkit.report``, ``marchkit.cli``) are imported only when used.
"""

__version__ = "0.1.0"

__all__ = ["__version__"]
