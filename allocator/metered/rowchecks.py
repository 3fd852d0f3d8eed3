"""Checks of single rows, shared by the long and wide layouts: the problem listings in the
order they are reported, and the timestamp rules (one form per file, the skipped spring
hour, the repeated autumn hour)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import Collector
from .listing import Listing, UnknownIds
from .model import EXAMPLE, NAT
from .timestamps import Ambiguity, Times


@dataclass
class Problems:
    """Every problem of a file, in the order they are reported."""

    header: Collector
    shape: Listing = field(default_factory=lambda: Listing(None, "the wrong number of fields"))
    fid_blank: Listing = field(default_factory=lambda: Listing("feeder_id",
                                                               "a blank feeder_id"))
    unknown: UnknownIds | None = None
    mw: Listing = field(default_factory=lambda: Listing(
        "mw", "a non-numeric or non-finite mw"))
    ts_bad: Listing = field(default_factory=lambda: Listing("timestamp",
                                                            "an unreadable timestamp"))
    ts_mixed: Listing = field(default_factory=lambda: Listing("timestamp",
                                                              "the other timestamp form"))
    ts_skipped: Listing = field(default_factory=lambda: Listing(
        "timestamp", "a local time in the skipped spring hour"))
    ts_third: Listing = field(default_factory=lambda: Listing(
        "timestamp", "a third reading in the repeated hour"))

    def rows_listings(self) -> list:
        return [self.shape, self.fid_blank, self.unknown, self.mw, self.ts_bad, self.ts_mixed,
                self.ts_skipped, self.ts_third]


def mw_message(t: str) -> str:
    if t == "":
        return "mw is blank (leave the row out where there is no reading)"
    return f"mw '{t}' is not a finite number"


class TimeRules:
    """Per-row timestamp checks with the state they carry through the file."""

    def __init__(self, tz: str, probs: Problems):
        self.tz = tz
        self.p = probs
        self.main_form = 0  # form of the first readable timestamp of the file
        self.main_line = 0
        self.amb = Ambiguity()

    def resolve(self, tm: Times, keep: np.ndarray | None, line: np.ndarray, key, third_msg
                ) -> tuple[np.ndarray, np.ndarray | None]:
        """(UTC ns per row, NAT where unusable; in the repeated autumn hour, None if no row
        is) - listing the problems.  ``keep`` None: every row counts.  ``key(pos)`` names the
        series of rows for the autumn-hour order, ``third_msg(text, pos)`` words a third
        reading."""
        f = tm.uniform()
        if keep is None and f and self.main_form in (0, f):  # the usual batch: one look
            if self.main_form == 0:
                self.main_form, self.main_line = f, int(line[0])
            return tm.utc, None
        keep = np.ones(len(line), dtype=bool) if keep is None else keep
        self._unreadable(tm, keep, line)
        self._mixed(tm, keep, line)
        t = np.where(tm.form == 1, tm.utc, NAT)
        nv = keep & (tm.form == 2)
        skipped = nv & (tm.utc == NAT)
        self.p.ts_skipped.add(np.flatnonzero(skipped), line, lambda q: [
            f"local time '{x}' does not exist in {self.tz}: the clocks skip that hour when "
            "summer time starts" for x in tm.text(q)])
        amb = nv & ~skipped & (tm.utc != tm.std)
        plain = nv & ~skipped & ~amb
        t[plain] = tm.utc[plain]
        if amb.any():
            pos = np.flatnonzero(amb)
            k = self.amb.order(key(pos), tm.naive[pos])
            t[pos[k == 0]] = tm.utc[pos[k == 0]]
            t[pos[k == 1]] = tm.std[pos[k == 1]]
            third = pos[k >= 2]
            self.p.ts_third.add(third, line, lambda q: [third_msg(x, i) for x, i in
                                                         zip(tm.text(q), q)])
            amb[third] = False
        return t, amb

    def _unreadable(self, tm: Times, keep, line) -> None:
        pos = np.flatnonzero(keep & (tm.form == 0))
        self.p.ts_bad.add(pos, line, lambda q: [
            (f"timestamp '{x}' is not a date and time in ISO 8601 form in the years "
             f"1678..2261 ({EXAMPLE})") if x else "timestamp is blank" for x in tm.text(q)])

    def _mixed(self, tm: Times, keep, line) -> None:
        parsed = np.flatnonzero(keep & (tm.form != 0))
        if not len(parsed):
            return
        if self.main_form == 0:
            self.main_form = int(tm.form[parsed[0]])
            self.main_line = int(line[parsed[0]])
        odd = parsed[tm.form[parsed] != self.main_form]
        if self.main_form == 1:
            what, ref = "is local time without a UTC offset", "carries a UTC offset"
        else:
            what, ref = "carries a UTC offset", "is local time without an offset"
        self.p.ts_mixed.add(odd, line, lambda q: [
            f"timestamp '{x}' {what}, but the first timestamp (line {self.main_line}) {ref}; "
            "a file must use one form throughout" for x in tm.text(q)])


def third_for_feeder(fid: str, text: str) -> str:
    return (f"local time '{text}' occurs a third time for feeder '{fid}': in the repeated "
            "autumn hour each local time can appear twice (first summer time, then standard "
            "time); use UTC offsets to be unambiguous")
