"""The relay work list: one row per relay whose setting changes going from the allocation in
service now to a new one (``old block per feeder, new block per feeder → rows``).

A trip group is one relay (``Study.relay_index``): one row lists all its feeders, their
substations and the customers they supply together.  A relay is visited at the substation
of its first feeder in the ``feeders`` sheet (the visit order, :mod:`allocator.visits`,
numbers those visits); when a trip group spans substations the row names every one, the
visit substation first.

Actions: ``arm`` (unarmed now, in a block after), ``move`` (from one block to another),
``disarm`` (in a block now, unarmed after).  Each side of the row carries the full setting:
block, pickup Hz, time delay s, RoCoF setting Hz/s and its arming frequency Hz, or
``unarmed`` with the settings left blank.

MW moved is the relay's tripped MW (the armed-load check's contribution: net load for a
standard relay, ``max(net, 0)`` for a direction-blocked one) in the statement scenario
(:func:`allocator.check.statement_check`), as the mean over its valid intervals and at the
interval where the block it goes to (for ``disarm``: the block it leaves) has its lowest
share under the new allocation.  The row names the scenario and that interval's local time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .armed import contribution_mw
from .check import Check, ScenarioChecks, statement_check
from .domain import UNARMED, Study
from .timefmt import iso_local

UNARMED_WORD = "unarmed"
FEEDER_SEP = "; "
#: blank columns for the field crew
SIGN_COLUMNS = ("done_by", "date", "checked_by")


@dataclass(frozen=True)
class RelayChange:
    """One relay whose block setting changes.  ``feeders`` in sheet order; ``substation`` is
    where it is visited (its first feeder's), ``substations`` every one it trips, that first."""

    feeders: tuple[int, ...]
    substation: str
    substations: tuple[str, ...]
    old_block: int  # UNARMED = -1
    new_block: int

    @property
    def action(self) -> str:
        if self.old_block == UNARMED:
            return "arm"
        return "disarm" if self.new_block == UNARMED else "move"


def relay_changes(study: Study, old_idx: np.ndarray, new_idx: np.ndarray
                  ) -> tuple[RelayChange, ...]:
    """Every relay whose block differs between ``old_idx`` and ``new_idx`` (block index per
    feeder), in the order of its first feeder.  A relay's block is its first feeder's (the
    members of a trip group share one block; the workbook and ``check --assignment`` refuse
    split groups)."""
    old = np.asarray(old_idx, dtype=np.intp)
    new = np.asarray(new_idx, dtype=np.intp)
    relay = study.relay_index
    changed = np.unique(relay[old != new])
    out = []
    for r in changed:
        members = np.flatnonzero(relay == r)
        subs = list(dict.fromkeys(study.feeders[int(i)].substation for i in members))
        first = int(members[0])
        out.append(RelayChange(tuple(int(i) for i in members), subs[0], tuple(subs),
                               int(old[first]), int(new[first])))
    out.sort(key=lambda c: c.feeders[0])
    return tuple(out)


def _setting(study: Study, b: int) -> tuple:
    """(block name, pickup Hz, delay s, RoCoF Hz/s, RoCoF arming Hz) or unarmed."""
    if b == UNARMED:
        return (UNARMED_WORD, np.nan, np.nan, np.nan, np.nan)
    blk = study.blocks[b]
    nan = lambda v: np.nan if v is None else v  # noqa: E731
    return (blk.name, blk.pickup_hz, blk.delay_s, nan(blk.rocof_hz_per_s),
            nan(blk.rocof_arm_hz))


def _lowest_interval(check: Check) -> np.ndarray:
    """``[block]`` interval index of each block's lowest share (valid intervals only)."""
    s = np.where(check.valid[None, :], check.share_pct, np.inf)
    return np.argmin(s, axis=1) if check.valid.any() else np.zeros(len(check.blocks), int)


def moved_mw(check: Check, changes: tuple[RelayChange, ...]
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per change: mean tripped MW over the valid intervals of ``check``'s year, the MW at
    the lowest-share interval of the block it goes to (disarm: leaves), and that interval."""
    st, y = check.study, check.year
    t_low = _lowest_interval(check)
    mean = np.zeros(len(changes))
    at = np.zeros(len(changes))
    when = np.zeros(len(changes), dtype=np.intp)
    for k, ch in enumerate(changes):
        rows = np.asarray(ch.feeders)
        c = contribution_mw(y.net_mw[rows], st.relay_code[rows]).sum(axis=0)
        mean[k] = c[check.valid].mean() if check.valid.any() else np.nan
        b = ch.new_block if ch.new_block != UNARMED else ch.old_block
        when[k] = t_low[b]
        at[k] = c[when[k]]
    return mean, at, when


WORK_LIST_COLUMNS = (
    "visit", "visit_substation", "substations", "feeders", "relay", "action",
    "now_block", "now_pickup_hz", "now_delay_s", "now_rocof_hz_per_s", "now_rocof_arm_hz",
    "new_block", "new_pickup_hz", "new_delay_s", "new_rocof_hz_per_s", "new_rocof_arm_hz",
    "mw_scenario", "moved_mean_mw", "moved_mw_at_block_lowest", "block_lowest_local_time",
    "customers", "priority") + SIGN_COLUMNS


def work_list_table(checks: Check | ScenarioChecks, previous_idx: np.ndarray,
                    order=None) -> pd.DataFrame:
    """The work list from ``previous_idx`` (in service now) to the checked allocation, one
    row per changed relay in visit order (``order``: a :class:`allocator.visits.VisitOrder`;
    computed when not given), columns :data:`WORK_LIST_COLUMNS`."""
    from .export import as_set
    from .visits import visit_order

    cs = as_set(checks)
    st = cs.study
    order = visit_order(cs, previous_idx) if order is None else order
    changes = order.changes
    chk = statement_check(cs)
    mean, at, when = moved_mw(chk, changes)
    times = iso_local(chk.year.local_times[when]) if len(changes) else []
    rows = []
    for k, ch in enumerate(changes):
        fs = [st.feeders[i] for i in ch.feeders]
        cust = [f.customers for f in fs if f.customers is not None]
        rows.append((order.visit_of[ch.substation], ch.substation,
                     FEEDER_SEP.join(ch.substations),
                     FEEDER_SEP.join(f.feeder_id for f in fs),
                     "/".join(dict.fromkeys(f.relay for f in fs)), ch.action,
                     *_setting(st, ch.old_block), *_setting(st, ch.new_block),
                     chk.scenario, mean[k], at[k], times[k],
                     sum(cust) if cust else np.nan,
                     FEEDER_SEP.join(dict.fromkeys(f.priority for f in fs if f.priority)),
                     "", "", ""))
    df = pd.DataFrame(rows, columns=list(WORK_LIST_COLUMNS))
    if not df.empty:
        df["_first"] = [ch.feeders[0] for ch in changes]
        df = df.sort_values(["visit", "_first"], kind="stable").drop(columns="_first")
    return df.reset_index(drop=True)


REMOTE_ACTION = "set remote schedule"


def schedule_text(study: Study, blocks: np.ndarray) -> str:
    """'day: S1; night: S2' for one feeder's ``[period]`` blocks."""
    names = study.block_names
    return FEEDER_SEP.join(f"{p}: {names[int(b)] if b >= 0 else UNARMED_WORD}"
                           for p, b in zip(study.period_names, blocks))


def remote_schedule_rows(study: Study, schedule: np.ndarray) -> pd.DataFrame:
    """One work-list row per switchable relay whose schedule differs from its block in service
    now in some period (blocks that differ between periods, or one new block all year):
    action "set remote schedule", ``new_block`` the schedule text; done in the control
    system, so no visit."""
    differs = (schedule != study.current_assignment[:, None]).any(axis=1)
    sw = np.flatnonzero(study.is_switchable & differs)
    rel = study.relay_index
    rows = []
    for r in dict.fromkeys(rel[sw].tolist()):
        members = np.flatnonzero(rel == r)
        fs = [study.feeders[int(i)] for i in members]
        cust = [f.customers for f in fs if f.customers is not None]
        cur = int(study.current_assignment[members[0]])
        rows.append(("", "", FEEDER_SEP.join(dict.fromkeys(f.substation for f in fs)),
                     FEEDER_SEP.join(f.feeder_id for f in fs),
                     "/".join(dict.fromkeys(f.relay for f in fs)), REMOTE_ACTION,
                     *_setting(study, cur), schedule_text(study, schedule[members[0]]),
                     np.nan, np.nan, np.nan, np.nan, "", np.nan, np.nan, "",
                     sum(cust) if cust else np.nan,
                     FEEDER_SEP.join(dict.fromkeys(f.priority for f in fs if f.priority)),
                     "", "", ""))
    return pd.DataFrame(rows, columns=list(WORK_LIST_COLUMNS))


__all__ = ["remote_schedule_rows", "schedule_text", "REMOTE_ACTION",
           "RelayChange", "relay_changes", "moved_mw", "work_list_table",
           "WORK_LIST_COLUMNS", "UNARMED_WORD"]
