"""The control-room calendar of a schedule: every switching instant of the year.

``switching_table(study, year, schedule)`` lists, for each interval start where the
period in force changes (:func:`allocator.year.year_period_index`, on the study
calendar), every relay switched by schedule whose block differs between the two periods:
the instant in ISO 8601 local time with its UTC offset (:mod:`allocator.timefmt`), the
periods, the feeder(s) of the relay (a trip group is one relay, its feeders joined by
spaces), the block before and after.  The first interval of the year counts the change
from the last interval's period (the schedule repeats year on year).

Daylight-saving days: instants are interval starts on the absolute (UTC) grid, so they all
exist and are all distinct.  A period boundary at a wall time the spring change skips
(e.g. 02:00 in Europe/Berlin) takes effect at the first instant after the jump (03:00 summer
time, the same absolute instant); in the repeated autumn hour the second pass keeps the
period of the first (:func:`allocator.periods.period_index`), so a boundary there switches
once, at its first occurrence, with the summer-time offset in the timestamp.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..domain import Study
from ..timefmt import iso_local
from ..year import Year, year_period_index
from .changes import FEEDER_SEP

SWITCHING_COLUMNS = ("instant_local", "from_period", "to_period", "feeders", "from_block",
                     "to_block")


def _relays(study: Study, rows: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """First feeder and feeder ids text of each relay among feeder ``rows``."""
    rel = study.relay_index[rows]
    _, first = np.unique(rel, return_index=True)
    lead = rows[np.sort(first)]
    ids = [FEEDER_SEP.join(study.feeder_ids[int(g)] for g in rows[rel == study.relay_index[f]])
           for f in lead]
    return lead, ids


def switching_table(study: Study, year: Year, schedule: np.ndarray) -> pd.DataFrame:
    """Columns :data:`SWITCHING_COLUMNS`, in time order then feeder order."""
    per = year_period_index(study, year)
    prev = np.roll(per, 1)
    at = np.flatnonzero(prev != per)
    sw = np.flatnonzero((schedule != schedule[:, :1]).any(axis=1))
    if at.size == 0 or sw.size == 0:
        return pd.DataFrame(columns=list(SWITCHING_COLUMNS))
    lead, ids = _relays(study, sw)
    p, q = prev[at], per[at]
    a, b = schedule[lead][:, p], schedule[lead][:, q]  # [relay, instant]
    r_i, t_i = np.nonzero(a != b)
    order = np.lexsort((r_i, t_i))
    r_i, t_i = r_i[order], t_i[order]
    names = np.array(study.block_names + ("",), dtype=object)  # -1 → "" (unarmed)
    pnames = np.array(study.period_names, dtype=object)
    return pd.DataFrame({
        "instant_local": iso_local(year.local_times[at[t_i]]),
        "from_period": pnames[p[t_i]], "to_period": pnames[q[t_i]],
        "feeders": np.array(ids, dtype=object)[r_i],
        "from_block": names[a[r_i, t_i]], "to_block": names[b[r_i, t_i]],
    }, columns=list(SWITCHING_COLUMNS))


__all__ = ["switching_table", "SWITCHING_COLUMNS"]
