"""Relay setting changes: ``allocation now + new allocation → RelayChange per relay``.

A trip group is one relay (``Study.relay_index``): one change lists all its feeders.  A relay
is visited at the substation of its first feeder in the ``feeders`` sheet; when a trip group
spans substations the change names every one, the visit substation first.  The control
room's changes (:func:`remote_changes`) are one step of their own, :data:`REMOTE_STEP`.

Actions: ``arm`` (unarmed now, in a block after), ``move`` (from one block to another),
``disarm`` (in a block now, unarmed after).  A remote-settable relay
(:attr:`allocator.domain.Study.is_remote_settable`) is never a field change: its schedule is
set from the control room (:func:`remote_relays`).

MW moved is the relay's tripped MW (:func:`allocator.armed.contribution_mw`) in one check's
year, as the mean over its valid intervals and at the interval where the block it goes to
(for ``disarm``: the block it leaves) has its lowest share.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..armed import contribution_mw
from ..check import Check
from ..domain import UNARMED, Study

UNARMED_WORD = "unarmed"
FEEDER_SEP = "; "
#: the step of the visit order at which the control room applies the remote settings
REMOTE_STEP = "control room (remote settings)"


@dataclass(frozen=True)
class RelayChange:
    """One relay whose block setting changes.  ``feeders`` in sheet order; ``substation`` is
    where it is visited (its first feeder's), ``substations`` every one it trips, that first."""

    feeders: tuple[int, ...]
    substation: str
    substations: tuple[str, ...]
    old_block: int  # UNARMED = -1
    new_block: int
    #: the period this change holds in (a remote schedule: one change per period whose
    #: block differs from now); -1: all year
    period: int = -1

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


def as_schedule(allocation: np.ndarray) -> np.ndarray:
    """``[feeder, period]`` of a schedule, or a fixed allocation ``[feeder]`` as a schedule
    of one column (one block all year)."""
    a = np.asarray(allocation, dtype=np.intp)
    return a[:, None] if a.ndim == 1 else a


def remote_relays(study: Study, schedule: np.ndarray, now: np.ndarray
                  ) -> list[np.ndarray]:
    """The feeders of each remote-settable relay whose ``schedule[feeder, period]`` (or
    fixed allocation) differs from its block ``now`` in some period (blocks that differ
    between periods, or one new block all year), in the order of its first feeder."""
    schedule = as_schedule(schedule)
    differs = (schedule != np.asarray(now)[:, None]).any(axis=1)
    sw = np.flatnonzero(study.is_remote_settable & differs)
    rel = study.relay_index
    return [np.flatnonzero(rel == r) for r in dict.fromkeys(rel[sw].tolist())]


def remote_changes(study: Study, schedule: np.ndarray, now: np.ndarray
                   ) -> tuple[RelayChange, ...]:
    """The control room's changes: per remote-settable relay whose schedule differs from
    now, one change per period whose block differs (``period`` -1 for a fixed allocation,
    one block all year), at :data:`REMOTE_STEP`."""
    sched = as_schedule(schedule)
    now = np.asarray(now, dtype=np.intp)
    out = []
    for members in remote_relays(study, sched, now):
        first = int(members[0])
        subs = tuple(dict.fromkeys(study.feeders[int(i)].substation for i in members))
        feeders = tuple(int(i) for i in members)
        for k in range(sched.shape[1]):
            if sched[first, k] != now[first]:
                out.append(RelayChange(feeders, REMOTE_STEP, subs, int(now[first]),
                                       int(sched[first, k]),
                                       -1 if sched.shape[1] == 1 else k))
    return tuple(out)


def setting(study: Study, b: int) -> tuple:
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


__all__ = ["RelayChange", "relay_changes", "remote_relays", "remote_changes", "as_schedule",
           "setting", "moved_mw", "UNARMED_WORD", "FEEDER_SEP", "REMOTE_STEP"]
