"""The allocation MILP as arrays (rows built from numpy slices, no loop per coefficient).

Variables (in this order):

* ``x[u, b]`` binary, one per *allowed* (unit, block) pair — unit u trips in block b;
* ``z`` ≥ 0 — worst band violation relative to target over the modelled intervals;
* ``y[b, t]`` free — block b's share of demand (pp) at modelled interval t;
* ``e[b, r]`` ≥ 0 — absolute deviation from target at the MAD sample intervals r.

Rows:

* each unit in at most one block: ``Σ_b x[u, b] ≤ 1``;
* share definition: ``y[b, t] − Σ_u pp[u, t] x[u, b] = 0``;
* band (t in the band set S): ``y + target_b·z ≥ min_b`` and ``y − target_b·z ≤ max_b``
  (so ``z ≥ max(min_b − y, y − max_b, 0) / target_b``);
* MAD (r in the sample R): ``e ≥ y − target_b`` and ``e ≥ target_b − y``;
* optional: ``changes ≤ N``; a cap on z (later levels); a cap on the MAD (level 3); the
  substation-share rows.

Three objectives on the same rows (see :mod:`allocator.plan.solve`): ``z``; the mean of e;
the number of changed feeders.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import sparse

from .units import Units


@dataclass
class MilpArrays:
    """``min c·v  s.t.  row_lb ≤ A v ≤ row_ub,  lb ≤ v ≤ ub,  v_j integer where integral``."""

    c: np.ndarray
    A: sparse.csr_matrix
    row_lb: np.ndarray
    row_ub: np.ndarray
    lb: np.ndarray
    ub: np.ndarray
    integral: np.ndarray
    offset: float = 0.0
    names: list[str] = field(default_factory=list)


@dataclass
class AllocationModel:
    """Index bookkeeping for one built model."""

    arrays: MilpArrays
    pair_u: np.ndarray
    pair_b: np.ndarray
    i_z: int
    band_set: np.ndarray  # positions into Units' valid intervals
    mad_set: np.ndarray
    i_e0: int
    n_e: int
    change_coef: np.ndarray  # per pair
    change_const: float

    def x_from_option(self, option: np.ndarray, n_blocks: int) -> np.ndarray:
        return (option[self.pair_u] == self.pair_b).astype(float)

    def option_from_x(self, v: np.ndarray, n_units: int, n_blocks: int) -> np.ndarray:
        xs = v[: self.pair_u.size]
        opt = np.full(n_units, n_blocks, dtype=np.intp)
        on = xs > 0.5
        opt[self.pair_u[on]] = self.pair_b[on]
        return opt


def build_model(units: Units, targets: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                band_set: np.ndarray, mad_set: np.ndarray, objective: str,
                z_cap: float | None = None, mad_cap: float | None = None,
                max_changes: int | None = None,
                substation_rows: list[tuple[int, int, np.ndarray, float]] = (),
                share_offset: np.ndarray | None = None, change_offset: float = 0.0,
                armed_caps: list[tuple[np.ndarray, float]] = (),
                armed_cost: np.ndarray | None = None) -> AllocationModel:
    """Build the model on ``band_set`` (band rows) and ``mad_set`` (MAD rows), both index
    arrays into the units' columns.  ``objective`` is ``"worst"``, ``"mad"``, ``"changes"``
    (relays changed) or ``"armed"`` (Σ ``armed_cost[u]`` over armed units).
    ``substation_rows``: (block, column, member mask [unit], cap fraction) — the block's
    armed pp from the masked units at that column is at most ``cap`` of its total there.
    ``armed_caps``: (unit mask, cap) — at most ``cap`` of the masked units are armed.
    The deviation rows are built for ``"mad"`` and whenever ``mad_cap`` is given."""
    nb = units.n_blocks
    pair_u, pair_b = np.nonzero(units.allowed)
    n_x = pair_u.size
    need_mad = objective == "mad" or mad_cap is not None
    model_t = np.union1d(band_set, mad_set if need_mad else np.array([], dtype=np.intp))
    n_t = model_t.size
    i_z = n_x
    i_y0 = n_x + 1
    n_y = nb * n_t
    mad_pos = np.searchsorted(model_t, mad_set) if need_mad else np.array([], dtype=np.intp)
    band_pos = np.searchsorted(model_t, band_set)
    n_e = nb * mad_pos.size if need_mad else 0
    i_e0 = i_y0 + n_y
    n_var = i_e0 + n_e

    def ycol(b, pos):
        return i_y0 + b * n_t + pos

    rows_r, rows_c, rows_v, rlb, rub = [], [], [], [], []
    r0 = 0

    def add(r, c, v):
        rows_r.append(np.asarray(r, dtype=np.int64))
        rows_c.append(np.asarray(c, dtype=np.int64))
        rows_v.append(np.asarray(v, dtype=float))

    # each unit in at most one block
    has = np.unique(pair_u)
    row_of_u = np.full(units.n, -1, dtype=np.int64)
    row_of_u[has] = np.arange(has.size)
    add(r0 + row_of_u[pair_u], np.arange(n_x), np.ones(n_x))
    rlb.append(np.full(has.size, -np.inf))
    rub.append(np.ones(has.size))
    r0 += has.size
    # share definition rows: y[b,t] - sum_u pp[u,t] x[u,b] = 0
    for b in range(nb):
        cols = np.flatnonzero(pair_b == b)
        blockvals = units.pp[pair_u[cols]][:, model_t]  # [pair, t]
        pi, ti = np.nonzero(blockvals)
        add(r0 + b * n_t + ti, cols[pi], -blockvals[pi, ti])
        add(r0 + b * n_t + np.arange(n_t), ycol(b, np.arange(n_t)), np.ones(n_t))
    # share_offset[b, t]: pp already armed in block b by units held fixed (neighbourhoods)
    off = (np.zeros(nb * n_t) if share_offset is None
           else np.asarray(share_offset)[:, model_t].ravel())
    rlb.append(off)
    rub.append(off.copy())
    r0 += nb * n_t
    # band rows on the band set
    nbs = band_pos.size
    for b in range(nb):
        yc = ycol(b, band_pos)
        rr = r0 + b * 2 * nbs + np.arange(nbs)
        add(rr, yc, np.ones(nbs))
        add(rr, np.full(nbs, i_z), np.full(nbs, targets[b]))
        rr2 = rr + nbs
        add(rr2, yc, np.ones(nbs))
        add(rr2, np.full(nbs, i_z), np.full(nbs, -targets[b]))
        rlb += [np.full(nbs, lo[b]), np.full(nbs, -np.inf)]
        rub += [np.full(nbs, np.inf), np.full(nbs, hi[b])]
    r0 += 2 * nb * nbs
    # MAD rows
    n_m = mad_pos.size
    if need_mad:
        for b in range(nb):
            yc = ycol(b, mad_pos)
            ec = i_e0 + b * n_m + np.arange(n_m)
            rr = r0 + b * 2 * n_m + np.arange(n_m)
            add(rr, ec, np.ones(n_m))
            add(rr, yc, -np.ones(n_m))
            add(rr + n_m, ec, np.ones(n_m))
            add(rr + n_m, yc, np.ones(n_m))
            rlb += [np.full(n_m, -targets[b]), np.full(n_m, targets[b])]
            rub += [np.full(n_m, np.inf), np.full(n_m, np.inf)]
        r0 += 2 * nb * n_m
    # changes: sum_pairs x (cost[u,b] - cost[u,B]) + sum_u cost[u,B]
    change_coef = units.change_cost[pair_u, pair_b] - units.change_cost[pair_u, nb]
    change_const = float(units.change_cost[:, nb].sum()) + float(change_offset)
    if max_changes is not None:
        add(np.full(n_x, r0), np.arange(n_x), change_coef)
        rlb.append(np.array([-np.inf]))
        rub.append(np.array([max_changes - change_const]))
        r0 += 1
    if mad_cap is not None and need_mad and n_e:
        add(np.full(n_e, r0), i_e0 + np.arange(n_e), np.full(n_e, 1.0 / n_e))
        rlb.append(np.array([-np.inf]))
        rub.append(np.array([mad_cap]))
        r0 += 1
    # armed-count caps: sum over masked units of sum_b x[u,b] <= cap
    for (mask, cap) in armed_caps:
        cols = np.flatnonzero(mask[pair_u])
        add(np.full(cols.size, r0), cols, np.ones(cols.size))
        rlb.append(np.array([-np.inf]))
        rub.append(np.array([float(cap)]))
        r0 += 1
    # substation share rows: sum_u (mask_u - cap) pp[u,t] x[u,b] <= 0
    for (b, tpos, mask, cap) in substation_rows:
        cols = np.flatnonzero(pair_b == b)
        coef = (mask[pair_u[cols]].astype(float) - cap) * units.pp[pair_u[cols], tpos]
        add(np.full(cols.size, r0), cols, coef)
        rlb.append(np.array([-np.inf]))
        rub.append(np.array([0.0]))
        r0 += 1

    A = sparse.csr_matrix((np.concatenate(rows_v), (np.concatenate(rows_r),
                                                     np.concatenate(rows_c))),
                          shape=(r0, n_var))
    lb = np.full(n_var, -np.inf)
    ub = np.full(n_var, np.inf)
    lb[:n_x], ub[:n_x] = 0.0, 1.0
    lb[i_z] = 0.0
    if z_cap is not None:
        ub[i_z] = z_cap
    lb[i_e0:] = 0.0
    integral = np.zeros(n_var, dtype=bool)
    integral[:n_x] = True
    c = np.zeros(n_var)
    offset = 0.0
    if objective == "worst":
        c[i_z] = 1.0
    elif objective == "mad":
        c[i_e0:] = 1.0 / max(n_e, 1)
    elif objective == "changes":
        c[:n_x] = change_coef
        offset = change_const
    elif objective == "armed":
        c[:n_x] = np.asarray(armed_cost, dtype=float)[pair_u]
    else:  # pragma: no cover
        raise ValueError(objective)
    arrays = MilpArrays(c, A, np.concatenate(rlb), np.concatenate(rub), lb, ub, integral,
                        offset)
    return AllocationModel(arrays, pair_u, pair_b, i_z, band_set, mad_set, i_e0, n_e,
                           change_coef, change_const)


def start_vector(model: AllocationModel, units: Units, option: np.ndarray,
                 targets: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                 share_offset: np.ndarray | None = None) -> np.ndarray:
    """A full variable vector for a given unit assignment (for warm starts): x from the
    assignment, y from the shares, z and e at their smallest feasible values."""
    a = model.arrays
    v = np.zeros(a.c.size)
    nb = units.n_blocks
    n_x = model.pair_u.size
    v[:n_x] = model.x_from_option(option, nb)
    # the share-definition rows hold y; recover y = sum pp x via the matrix
    share = np.zeros((nb, units.pp.shape[1])) if share_offset is None else \
        np.array(share_offset, dtype=float)
    for b in range(nb):
        sel = option == b
        if sel.any():
            share[b] += units.pp[sel].sum(axis=0)
    need_mad = model.n_e > 0
    model_t = np.union1d(model.band_set, model.mad_set if need_mad else
                         np.array([], dtype=np.intp))
    n_t = model_t.size
    i_y0 = model.i_z + 1
    for b in range(nb):
        v[i_y0 + b * n_t: i_y0 + (b + 1) * n_t] = share[b, model_t]
    sb = share[:, model.band_set]
    viol = np.maximum(np.maximum(lo[:, None] - sb, sb - hi[:, None]), 0.0) / targets[:, None]
    v[model.i_z] = float(viol.max(initial=0.0))
    if need_mad:
        sm = share[:, model.mad_set]
        v[model.i_e0:model.i_e0 + model.n_e] = np.abs(sm - targets[:, None]).ravel()
    return v
