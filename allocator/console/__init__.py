"""Console rendering (rich) of the jobs' results.  No number is ever cut: every table goes
through :func:`allocator.console.tables.print_table`, which fixes each column at least as
wide as its longest value, lets headers wrap into the width left, and switches to one block
of "header: value" lines per row when even that does not fit (80 columns and piped output
included).  Nothing here computes a result: each function renders one.

``tables`` (the table printer), ``check`` (verdicts, statement, windows), ``field`` (visit
order, remote schedule), ``plan``, ``frequency``, ``review``, ``demo``.
"""

from .check import (scenario_table, side_words, statement_table, study_overview,
                    verdict_table, verdict_words, warnings, worst_windows)
from .tables import make_console, print_pairs, print_table

__all__ = ["make_console", "print_pairs", "print_table", "study_overview", "warnings",
           "side_words", "verdict_words", "verdict_table", "scenario_table",
           "statement_table", "worst_windows"]
