"""What a relay contributes: the arithmetic of armed load that the check, the planner and the
field results all use.  Pure numpy, no tables.

Contribution of feeder f at interval t (MW):

* relay ``standard``: its net load (negative while the feeder exports: tripping it then
  *raises* the system's net load);
* relay ``direction_blocked``: ``max(net, 0)`` (the relay does not trip a feeder in reverse
  power flow);
* relay ``none`` or unarmed: 0.

``armed_mw[b, t]`` sums the contributions of the feeders in block b, and
``share_pct[b, t] = 100 · armed_mw[b, t] / demand_mw[t]`` (NaN where demand ≤ 0).
"""

from __future__ import annotations

import numpy as np

from .domain import RELAY_DIRECTION_BLOCKED, RELAY_STANDARD, UNARMED


def contribution_mw(net_mw: np.ndarray, relay_code: np.ndarray) -> np.ndarray:
    """Per-feeder tripped MW ``[feeder, interval]`` if the feeder were armed (a new array)."""
    out = np.where((relay_code == RELAY_STANDARD)[:, None], net_mw, 0.0)
    db = relay_code == RELAY_DIRECTION_BLOCKED
    if db.any():
        out[db] = np.maximum(net_mw[db], 0.0)
    return out


def armed_mw(net_mw: np.ndarray, relay_code: np.ndarray, block_idx: np.ndarray,
             n_blocks: int) -> np.ndarray:
    """Armed MW ``[block, interval]`` for an assignment ``block_idx[feeder]`` (−1 unarmed).

    Computed as a one-hot ``[block, feeder]`` matrix product with the net load (standard
    relays) plus the same with ``max(net, 0)`` for the direction-blocked rows only, so no
    ``[feeder, interval]`` temporary is made for the whole network.
    """
    block_idx = np.asarray(block_idx)
    n_t = net_mw.shape[1]
    out = np.zeros((n_blocks, n_t))
    armed = block_idx >= 0
    std = np.flatnonzero(armed & (relay_code == RELAY_STANDARD))
    if std.size:
        onehot = np.zeros((n_blocks, net_mw.shape[0]))
        onehot[block_idx[std], std] = 1.0
        out += onehot @ net_mw
    db = np.flatnonzero(armed & (relay_code == RELAY_DIRECTION_BLOCKED))
    if db.size:
        onehot = np.zeros((n_blocks, db.size))
        onehot[block_idx[db], np.arange(db.size)] = 1.0
        out += onehot @ np.maximum(net_mw[db], 0.0)
    return out


def armed_mw_scheduled(net_mw: np.ndarray, relay_code: np.ndarray, schedule: np.ndarray,
                       period_of: np.ndarray, n_blocks: int) -> np.ndarray:
    """Armed MW ``[block, interval]`` for a schedule ``schedule[feeder, period]`` (block in
    force in each period, −1 unarmed) with ``period_of[interval]`` the period index.

    Feeders with one block in every period are summed once over the year
    (:func:`armed_mw`); the others are added period by period on that period's columns
    (a loop over the few periods, each an array slice).
    """
    schedule = np.asarray(schedule, dtype=np.intp)
    fixed = (schedule == schedule[:, :1]).all(axis=1)
    out = armed_mw(net_mw, relay_code, np.where(fixed, schedule[:, 0], UNARMED), n_blocks)
    sw = np.flatnonzero(~fixed)
    if sw.size == 0:
        return out
    rows = net_mw[sw]
    for p in range(schedule.shape[1]):
        cols = np.flatnonzero(period_of == p)
        if cols.size:
            out[:, cols] += armed_mw(rows[:, cols], relay_code[sw], schedule[sw, p], n_blocks)
    return out


def share_pct(armed: np.ndarray, demand_mw: np.ndarray) -> np.ndarray:
    """``100 · armed / demand`` ``[block, interval]``; NaN where demand ≤ 0."""
    ok = demand_mw > 0
    out = np.full(armed.shape, np.nan)
    np.divide(100.0 * armed, demand_mw[None, :], out=out, where=ok[None, :])
    return out
