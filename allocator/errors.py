"""The input error type: every problem found in one pass, each naming where it is.

A command that reads input collects :class:`Problem` objects instead of raising at the first
one, and raises a single :class:`InputError` carrying all of them.  The CLI prints them and
exits with code 2 before anything is written.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Problem:
    """One thing wrong with an input file.

    ``row`` is the spreadsheet row number as the user sees it (header = row 1) or the CSV line
    number (header = line 1); ``None`` when the problem is not tied to a row.
    """

    file: str
    message: str
    sheet: str | None = None
    row: int | None = None
    column: str | None = None

    def location(self) -> str:
        parts = [self.file]
        if self.sheet:
            parts.append(f"sheet '{self.sheet}'")
        if self.row is not None:
            is_text = self.sheet is None and self.file.lower().endswith((".csv", ".csv.gz",
                                                                          ".txt"))
            parts.append(f"{'line' if is_text else 'row'} {self.row}")
        if self.column:
            parts.append(f"column '{self.column}'")
        return ", ".join(parts)

    def __str__(self) -> str:
        return f"{self.location()}: {self.message}"


class InputError(Exception):
    """Raised once per input pass with every problem that was found."""

    def __init__(self, problems: list[Problem]):
        if not problems:
            raise ValueError("InputError needs at least one problem")
        self.problems = list(problems)
        super().__init__(self.render())

    def render(self) -> str:
        n = len(self.problems)
        head = f"{n} problem{'s' if n != 1 else ''} in the input:"
        return "\n".join([head] + [f"  - {p}" for p in self.problems])


@dataclass
class Collector:
    """Accumulates problems for one file; ``raise_if_any`` ends the pass."""

    file: str
    problems: list[Problem] = field(default_factory=list)

    def add(self, message: str, sheet: str | None = None, row: int | None = None,
            column: str | None = None) -> None:
        self.problems.append(Problem(self.file, message, sheet, row, column))

    def extend(self, problems: list[Problem]) -> None:
        self.problems.extend(problems)

    def __bool__(self) -> bool:  # pragma: no cover - convenience
        return bool(self.problems)

    def raise_if_any(self) -> None:
        if self.problems:
            raise InputError(self.problems)
