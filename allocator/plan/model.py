"""The allocation MILP as arrays (rows built from numpy slices, no loop per coefficient).

Variables (in this order):

* ``x[u, b]`` binary, one per *allowed* (unit, block) pair — unit u trips in block b;
* ``z`` ≥ 0 — worst band violation relative to target over the modelled columns;
* ``y[b, t]`` free — block b's share of demand (pp) at modelled column t (not in the direct
  form, see below);
* ``e[b, r]`` ≥ 0 — absolute deviation from target at the MAD sample columns r.

Rows:

* each unit in at most one block: ``Σ_b x[u, b] ≤ 1``;
* share definition: ``y[b, t] − Σ_u pp[u, t] x[u, b] = off[b, t]``;
* band (t in the band set S): ``y + target_b·z ≥ min_b`` and ``y − target_b·z ≤ max_b``
  (so ``z ≥ max(min_b − y, y − max_b, 0) / target_b``);
* MAD (r in the sample R): ``e ≥ y − target_b`` and ``e ≥ target_b − y``;
* optional: ``changes ≤ N``; a cap on z (later levels); a cap on the MAD; caps on how many
  units of a set are armed; the substation-share rows.

The *direct form* is used when z is capped and nothing needs y (objectives ``changes`` and
``armed`` without a deviation cap): one ranged row per (block, column),
``min_b − target_b·z_cap − off ≤ Σ_u pp[u, t] x[u, b] ≤ max_b + target_b·z_cap − off``, with
no y variables and no share-definition rows — the same feasible set in x with a third of the
rows, which HiGHS solves much faster.

Objectives on the same rows (see :mod:`allocator.plan.solve`): ``z``; the mean of e; the
number of relays changed; the number of armed units of a set.
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
    band_set: np.ndarray  # positions into Units' columns
    mad_set: np.ndarray
    i_e0: int
    n_e: int
    change_coef: np.ndarray  # per pair
    change_const: float
    model_t: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    direct: bool = False  # no y variables (see the module docstring)

    def x_from_option(self, option: np.ndarray, n_blocks: int) -> np.ndarray:
        return (option[self.pair_u] == self.pair_b).astype(float)

    def option_from_x(self, v: np.ndarray, n_units: int, n_blocks: int) -> np.ndarray:
        xs = v[: self.pair_u.size]
        opt = np.full(n_units, n_blocks, dtype=np.intp)
        on = xs > 0.5
        opt[self.pair_u[on]] = self.pair_b[on]
        return opt


class _Rows:
    """Row triplets and bounds collected from numpy slices."""

    def __init__(self):
        self.r, self.c, self.v, self.lb, self.ub = [], [], [], [], []
        self.n = 0

    def add(self, r, c, v) -> None:
        self.r.append(np.asarray(r, dtype=np.int64))
        self.c.append(np.asarray(c, dtype=np.int64))
        self.v.append(np.asarray(v, dtype=float))

    def bounds(self, lb, ub) -> None:
        lb, ub = np.atleast_1d(np.asarray(lb, float)), np.atleast_1d(np.asarray(ub, float))
        self.lb.append(lb)
        self.ub.append(ub)
        self.n += lb.size

    def matrix(self, n_var: int) -> sparse.csr_matrix:
        return sparse.csr_matrix((np.concatenate(self.v), (np.concatenate(self.r),
                                                           np.concatenate(self.c))),
                                 shape=(self.n, n_var))


def _block_pp(pp_t: np.ndarray, pair_u, pair_b, b: int):
    """Non-zeros of Σ_u pp[u, t] x[u, b] over the model columns: (pair cols, t pos, value).
    ``pp_t`` is ``pp[:, model_t]`` (made once per model; never a copy of full rows)."""
    cols = np.flatnonzero(pair_b == b)
    vals = pp_t[pair_u[cols]]  # [pair, t]
    pi, ti = np.nonzero(vals)
    return cols[pi], ti, vals[pi, ti].astype(float)


def _one_block_rows(rows: _Rows, units: Units, pair_u) -> None:
    has = np.unique(pair_u)
    row_of_u = np.full(units.n, -1, dtype=np.int64)
    row_of_u[has] = np.arange(has.size)
    rows.add(rows.n + row_of_u[pair_u], np.arange(pair_u.size), np.ones(pair_u.size))
    rows.bounds(np.full(has.size, -np.inf), np.ones(has.size))


def _direct_band_rows(rows: _Rows, units, pair_u, pair_b, targets, lo, hi, z_cap, model_t,
                      off) -> None:
    """One ranged row per (block, column): the band widened by target·z_cap."""
    nb, n_t = units.n_blocks, model_t.size
    pp_t = units.pp[:, model_t]
    for b in range(nb):
        pc, ti, v = _block_pp(pp_t, pair_u, pair_b, b)
        rows.add(rows.n + b * n_t + ti, pc, v)
    lo_r = np.repeat(lo - targets * z_cap, n_t) - off
    hi_r = np.repeat(hi + targets * z_cap, n_t) - off
    rows.bounds(lo_r, hi_r)


def _share_and_band_rows(rows: _Rows, units, pair_u, pair_b, targets, lo, hi, model_t,
                         band_pos, i_z, ycol, off) -> None:
    """y[b, t] = Σ pp x + off, then the two band rows per (block, band column) with z."""
    nb, n_t = units.n_blocks, model_t.size
    pp_t = units.pp[:, model_t]
    for b in range(nb):
        pc, ti, v = _block_pp(pp_t, pair_u, pair_b, b)
        rows.add(rows.n + b * n_t + ti, pc, -v)
        rows.add(rows.n + b * n_t + np.arange(n_t), ycol(b, np.arange(n_t)), np.ones(n_t))
    rows.bounds(off, off.copy())
    nbs = band_pos.size
    for b in range(nb):
        yc = ycol(b, band_pos)
        rr = rows.n + np.arange(nbs)
        rows.add(rr, yc, np.ones(nbs))
        rows.add(rr, np.full(nbs, i_z), np.full(nbs, targets[b]))
        rows.bounds(np.full(nbs, lo[b]), np.full(nbs, np.inf))
        rr = rows.n + np.arange(nbs)
        rows.add(rr, yc, np.ones(nbs))
        rows.add(rr, np.full(nbs, i_z), np.full(nbs, -targets[b]))
        rows.bounds(np.full(nbs, -np.inf), np.full(nbs, hi[b]))


def _mad_rows(rows: _Rows, nb, targets, mad_pos, i_e0, ycol) -> None:
    n_m = mad_pos.size
    for b in range(nb):
        yc = ycol(b, mad_pos)
        ec = i_e0 + b * n_m + np.arange(n_m)
        rr = rows.n + np.arange(n_m)
        rows.add(rr, ec, np.ones(n_m))
        rows.add(rr, yc, -np.ones(n_m))
        rows.bounds(np.full(n_m, -targets[b]), np.full(n_m, np.inf))
        rr = rows.n + np.arange(n_m)
        rows.add(rr, ec, np.ones(n_m))
        rows.add(rr, yc, np.ones(n_m))
        rows.bounds(np.full(n_m, targets[b]), np.full(n_m, np.inf))


def _cap_rows(rows: _Rows, units, pair_u, pair_b, change_coef, change_const, max_changes,
              mad_cap, i_e0, n_e, armed_caps, substation_rows) -> None:
    """changes ≤ N; mean e ≤ mad_cap; armed counts; substation shares."""
    n_x = pair_u.size
    if max_changes is not None:
        rows.add(np.full(n_x, rows.n), np.arange(n_x), change_coef)
        rows.bounds(-np.inf, max_changes - change_const)
    if mad_cap is not None and n_e:
        rows.add(np.full(n_e, rows.n), i_e0 + np.arange(n_e), np.full(n_e, 1.0 / n_e))
        rows.bounds(-np.inf, mad_cap)
    for (mask, cap) in armed_caps:
        cols = np.flatnonzero(mask[pair_u])
        rows.add(np.full(cols.size, rows.n), cols, np.ones(cols.size))
        rows.bounds(-np.inf, float(cap))
    # substation share rows: sum_u (mask_u - cap) pp[u,t] x[u,b] <= 0
    for (b, tpos, mask, cap) in substation_rows:
        cols = np.flatnonzero(pair_b == b)
        coef = (mask[pair_u[cols]].astype(float) - cap) * units.pp[pair_u[cols], tpos].astype(
            float)
        rows.add(np.full(cols.size, rows.n), cols, coef)
        rows.bounds(-np.inf, 0.0)


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
    ``share_offset[b, column]``: pp armed in block b by units held fixed (neighbourhoods).
    The deviation rows are built for ``"mad"`` and whenever ``mad_cap`` is given."""
    nb = units.n_blocks
    pair_u, pair_b = np.nonzero(units.allowed)
    n_x = pair_u.size
    need_mad = objective == "mad" or mad_cap is not None
    direct = objective in ("changes", "armed") and z_cap is not None and not need_mad
    model_t = np.union1d(band_set, mad_set) if need_mad else np.unique(band_set)
    n_t = model_t.size
    i_z, i_y0 = n_x, n_x + 1
    n_y = 0 if direct else nb * n_t
    mad_pos = np.searchsorted(model_t, mad_set) if need_mad else np.array([], dtype=np.intp)
    n_e = nb * mad_pos.size if need_mad else 0
    i_e0 = i_y0 + n_y
    n_var = i_e0 + n_e
    off = (np.zeros(nb * n_t) if share_offset is None
           else np.asarray(share_offset)[:, model_t].ravel())

    def ycol(b, pos):
        return i_y0 + b * n_t + pos

    rows = _Rows()
    _one_block_rows(rows, units, pair_u)
    if direct:
        _direct_band_rows(rows, units, pair_u, pair_b, targets, lo, hi, z_cap, model_t, off)
    else:
        _share_and_band_rows(rows, units, pair_u, pair_b, targets, lo, hi, model_t,
                             np.searchsorted(model_t, band_set), i_z, ycol, off)
    if need_mad:
        _mad_rows(rows, nb, targets, mad_pos, i_e0, ycol)
    change_coef = units.change_cost[pair_u, pair_b] - units.change_cost[pair_u, nb]
    change_const = float(units.change_cost[:, nb].sum()) + float(change_offset)
    _cap_rows(rows, units, pair_u, pair_b, change_coef, change_const, max_changes, mad_cap,
              i_e0, n_e, armed_caps, substation_rows)
    arrays = _arrays(rows, n_var, n_x, i_z, i_e0, n_e, z_cap, objective, change_coef,
                     change_const, armed_cost, pair_u)
    return AllocationModel(arrays, pair_u, pair_b, i_z, band_set, mad_set, i_e0, n_e,
                           change_coef, change_const, model_t, direct)


def _arrays(rows: _Rows, n_var, n_x, i_z, i_e0, n_e, z_cap, objective, change_coef,
            change_const, armed_cost, pair_u) -> MilpArrays:
    """Variable bounds, integrality and the objective vector."""
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
    return MilpArrays(c, rows.matrix(n_var), np.concatenate(rows.lb),
                      np.concatenate(rows.ub), lb, ub, integral, offset)


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
    model_t = model.model_t
    share = np.zeros((nb, model_t.size)) if share_offset is None else \
        np.array(np.asarray(share_offset)[:, model_t], dtype=float)
    pp_t = units.pp[:, model_t]
    for b in range(nb):
        sel = option == b
        if sel.any():
            share[b] += pp_t[sel].sum(axis=0, dtype=float)
    band_pos = np.searchsorted(model_t, model.band_set)
    sb = share[:, band_pos]
    viol = np.maximum(np.maximum(lo[:, None] - sb, sb - hi[:, None]), 0.0) / targets[:, None]
    v[model.i_z] = float(viol.max(initial=0.0))
    if model.direct:
        v[model.i_z] = 0.0
        return v
    i_y0 = model.i_z + 1
    v[i_y0:i_y0 + nb * model_t.size] = share.ravel()
    if model.n_e > 0:
        sm = share[:, np.searchsorted(model_t, model.mad_set)]
        v[model.i_e0:model.i_e0 + model.n_e] = np.abs(sm - targets[:, None]).ravel()
    return v
