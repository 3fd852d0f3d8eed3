"""The fewest switching operations for a field plan: an exact MILP over the blocks the
remote-settable relays take in each period, the other relays held as planned.

Given the expanded units of :mod:`allocator.plan.switched` (one *period unit* per
remote-settable unit and period, its ``pp`` masked to its period's columns) and an option
vector whose fixed units are held, the model is

* ``x[k, b]`` binary for every period unit k and allowed block b (Σ_b x[k, b] ≤ 1; none =
  unarmed);
* ``z`` ≥ 0, the worst band violation relative to target (as in :mod:`allocator.plan.model`):
  ``lo_b ≤ F[b, t] + Σ_k pp[k, t] x[k, b] + target_b z`` and
  ``F[b, t] + Σ_k pp[k, t] x[k, b] − target_b z ≤ hi_b`` on the modelled columns t, with
  ``F`` the shares of the held units;
* ``d[u, p, q]`` ≥ |x[(u, p), b] − x[(u, q), b]| for every block b and period pair p < q: 1
  when unit u's blocks differ between p and q;
* switching operations ``Σ (N[p, q] + N[q, p]) d[u, p, q]`` (N from the study calendar,
  :func:`allocator.plan.switched.transitions`);
* the caps: operations ≤ ``max_switch_operations_per_year``; ``s[u] ≥ d[u, p, q]`` and
  ``Σ_u size_u s[u] ≤ max_switched_feeders``.

With a cap, the first solve minimises z under the caps (the best worst violation the caps
allow); then the operations are minimised with z held at the best found.  Columns come in
rounds: each block's tightest columns per period first, then every column the solution
breaks, until the solution holds on every column.  The answer is proven optimal for the
field plan when the last solve is optimal and it holds on every column (a model on fewer
columns is a relaxation).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from .heuristic import Band
from .model import MilpArrays
from .solvers import solve

#: columns added per block and round
ROUND_COLUMNS = 40
#: relative violation tolerance when checking a solution on every column
Z_TOL = 1e-9


@dataclass(frozen=True)
class OpsResult:
    option: np.ndarray  # the expanded option vector
    z: float  # worst relative violation on every column
    proven: bool  # fewest operations for the field plan, proven
    rounds: int
    status: str


@dataclass(frozen=True)
class _Vars:
    pair_k: np.ndarray  # [pair] period unit
    pair_b: np.ndarray  # [pair] block
    i_z: int
    d_u: np.ndarray  # [d] unit
    d_p: np.ndarray  # [d] period p
    d_q: np.ndarray  # [d] period q > p
    i_s0: int  # first s[u] (feeder cap), or -1
    s_units: np.ndarray
    n: int


def _variables(ex, with_s: bool) -> _Vars:
    per = np.flatnonzero(ex.period >= 0)
    allowed = ex.units.allowed[per]
    pk, pb = np.nonzero(allowed)
    pair_k = per[pk]
    units = np.unique(ex.base[per])
    pp_, qq_ = np.triu_indices(ex.n_periods, k=1)
    d_u = np.repeat(units, pp_.size)
    d_p, d_q = np.tile(pp_, units.size), np.tile(qq_, units.size)
    i_z = pair_k.size
    n = i_z + 1 + d_u.size
    i_s0 = n if with_s else -1
    return _Vars(pair_k, pb, i_z, d_u, d_p, d_q, i_s0, units,
                 n + (units.size if with_s else 0))


def _pair_index(v: _Vars, ex, nb: int) -> np.ndarray:
    """``[period unit, block]`` position of x[k, b] among the variables, −1 if not allowed."""
    out = np.full((ex.period.size, nb), -1, dtype=np.intp)
    out[v.pair_k, v.pair_b] = np.arange(v.pair_k.size)
    return out


def _copies(ex) -> np.ndarray:
    """``[unit, period]`` the period unit of each switchable unit and period (−1: none)."""
    n_u = int(ex.base.max()) + 1
    out = np.full((n_u, ex.n_periods), -1, dtype=np.intp)
    per = ex.period >= 0
    out[ex.base[per], ex.period[per]] = np.flatnonzero(per)
    return out


def _d_triplets(v: _Vars, ex, nb: int):
    """Rows d − x[(u,p),b] + x[(u,q),b] ≥ 0 and d + x[(u,p),b] − x[(u,q),b] ≥ 0 for every
    d variable and block b both period units may take: (n_rows, rows, cols, vals)."""
    pos = _pair_index(v, ex, nb)
    cp = _copies(ex)
    ip = pos[cp[v.d_u, v.d_p]]  # [d, block]
    iq = pos[cp[v.d_u, v.d_q]]
    j, b = np.nonzero((ip >= 0) & (iq >= 0))
    n = j.size
    d_col = v.i_z + 1 + j
    rows = np.concatenate([np.tile(np.arange(n), 3), np.tile(np.arange(n, 2 * n), 3)])
    cols = np.concatenate([d_col, ip[j, b], iq[j, b]] * 2)
    ones = np.ones(n)
    vals = np.concatenate([ones, -ones, ones, ones, ones, -ones])
    return 2 * n, rows, cols, vals


def _band_triplets(v: _Vars, ex, fixed_s: np.ndarray, band: Band, cols_t: np.ndarray,
                   col_period: np.ndarray):
    """Two rows per (block, modelled column), lower then upper: ``lo ≤ F + Σ pp x + tg z``
    and ``F + Σ pp x − tg z ≤ hi``: (n_rows, rows, cols, vals, row_lb, row_ub)."""
    nb, n_t = fixed_s.shape[0], cols_t.size
    per_k = ex.period[v.pair_k]
    coef = ex.units.pp[v.pair_k][:, cols_t].astype(float)  # [pair, column]
    coef *= per_k[:, None] == col_period[cols_t][None, :]
    pi, tj = np.nonzero(coef)
    row_lo = v.pair_b[pi] * n_t + tj  # lower row of (block, column)
    rows = np.concatenate([row_lo, row_lo + nb * n_t])
    cols = np.concatenate([pi, pi])
    vals = np.concatenate([coef[pi, tj]] * 2)
    r_b = np.repeat(np.arange(nb), n_t)
    z_rows = np.arange(2 * nb * n_t)
    z_vals = np.concatenate([band.scale[r_b], -band.scale[r_b]])
    f = fixed_s[:, cols_t].reshape(-1)
    lb = np.concatenate([band.lo[r_b] - f, np.full(nb * n_t, -np.inf)])
    ub = np.concatenate([np.full(nb * n_t, np.inf), band.hi[r_b] - f])
    return (2 * nb * n_t, np.concatenate([rows, z_rows]),
            np.concatenate([cols, np.full(z_rows.size, v.i_z)]),
            np.concatenate([vals, z_vals]), lb, ub)


def _cap_triplets(v: _Vars, weights, caps, sizes):
    """The operations cap, the s[u] ≥ d rows and the feeder cap: (n, rows, cols, vals, lb,
    ub)."""
    d0, n_d = v.i_z + 1, v.d_u.size
    rows, cols, vals, lb, ub = [], [], [], [], []
    r = 0
    if caps.get("max_switch_operations_per_year") is not None:
        rows.append(np.zeros(n_d, dtype=np.intp))
        cols.append(np.arange(d0, d0 + n_d))
        vals.append(weights)
        lb.append([-np.inf])
        ub.append([float(caps["max_switch_operations_per_year"])])
        r = 1
    if v.i_s0 >= 0:
        where = np.searchsorted(v.s_units, v.d_u)
        rows += [r + np.arange(n_d)] * 2
        cols += [v.i_s0 + where, d0 + np.arange(n_d)]
        vals += [np.ones(n_d), -np.ones(n_d)]
        lb.append(np.zeros(n_d))
        ub.append(np.full(n_d, np.inf))
        r += n_d
        rows.append(np.full(v.s_units.size, r))
        cols.append(v.i_s0 + np.arange(v.s_units.size))
        vals.append(sizes[v.s_units].astype(float))
        lb.append([-np.inf])
        ub.append([float(caps["max_switched_feeders"])])
        r += 1
    cat = lambda xs, dt=float: np.concatenate(xs).astype(dt) if xs else np.zeros(0, dt)  # noqa: E731
    return r, cat(rows, np.intp), cat(cols, np.intp), cat(vals), cat(lb), cat(ub)


def _arrays(v: _Vars, ex, fixed_s, band, cols_t, col_period, weights, caps, sizes,
            objective: str, z_cap: float) -> MilpArrays:
    nb = fixed_s.shape[0]
    parts = [_band_triplets(v, ex, fixed_s, band, cols_t, col_period)]
    ks = np.unique(v.pair_k)  # one block per period unit
    parts.append((ks.size, np.searchsorted(ks, v.pair_k), np.arange(v.pair_k.size),
                  np.ones(v.pair_k.size), np.full(ks.size, -np.inf), np.ones(ks.size)))
    n_d, dr, dc, dv = _d_triplets(v, ex, nb)
    parts.append((n_d, dr, dc, dv, np.zeros(n_d), np.full(n_d, np.inf)))
    parts.append(_cap_triplets(v, weights, caps, sizes))
    off, rows, cols, vals, lb, ub = 0, [], [], [], [], []
    for n, r, c, x, lo, hi in parts:
        rows.append(np.asarray(r) + off)
        cols.append(c)
        vals.append(x)
        lb.append(lo)
        ub.append(hi)
        off += n
    d0 = v.i_z + 1
    c = np.zeros(v.n)
    if objective == "z":
        c[v.i_z] = 1.0
    else:
        c[d0:d0 + v.d_u.size] = weights
    hi_v = np.ones(v.n)
    hi_v[v.i_z] = z_cap
    integral = np.ones(v.n, dtype=bool)
    integral[v.i_z] = False
    integral[d0:d0 + v.d_u.size] = False  # integral at any optimum (x binary)
    A = sparse.csr_matrix((np.concatenate(vals), (np.concatenate(rows),
                                                  np.concatenate(cols))), shape=(off, v.n))
    return MilpArrays(c, A, np.concatenate(lb).astype(float),
                      np.concatenate(ub).astype(float), np.zeros(v.n), hi_v, integral)


def _start(v: _Vars, ex, opt: np.ndarray, z: float) -> np.ndarray:
    """The variable vector of an option (a feasible start for the operations stage)."""
    x = np.zeros(v.n)
    x[: v.pair_k.size] = opt[v.pair_k] == v.pair_b
    x[v.i_z] = z
    cp = _copies(ex)
    d = opt[cp[v.d_u, v.d_p]] != opt[cp[v.d_u, v.d_q]]
    x[v.i_z + 1:v.i_z + 1 + d.size] = d
    if v.i_s0 >= 0:
        x[v.i_s0 + np.searchsorted(v.s_units, v.d_u[d])] = 1.0
    return x


def _option(v: _Vars, ex, x: np.ndarray, base_opt: np.ndarray, nb: int) -> np.ndarray:
    opt = base_opt.copy()
    per = np.flatnonzero(ex.period >= 0)
    opt[per] = nb
    on = x[: v.pair_k.size] > 0.5
    opt[v.pair_k[on]] = v.pair_b[on]
    return opt


def _shares(ex, opt: np.ndarray, nb: int) -> np.ndarray:
    pp = ex.units.pp
    s = np.zeros((nb, pp.shape[1]))
    for b in range(nb):
        s[b] = pp[opt == b].sum(axis=0, dtype=np.float64)
    return s


def _violations(s: np.ndarray, band: Band) -> np.ndarray:
    return np.maximum(np.maximum(band.lo[:, None] - s, s - band.hi[:, None]), 0.0) / \
        band.scale[:, None]


def _first_columns(s: np.ndarray, col_period: np.ndarray, n_p: int) -> np.ndarray:
    """Each block's lowest and highest share column in each period."""
    out = []
    for p in range(n_p):
        c = np.flatnonzero(col_period == p)
        if c.size:
            out += [c[np.argmin(s[:, c], axis=1)], c[np.argmax(s[:, c], axis=1)]]
    return np.unique(np.concatenate(out)) if out else np.zeros(0, dtype=np.intp)


def _round(v, ex, fixed_s, band, col_period, weights, caps, sizes, objective, z_cap,
           opt0, nb, deadline, solver, seed):
    """Solve with column rounds until the solution holds on every column: (option, its z on
    every column, proven, rounds, status), option None when no solution came in time.
    ``objective`` "z": the held level is the model's own z; "ops": ``z_cap``."""
    cols = _first_columns(_shares(ex, opt0, nb), col_period, ex.n_periods)
    rounds = 0
    while time.perf_counter() < deadline:
        rounds += 1
        a = _arrays(v, ex, fixed_s, band, cols, col_period, weights, caps, sizes, objective,
                    z_cap)
        start = None
        if objective == "ops" and all(c is None for c in caps.values()):
            # the planner's own schedule holds z_cap (and no cap binds it): an incumbent
            z0 = float(_violations(_shares(ex, opt0, nb), band).max(initial=0.0))
            start = _start(v, ex, opt0, min(z0, z_cap))
        out = solve(a, solver, max(0.5, deadline - time.perf_counter()), 0.0, start=start,
                    seed=seed)
        if out.x is None:
            return None, np.inf, False, rounds, out.status
        opt = _option(v, ex, out.x, opt0, nb)
        viol = _violations(_shares(ex, opt, nb), band)
        held = float(out.x[v.i_z]) if objective == "z" else z_cap
        z = float(viol.max(initial=0.0))
        if z <= held + Z_TOL:
            return opt, z, out.status == "optimal", rounds, out.status
        worst = np.argsort(viol, axis=1)[:, -ROUND_COLUMNS:]
        bad = np.take_along_axis(viol, worst, 1) > held + Z_TOL
        new = np.setdiff1d(np.unique(worst[bad]), cols)
        if new.size == 0:
            return None, np.inf, False, rounds, "stalled"
        cols = np.union1d(cols, new)
    return None, np.inf, False, rounds, "time_limit"


def fewest_operations(ex, option: np.ndarray, band: Band, n_trans: np.ndarray,
                      col_period: np.ndarray, z_cap: float, caps: dict, sizes: np.ndarray,
                      deadline: float, solver: str = "highs", seed: int = 0
                      ) -> OpsResult | None:
    """The fewest switching operations holding ``z_cap`` (and, with caps, the best worst
    violation they allow first); None when no answer came within the ``deadline``."""
    nb = ex.units.n_blocks
    opt0 = np.asarray(option, dtype=np.intp)
    if not (ex.period >= 0).any():
        return None
    fixed = (ex.period < 0)
    fixed_s = _shares(ex, np.where(fixed, opt0, nb), nb)
    v = _variables(ex, caps.get("max_switched_feeders") is not None)
    w = (n_trans[v.d_p, v.d_q] + n_trans[v.d_q, v.d_p]).astype(float)
    capped = any(caps.get(k) is not None for k in ("max_switch_operations_per_year",
                                                  "max_switched_feeders"))
    rounds_z = 0
    if capped:
        got = _round(v, ex, fixed_s, band, col_period, w, caps, sizes, "z", np.inf, opt0, nb,
                     deadline, solver, seed)
        if got[0] is None:
            return None
        z_cap, rounds_z = max(got[1], 0.0) + Z_TOL, got[3]
    opt, z, proven, rounds, status = _round(v, ex, fixed_s, band, col_period, w, caps,
                                            sizes, "ops", z_cap, opt0, nb, deadline,
                                            solver, seed)
    if opt is None:
        return None
    return OpsResult(opt, z, proven, rounds + rounds_z, status)


__all__ = ["fewest_operations", "OpsResult"]
