"""Time order and duplicates per series, streaming, without sorting the file.

Each series keeps its running maximum time and the line where that maximum first appeared.
A reading later than the maximum is in order; equal to it, a duplicate of that line.  A
batch whose readings all move forward (the normal case) costs one stable sort by series
and a comparison.  Only a batch with a problem is examined row by row (pandas, exact as
before).  A reading *earlier* than its series' maximum is either a duplicate of some older
reading or out of order; which one, and the older line, is decided by a second read of the
file that looks for the first line of just those (series, time) pairs (kept up to
:data:`MAX_CANDIDATES`; beyond that they are counted as out of order).  Problems are listed
in line order, the first MAX_LISTED of each kind.
"""

from __future__ import annotations

from typing import Callable, Iterator

import numpy as np
import pandas as pd

from ..errors import Collector
from .model import MAX_LISTED, NAT, local_text

MAX_CANDIDATES = 1_000_000
_AMB_HINT = (" (in the repeated autumn hour, local times are taken in order: all of the hour "
             "in summer time first, then again in standard time)")


def _cat(parts: list[pd.DataFrame], cols) -> pd.DataFrame:
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=cols)


class SequenceCheck:
    """Order and duplicates of (series, time) rows; ``ids[code]`` names a series
    (``wide``: one series, the file's rows)."""

    def __init__(self, n_series: int, ids: list[str], tz: str, wide: bool = False):
        self.pm = np.full(n_series, NAT, dtype=np.int64)
        self.pm_line = np.zeros(n_series, dtype=np.int64)
        self.ids, self.tz, self.wide = ids, tz, wide
        self.dups: list[pd.DataFrame] = []  # line, c, t, first
        self.orders: list[pd.DataFrame] = []  # line, c, t, prev, amb
        self.cands: list[pd.DataFrame] = []  # line, c, t, prev, amb
        self.n_dup = self.n_order = self.n_cand = self.n_over = 0

    # ---- streaming ---------------------------------------------------------------------
    def update(self, code: np.ndarray, t: np.ndarray, pos: np.ndarray, line: np.ndarray,
               amb: np.ndarray | None, first: np.ndarray) -> None:
        """Rows grouped by series (file order within a series); ``first`` marks the first
        row of each group; ``line[pos]`` are their lines; ``amb`` their autumn-hour flags
        (None: none)."""
        if not len(code):
            return
        prev = np.empty_like(t)
        prev[1:] = t[:-1]
        prev[first] = self.pm[code[first]]
        if np.all(t > prev):
            last = np.empty(len(code), dtype=bool)
            last[:-1] = first[1:]
            last[-1] = True
            self.pm[code[last]] = t[last]
            self.pm_line[code[last]] = line[pos[last]]
            return
        ln = line[pos]
        self._examine(code, t, ln, np.zeros(len(t), bool) if amb is None else amb)
        self._raise_max(code, t, ln)

    def _raise_max(self, code, t, line) -> None:
        df = pd.DataFrame({"c": code, "t": t, "line": line})
        mx = df.groupby("c", sort=False)["t"].transform("max").to_numpy()
        at = df[(df["t"].to_numpy() == mx) & (mx > self.pm[code])]
        first = at.groupby("c", sort=False).first()
        c = first.index.to_numpy(dtype=np.int64)
        self.pm[c] = first["t"].to_numpy()
        self.pm_line[c] = first["line"].to_numpy()

    def _examine(self, code, t, line, amb) -> None:
        """Exact check of a batch with a problem (today's rules, carried maxima included)."""
        df = pd.DataFrame({"c": code, "t": t, "line": line, "amb": amb})
        pm = self.pm[code]
        prev_in = df.groupby("c", sort=False)["t"].cummax().groupby(df["c"]).shift(
            1, fill_value=NAT).to_numpy(dtype=np.int64)
        prev = np.maximum(prev_in, pm)
        later = t > pm
        dup_in = df.duplicated(["c", "t"], keep="first").to_numpy() & later
        first_in = df.groupby(["c", "t"], sort=False)["line"].transform("first").to_numpy()
        dup_pm = t == pm
        d = df[dup_in | dup_pm].assign(first=np.where(dup_pm, self.pm_line[code],
                                                      first_in)[dup_in | dup_pm])
        self._keep("dups", d[["line", "c", "t", "first"]])
        o = later & ~dup_in & (t < prev)
        self._keep("orders", df[o].assign(prev=prev[o])[["line", "c", "t", "prev", "amb"]])
        back = np.flatnonzero(t < pm)
        room = MAX_CANDIDATES - self.n_cand
        self.cands.append(df.iloc[back[:max(room, 0)]].assign(
            prev=prev[back[:max(room, 0)]])[["line", "c", "t", "prev", "amb"]])
        self.n_cand += min(len(back), max(room, 0))
        self.n_over += max(len(back) - max(room, 0), 0)

    def _keep(self, kind: str, rows: pd.DataFrame) -> None:
        n = len(rows)
        if kind == "dups":
            self.n_dup += n
        else:
            self.n_order += n
        store = getattr(self, kind)
        store.append(rows.sort_values("line").iloc[:MAX_LISTED])

    # ---- second read for readings that went back in time ---------------------------------
    @property
    def needs_second_read(self) -> bool:
        return self.n_cand > 0

    def resolve(self, rows: Callable[[], Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]]
                ) -> None:
        """``rows()`` streams the file again as (code, t, line) of the checked rows."""
        cand = _cat(self.cands, ["line", "c", "t", "prev", "amb"])
        keys = cand[["c", "t"]].drop_duplicates()
        best = None
        for code, t, line in rows():
            m = pd.DataFrame({"c": code, "t": t, "line": line}).merge(keys, on=["c", "t"])
            g = m.groupby(["c", "t"])["line"].min()
            best = g if best is None else pd.concat([best, g]).groupby(level=[0, 1]).min()
        first = cand.merge(best.rename("first").reset_index(), on=["c", "t"], how="left")
        is_dup = (first["first"] < first["line"]).to_numpy()
        self._keep("dups", first[is_dup][["line", "c", "t", "first"]])
        self._keep("orders", first[~is_dup][["line", "c", "t", "prev", "amb"]])
        self.cands = []

    # ---- messages ------------------------------------------------------------------------
    def emit(self, col: Collector) -> None:
        d = _cat(self.dups, ["line", "c", "t", "first"]).sort_values("line").iloc[:MAX_LISTED]
        for r, txt in zip(d.itertuples(), local_text(d["t"].to_numpy(dtype=np.int64), self.tz)):
            col.add(self._dup_msg(int(r.c), txt, int(r.first)), row=int(r.line),
                    column="timestamp")
        if self.n_dup > MAX_LISTED:
            col.add(f"... and {self.n_dup - MAX_LISTED} more lines with a duplicate reading",
                    column="timestamp")
        o = _cat(self.orders, ["line", "c", "t", "prev", "amb"]).sort_values("line")
        o = o.iloc[:MAX_LISTED]
        now = local_text(o["t"].to_numpy(dtype=np.int64), self.tz)
        before = local_text(o["prev"].to_numpy(dtype=np.int64), self.tz)
        for r, a, b in zip(o.itertuples(), now, before):
            col.add(self._order_msg(int(r.c), a, b, bool(r.amb)), row=int(r.line),
                    column="timestamp")
        n_order = self.n_order + self.n_over
        if n_order > MAX_LISTED:
            col.add(f"... and {n_order - MAX_LISTED} more lines with a timestamp out of order",
                    column="timestamp")

    def _dup_msg(self, c: int, when: str, first: int) -> str:
        if self.wide:
            return f"second row for {when} (local); the first is on line {first}"
        return (f"second reading for feeder '{self.ids[c]}' at {when} (local); the first is "
                f"on line {first}")

    def _order_msg(self, c: int, when: str, prev: str, amb: bool) -> str:
        if self.wide:
            msg = f"timestamp {when} (local) comes after a row for {prev}; rows must be in " \
                  "time order"
        else:
            msg = (f"timestamp {when} (local) of feeder '{self.ids[c]}' comes after a reading "
                   f"for {prev}; each feeder's readings must be in time order")
        return msg + (_AMB_HINT if amb else "")
