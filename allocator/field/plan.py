"""What people act on, built once per allocation: ``the allocation's check + the allocation
now → FieldPlan``.

A :class:`FieldPlan` holds every field result of one allocation: the relay changes, the
visit order, the work list (field rows in visit order, then the remote-schedule rows), the
switching calendar of a schedule, the annual statement, each feeder's kind of change and the
counts.  Every renderer (work_list.csv, visit_order.csv, plan.csv, the xlsx sheets, the HTML
sections, the visit-order figure, the console) takes it and computes nothing of its own, so
they cannot disagree.

The field state: a schedule is put in service in two kinds of step.  Crews visit the
substations and set every relay that is not remote-settable to its planned block
(:meth:`allocator.domain.Study.field_allocation`); the remote-settable relays keep their
block now until the control room applies their schedule.  The visit order is judged on that
field state (``field_checks``), the statement on the allocation as planned (``checks``,
with its schedule).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..assignment import assignment_rows
from ..check import ScenarioChecks, as_set, run_checks
from ..domain import Study
from ..plan.record import NO_CHANGES, ChangeCounts
from ..year import study_calendar_year
from .changes import as_schedule, remote_relays
from .statement import statement_basis, statement_table
from .switching import switching_table
from .visits import VisitOrder, visit_order, visit_order_table
from .worklist import WORK_LIST_COLUMNS, work_list_table

FIELD_VISIT, REMOTE_SCHEDULE = "field visit", "remote schedule"


@dataclass(frozen=True)
class FieldPlan:
    """The field results of one allocation.  ``now_idx`` is None when the allocation checked
    is the one in service now (nothing changes, no work list)."""

    checks: ScenarioChecks  # the allocation as planned (with its schedule, if any)
    now_idx: np.ndarray | None  # [feeder] block in service now
    field_checks: ScenarioChecks  # the network after the field visits
    order: VisitOrder | None
    work_list: pd.DataFrame  # columns WORK_LIST_COLUMNS
    visits: pd.DataFrame  # visit_order.csv
    statement: pd.DataFrame  # statement.csv
    statement_basis: str
    switching: pd.DataFrame | None  # switching.csv of a schedule
    feeder_change: np.ndarray  # [feeder] "", FIELD_VISIT or REMOTE_SCHEDULE
    counts: ChangeCounts

    @property
    def study(self) -> Study:
        return self.checks.study

    @property
    def schedule(self) -> np.ndarray | None:
        return self.checks.schedule

    @property
    def compares(self) -> bool:
        """True when the allocation is compared with the one in service now."""
        return self.now_idx is not None


def _feeder_change(study: Study, now: np.ndarray, field_idx: np.ndarray,
                   planned: np.ndarray) -> np.ndarray:
    """``[feeder]`` how its block changes: by a field visit, by the control room (remote
    settings), or not."""
    out = np.where(field_idx != now, FIELD_VISIT, "").astype(object)
    for members in remote_relays(study, planned, now):
        out[members] = REMOTE_SCHEDULE
    return out


def _counts(study: Study, order: VisitOrder, change: np.ndarray) -> ChangeCounts:
    rel = study.relay_index
    remote = np.unique(rel[change == REMOTE_SCHEDULE]).size
    return ChangeCounts(field_relays=len(order.changes), remote_relays=int(remote),
                        feeders_changed=int((change != "").sum()),
                        field_feeders=int((change == FIELD_VISIT).sum()),
                        substations=len(order.site_visits))


def _unchanged(cs: ScenarioChecks, study: Study) -> FieldPlan:
    """The field plan of the allocation in service now: nothing to do."""
    sched = cs.schedule
    cal = study_calendar_year(study, [c.year for c in cs.checks])
    switching = None if sched is None else switching_table(study, cal, sched)
    empty = pd.DataFrame(columns=list(WORK_LIST_COLUMNS))
    return FieldPlan(cs, None, cs, None, empty, pd.DataFrame(), statement_table(cs),
                     statement_basis(cs), switching,
                     np.full(len(study.feeders), "", dtype=object), NO_CHANGES)


def field_plan(checks, now_idx: np.ndarray | None = None) -> FieldPlan:
    """The field results of the allocation ``checks`` was made of (a fixed allocation or a
    schedule) going from ``now_idx`` (block per feeder in service now); ``now_idx`` None: the
    allocation checked is the one in service now.  Remote-settable relays are set by the
    control room (one step of the visit order), every other relay by a field crew."""
    cs = as_set(checks)
    st = cs.study
    if now_idx is None:
        return _unchanged(cs, st)
    now = np.asarray(now_idx, dtype=np.intp)
    sched = cs.schedule
    planned = as_schedule(cs.block_idx if sched is None else sched)
    field_idx = st.field_allocation(planned, now)
    years = [c.year for c in cs.checks]
    field_cs = cs if sched is None and (field_idx == cs.block_idx).all() else \
        run_checks(st, years, field_idx, cs.warnings)
    order = visit_order(cs, now, remote=True)
    change = _feeder_change(st, now, field_idx, planned)
    switching = None if sched is None else switching_table(
        st, study_calendar_year(st, years), sched)
    return FieldPlan(cs, now, field_cs, order, work_list_table(field_cs, order, planned),
                     visit_order_table(order), statement_table(cs), statement_basis(cs),
                     switching, change, _counts(st, order, change))


def plan_table(fp: FieldPlan) -> pd.DataFrame:
    """plan.csv: ``feeder_id, block, previous_block, changed`` (block: the first period's
    for a schedule; changed: yes when the feeder's block differs from now in some period),
    and, for a schedule or a study with remote-settable relays, ``changed_by`` (field
    visit / remote schedule)."""
    st = fp.study
    rows = assignment_rows(st, fp.checks.block_idx, previous=fp.now_idx)
    df = pd.DataFrame(rows, columns=["feeder_id", "block", "previous_block", "changed"])
    df["changed"] = np.where(fp.feeder_change != "", "yes", "no")
    if fp.schedule is not None or fp.study.is_remote_settable.any():
        df["changed_by"] = fp.feeder_change
    return df


__all__ = ["FieldPlan", "field_plan", "plan_table", "FIELD_VISIT", "REMOTE_SCHEDULE"]
