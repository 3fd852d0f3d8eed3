"""The relay work list: one row per relay whose setting changes going from the allocation in
service now to a new one, field visits first (in visit order), then the relays the control
room sets by schedule.

Each side of a field row carries the full setting: block, pickup Hz, time delay s, RoCoF
setting Hz/s and its arming frequency Hz, or ``unarmed`` with the settings left blank (see
:mod:`allocator.field.changes`).  MW moved comes from the statement scenario
(:func:`allocator.check.statement_check`); the row names the scenario and the local time of
the interval it is measured at.

A remote-settable relay whose schedule differs from its block now gets one row with the
action "set remote schedule": no visit, ``new_block`` the schedule text
("day: B2; night: B3").
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..check import ScenarioChecks, statement_check
from ..domain import Study
from ..timefmt import iso_local
from .changes import (FEEDER_SEP, REMOTE_STEP, UNARMED_WORD, as_schedule, moved_mw,
                      remote_relays, setting)

#: blank columns for the field crew
SIGN_COLUMNS = ("done_by", "date", "checked_by")
REMOTE_ACTION = "set remote schedule"

WORK_LIST_COLUMNS = (
    "visit", "visit_substation", "substations", "feeders", "relay", "action",
    "now_block", "now_pickup_hz", "now_delay_s", "now_rocof_hz_per_s", "now_rocof_arm_hz",
    "new_block", "new_pickup_hz", "new_delay_s", "new_rocof_hz_per_s", "new_rocof_arm_hz",
    "mw_scenario", "moved_mean_mw", "moved_mw_at_block_lowest", "block_lowest_local_time",
    "customers", "priority") + SIGN_COLUMNS


def _people(study: Study, members) -> tuple:
    """(feeder ids, relay kinds, customers, priority sites) of one relay's feeders."""
    fs = [study.feeders[int(i)] for i in members]
    cust = [f.customers for f in fs if f.customers is not None]
    return (FEEDER_SEP.join(f.feeder_id for f in fs),
            "/".join(dict.fromkeys(f.relay for f in fs)),
            sum(cust) if cust else np.nan,
            FEEDER_SEP.join(dict.fromkeys(f.priority for f in fs if f.priority)))


def field_rows(field_checks: ScenarioChecks, order) -> pd.DataFrame:
    """One row per relay changed in the field, in visit order (``order``: the
    :class:`allocator.field.visits.VisitOrder` of ``field_checks``), columns
    :data:`WORK_LIST_COLUMNS`."""
    st = field_checks.study
    changes = order.changes
    chk = statement_check(field_checks)
    mean, at, when = moved_mw(chk, changes)
    times = iso_local(chk.year.local_times[when]) if len(changes) else []
    rows = []
    for k, ch in enumerate(changes):
        ids, relay, cust, prio = _people(st, ch.feeders)
        rows.append((order.visit_of[ch.substation], ch.substation,
                     FEEDER_SEP.join(ch.substations), ids, relay, ch.action,
                     *setting(st, ch.old_block), *setting(st, ch.new_block),
                     chk.scenario, mean[k], at[k], times[k], cust, prio, "", "", ""))
    df = pd.DataFrame(rows, columns=list(WORK_LIST_COLUMNS))
    if not df.empty:
        df["_first"] = [ch.feeders[0] for ch in changes]
        df = df.sort_values(["visit", "_first"], kind="stable").drop(columns="_first")
    return df.reset_index(drop=True)


def schedule_text(study: Study, blocks: np.ndarray) -> str:
    """'day: S1; night: S2' for one feeder's ``[period]`` blocks; one block all year: its
    name."""
    names = study.block_names
    word = lambda b: names[int(b)] if b >= 0 else UNARMED_WORD  # noqa: E731
    if len(blocks) == 1:
        return word(blocks[0])
    return FEEDER_SEP.join(f"{p}: {word(b)}" for p, b in zip(study.period_names, blocks))


def remote_schedule_rows(study: Study, schedule: np.ndarray, now: np.ndarray,
                         step: int | str = "") -> pd.DataFrame:
    """One row per remote-settable relay whose schedule (or fixed allocation) differs from
    its block ``now`` (:func:`allocator.field.changes.remote_relays`): action "set remote
    schedule", ``new_block`` the schedule text, ``visit`` the step of the visit order at
    which the control room applies it; set in the control system, so no site visit."""
    schedule = as_schedule(schedule)
    rows = []
    for members in remote_relays(study, schedule, now):
        ids, relay, cust, prio = _people(study, members)
        subs = FEEDER_SEP.join(dict.fromkeys(study.feeders[int(i)].substation
                                             for i in members))
        cur = int(now[members[0]])
        rows.append((step, REMOTE_STEP, subs, ids, relay, REMOTE_ACTION, *setting(study, cur),
                     schedule_text(study, schedule[members[0]]),
                     np.nan, np.nan, np.nan, np.nan, "", np.nan, np.nan, "", cust, prio,
                     "", "", ""))
    return pd.DataFrame(rows, columns=list(WORK_LIST_COLUMNS))


def work_list_table(field_checks: ScenarioChecks, order,
                    planned: np.ndarray | None = None) -> pd.DataFrame:
    """The whole work list: the field rows in visit order, then (with the ``planned``
    schedule or allocation) the "set remote schedule" rows against the allocation the order
    starts from, numbered with the control room's step of the order."""
    table = field_rows(field_checks, order)
    if planned is None:
        return table
    step = order.visit_of.get(REMOTE_STEP, "")
    extra = remote_schedule_rows(field_checks.study, planned, order.now_idx, step)
    if extra.empty:
        return table
    return extra if table.empty else pd.concat([table, extra], ignore_index=True)


__all__ = ["work_list_table", "field_rows", "remote_schedule_rows", "schedule_text",
           "REMOTE_ACTION", "WORK_LIST_COLUMNS", "SIGN_COLUMNS"]
