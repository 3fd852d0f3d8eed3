"""Problems of one kind found while streaming: the first MAX_LISTED kept, the rest counted.

Batches arrive in file order, so "the first ones" are the first by line, as a reader of the
file expects.  Messages are built only for the rows that are listed: never a Python string
per row of the file.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from ..errors import Collector
from .model import MAX_LISTED, TOTAL_ID


class Listing:
    """One kind of row problem (e.g. a non-numeric mw) in one column."""

    def __init__(self, column: str | None, what: str):
        self.column = column
        self.what = what  # "... and N more lines with {what}"
        self.rows: list[tuple[int | None, str, str | None]] = []
        self.n = 0

    @property
    def room(self) -> int:
        return max(MAX_LISTED - len(self.rows), 0)

    def add(self, pos: np.ndarray, line: np.ndarray,
            message: Callable[[np.ndarray], list[str]],
            column: Callable[[np.ndarray], list[str]] | None = None) -> None:
        """Rows ``pos`` (batch positions, in file order) have this problem; ``line[pos]`` are
        their file lines; ``message(pos[:k])`` builds the texts of the ones listed (and
        ``column(pos[:k])`` their columns, when they differ from row to row)."""
        pos = np.asarray(pos)
        if not len(pos):
            return
        k = min(self.room, len(pos))
        if k:
            cols = column(pos[:k]) if column is not None else [self.column] * k
            self.rows += list(zip(line[pos[:k]].tolist(), message(pos[:k]), cols))
        self.n += len(pos)

    def add_one(self, line: int | None, message: str) -> None:
        if self.room:
            self.rows.append((line, message, self.column))
        self.n += 1

    def emit(self, col: Collector) -> None:
        for line, msg, column in self.rows:
            col.add(msg, row=line, column=column)
        if self.n > MAX_LISTED:
            col.add(f"... and {self.n - MAX_LISTED} more lines with {self.what}",
                    column=self.column)


class UnknownIds:
    """Unknown feeder ids: one problem per distinct id at its first line, with its count."""

    #: distinct unknown ids remembered (a file of random ids must not grow without bound)
    MAX_TRACKED = 100_000

    def __init__(self, known: tuple[str, ...]):
        self.first: dict[str, list[int]] = {}  # id -> [first line, count]
        self.n_more = 0  # distinct ids beyond MAX_TRACKED
        self.lower = {x.lower(): x for x in known}

    def add(self, ids: list[str], first_line: np.ndarray, count: np.ndarray) -> None:
        for fid, ln, c in zip(ids, first_line.tolist(), count.tolist()):
            e = self.first.get(fid)
            if e is not None:
                e[1] += c
            elif len(self.first) < self.MAX_TRACKED:
                self.first[fid] = [ln, c]
            else:
                self.n_more += 1

    def hint(self, fid: str) -> str:
        low = fid.lower()
        return f"; did you mean '{self.lower[low]}'?" if low in self.lower else ""

    def emit(self, col: Collector) -> None:
        for fid, (first, cnt) in list(self.first.items())[:MAX_LISTED]:
            more = f" (on {cnt} lines, first shown)" if cnt > 1 else ""
            col.add(f"feeder_id '{fid}' is not a feeder of the study and not {TOTAL_ID}"
                    f"{more}{self.hint(fid)}", row=first, column="feeder_id")
        extra = len(self.first) + self.n_more - MAX_LISTED
        if extra > 0:
            col.add(f"... and {extra} more unknown feeder ids", column="feeder_id")
