"""A fast start for the MILP: greedy fill, then unit-by-unit improvement sweeps.

Both work on a *working set* of intervals (the ones that matter: worst and extreme ones, plus
a systematic sample) and are re-verified on every interval of the year between sweeps; the
working set grows with the intervals the full check shows to be worst.  Each step is
vectorized over blocks and intervals; the loop is over units only.

Score of a share matrix ``s[b, t]`` (pp), smaller is better, lexicographic in spirit:
``1e4 · worst + 1e2 · mean violation + mean |s − target| / target + 1e-4 · changes``, where
violations are relative to each block's target as in the planner's first objective.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .units import Units, weighted_rows

W_WORST, W_VIOL, W_MAD, W_CHANGE = 1e4, 1e2, 1.0, 1e-4
#: score weights (worst, mean violation, deviation, changes): closest to target first, or
#: fewest changes first (one relay change weighs as much as a 1e-4 worst violation)
WEIGHTS = {"mad": (W_WORST, W_VIOL, W_MAD, W_CHANGE), "changes": (1e4, 1e2, 1e-3, 1.0)}


@dataclass(frozen=True)
class Band:
    target: np.ndarray  # [block] pp
    lo: np.ndarray
    hi: np.ndarray

    @property
    def scale(self) -> np.ndarray:
        return np.where(self.target > 0, self.target, 1.0)


#: plans kept in a Units' share cache; a plan within a quarter of the units of a cached one
#: is evaluated by updating that one's shares with the units that differ
SHARE_CACHE_SIZE = 4
SHARE_CACHE_MAX_STEPS = 64  # incremental updates before a fresh product (bounds drift)


def _onehot(units: Units, option: np.ndarray) -> np.ndarray:
    nb = units.n_blocks
    onehot = np.zeros((nb, units.n))
    armed = option < nb
    onehot[option[armed], np.flatnonzero(armed)] = 1.0
    return onehot


def _updated(units: Units, s: np.ndarray, old: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Shares of ``new`` from those of ``old``: each differing unit's row leaves its old
    block and joins its new one (float64 sums of the few rows that move)."""
    nb = units.n_blocks
    out = s.copy()
    diff = np.flatnonzero(old != new)
    rows = units.pp[diff].astype(np.float64)
    for b in range(nb):
        leave, join = old[diff] == b, new[diff] == b
        if leave.any():
            out[b] -= rows[leave].sum(axis=0)
        if join.any():
            out[b] += rows[join].sum(axis=0)
    return out


def shares(units: Units, option: np.ndarray, cols: np.ndarray | None = None) -> np.ndarray:
    """``[block, column]`` shares (pp) of a unit assignment on ``cols`` (default all).

    Full-width results are cached per ``units``: a plan close to a recent one (most
    evaluations in the searches are) costs only the rows of the units that differ."""
    option = np.asarray(option)
    if cols is not None:
        return weighted_rows(units.pp, _onehot(units, option), cols)
    cache = units.share_cache
    best = None
    for k, (opt, s, steps) in enumerate(cache):
        d = int(np.count_nonzero(opt != option))
        if d == 0:
            return s.copy()
        if d <= units.n // 4 and steps < SHARE_CACHE_MAX_STEPS and (best is None or d < best[0]):
            best = (d, k)
    if best is None:
        s, steps = weighted_rows(units.pp, _onehot(units, option)), 0
    else:
        opt, s0, steps = cache[best[1]]
        s, steps = _updated(units, s0, opt, option), steps + 1
    cache.insert(0, (option.copy(), s, steps))
    del cache[SHARE_CACHE_SIZE:]
    return s.copy()


def violation_rel(s: np.ndarray, band: Band) -> np.ndarray:
    """Band violation relative to target ``[block, interval]`` (0 inside the band)."""
    return np.maximum(np.maximum(band.lo[:, None] - s, s - band.hi[:, None]), 0.0) / \
        band.scale[:, None]


def evaluate(units: Units, option: np.ndarray, band: Band) -> tuple[float, float, float]:
    """Full-year (worst relative violation, MAD in pp, changes) of a unit assignment."""
    s = shares(units, option)
    worst = float(violation_rel(s, band).max(initial=0.0))
    mad = float(np.abs(s - band.target[:, None]).mean()) if s.size else 0.0
    changes = float(units.change_cost[np.arange(units.n), option].sum())
    return worst, mad, changes


def _row_terms(s: np.ndarray, band_rows: Band, idx: np.ndarray):
    """Per-row (worst, mean violation, mad) for rows ``s[k, :]`` belonging to blocks idx."""
    lo = band_rows.lo[idx][:, None]
    hi = band_rows.hi[idx][:, None]
    sc = band_rows.scale[idx][:, None]
    v = np.maximum(np.maximum(lo - s, s - hi), 0.0) / sc
    return v.max(axis=1), v.mean(axis=1), (np.abs(s - band_rows.target[idx][:, None]) / sc
                                           ).mean(axis=1)


def _total(worst_rows, viol_rows, mad_rows, changes, nb, w=WEIGHTS["mad"]):
    return (w[0] * worst_rows.max(axis=-1) + w[1] * viol_rows.sum(axis=-1) / nb
            + w[2] * mad_rows.sum(axis=-1) / nb + w[3] * changes)


def greedy(units: Units, band: Band, cols: np.ndarray, order: np.ndarray,
           deadline: float = float("inf")) -> np.ndarray:
    """Add units one at a time (in ``order``) to the option that lowers the score most
    (units not reached by the deadline stay unarmed)."""
    nb = units.n_blocks
    option = np.full(units.n, nb, dtype=np.intp)
    s = np.zeros((nb, cols.size))
    all_b = np.arange(nb)
    w, v, m = _row_terms(s, band, all_b)
    changes = float(units.change_cost[:, nb].sum())
    for u in order:
        if time.perf_counter() > deadline:
            break
        allowed = np.flatnonzero(units.allowed[u])
        if allowed.size == 0:
            continue
        p = units.pp[u, cols]
        cand = s[allowed] + p[None, :]
        cw, cv, cm = _row_terms(cand, band, allowed)
        base = _total(w, v, m, changes, nb)
        scores = np.empty(allowed.size)
        for k, b in enumerate(allowed):
            ww, vv, mm = w.copy(), v.copy(), m.copy()
            ww[b], vv[b], mm[b] = cw[k], cv[k], cm[k]
            dc = units.change_cost[u, b] - units.change_cost[u, nb]
            scores[k] = _total(ww, vv, mm, changes + dc, nb)
        k = int(np.argmin(scores))
        if scores[k] < base - 1e-12:
            b = allowed[k]
            option[u] = b
            s[b] = cand[k]
            w[b], v[b], m[b] = cw[k], cv[k], cm[k]
            changes += units.change_cost[u, b] - units.change_cost[u, nb]
    return option


def improve(units: Units, band: Band, cols: np.ndarray, option: np.ndarray,
            rng: np.random.Generator, deadline: float, max_sweeps: int = 50,
            max_changes: int | None = None, weights=WEIGHTS["mad"]) -> np.ndarray:
    """Unit-by-unit best-option sweeps on ``cols`` until no unit can improve the score."""
    nb = units.n_blocks
    option = option.copy()
    s = shares(units, option, cols)
    all_b = np.arange(nb)
    w, v, m = _row_terms(s, band, all_b)
    ar = np.arange(units.n)
    changes = float(units.change_cost[ar, option].sum())
    movable = np.flatnonzero(units.allowed.any(axis=1))
    for _ in range(max_sweeps):
        improved = False
        for u in rng.permutation(movable):
            if time.perf_counter() > deadline:
                return option
            p_opt = int(option[u])
            pu = units.pp[u, cols]
            cur = _total(w, v, m, changes, nb, weights)
            # rows after removing u from its block
            if p_opt < nb:
                s_p = s[p_opt] - pu
                rw, rv, rm = _row_terms(s_p[None, :], band, np.array([p_opt]))
            allowed = np.flatnonzero(units.allowed[u])
            cands = [q for q in list(allowed) + [nb] if q != p_opt]
            best, best_q, best_rows = cur, None, None
            add_rows = s[allowed] + pu[None, :]
            aw, av, am = _row_terms(add_rows, band, allowed)
            for q in cands:
                ww, vv, mm = w.copy(), v.copy(), m.copy()
                if p_opt < nb:
                    ww[p_opt], vv[p_opt], mm[p_opt] = rw[0], rv[0], rm[0]
                if q < nb:
                    k = int(np.searchsorted(allowed, q))
                    ww[q], vv[q], mm[q] = aw[k], av[k], am[k]
                dc = units.change_cost[u, q] - units.change_cost[u, p_opt]
                if max_changes is not None and changes + dc > max_changes + 1e-9:
                    continue
                sc = _total(ww, vv, mm, changes + dc, nb, weights)
                if sc < best - 1e-12:
                    best, best_q, best_rows = sc, q, (ww, vv, mm, dc)
            if best_q is not None:
                q = best_q
                if p_opt < nb:
                    s[p_opt] = s_p
                if q < nb:
                    s[q] = s[q] + pu
                w, v, m, dc = best_rows
                changes += dc
                option[u] = q
                improved = True
        if not improved:
            break
    return option


def worst_intervals(units: Units, option: np.ndarray, band: Band, k: int) -> np.ndarray:
    """The k worst intervals per block (by band violation, then by |deviation|)."""
    s = shares(units, option)
    v = violation_rel(s, band)
    dev = np.abs(s - band.target[:, None]) / band.scale[:, None]
    score = v * 1e3 + dev
    k = min(k, s.shape[1])
    idx = np.argpartition(-score, k - 1, axis=1)[:, :k]
    return np.unique(idx)


def systematic_sample(n_intervals: int, n_sample: int, step_hint: int = 13) -> np.ndarray:
    """Every k-th interval with k chosen coprime to 24 and 96 so the sample walks through
    every time of day (a stride that divides the day would see only a few hours)."""
    if n_sample >= n_intervals:
        return np.arange(n_intervals)
    k = max(1, n_intervals // n_sample)
    while k % 2 == 0 or k % 3 == 0:
        k += 1
    return np.arange(0, n_intervals, k)[:n_sample]


def heuristic_plan(units: Units, band: Band, seed: int, time_budget_s: float,
                   max_changes: int | None = None, n_work: int = 400,
                   start: np.ndarray | None = None, prefer: str = "mad"
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Greedy + sweeps with a growing working set.  Returns (option, working set).

    ``prefer`` "changes" (the fewest-changes order) starts from the current allocation,
    scores a relay change above the deviation, and ranks the candidates by (worst, changes,
    deviation); "mad" keeps the closest-to-target order."""
    t_end = time.perf_counter() + time_budget_s
    rng = np.random.default_rng(seed)
    n_t = units.pp.shape[1]
    cols = systematic_sample(n_t, n_work)
    # extremes: the intervals where the armable total is lowest and highest
    armable = units.allowed.any(axis=1)
    tot = weighted_rows(units.pp, armable[None, :].astype(float))[0]
    cols = np.union1d(cols, np.argsort(tot)[:20])
    order = np.argsort(-units.pp[:, cols].mean(axis=1), kind="stable")
    weights = WEIGHTS[prefer]
    cur = least_change_plan(units)
    candidates = [] if start is None else [lambda: start.copy()]
    if prefer == "changes":
        candidates.append(lambda: cur)
    if max_changes is None:
        candidates.append(lambda: greedy(units, band, cols, order, t_end))
    if prefer != "changes":
        candidates.append(lambda: cur)
    rank = (lambda k: (round(k[0], 9), k[2], k[1])) if prefer == "changes" else None
    best, best_key = None, None
    for i, make in enumerate(candidates):
        # each candidate gets an equal part of what is left, so every one is tried
        share_end = time.perf_counter() + (t_end - time.perf_counter()) / (len(candidates) - i)
        opt = _repair(units, make(), max_changes)
        for _ in range(6):
            opt = improve(units, band, cols, opt, rng, share_end, max_changes=max_changes,
                          weights=weights)
            if time.perf_counter() > share_end:
                break
            cols = np.union1d(cols, worst_intervals(units, opt, band, 8))
        key = evaluate(units, opt, band)
        better = (best_key is None or (rank(key) < rank(best_key) if rank else
                                       _better(key, best_key)))
        if better:
            best, best_key = opt, key
    return best, cols


def least_change_plan(units: Units) -> np.ndarray:
    """The rule-abiding plan nearest the current allocation: a unit keeps its current option
    when that costs no change, otherwise it takes the allowed option (or unarmed) that
    changes fewest member feeders, unarmed on ties (a trip group split across blocks, or a
    feeder whose current block breaks a rule, must move)."""
    nb = units.n_blocks
    ok = np.concatenate([np.ones((units.n, 1), dtype=bool), units.allowed], axis=1)
    cost = np.concatenate([units.change_cost[:, nb:], units.change_cost[:, :nb]], axis=1)
    k = np.argmin(np.where(ok, cost, np.inf), axis=1)  # column 0 = unarmed wins ties
    return np.where(k == 0, nb, k - 1).astype(np.intp)


def _repair(units: Units, option: np.ndarray, max_changes: int | None) -> np.ndarray:
    """Move units in a disallowed option to unarmed (keeps a start inside the hard rules)."""
    nb = units.n_blocks
    opt = option.copy()
    bad = (opt < nb) & ~units.allowed[np.arange(units.n), np.minimum(opt, nb - 1)]
    opt[bad] = nb
    return opt


def _better(a: tuple, b: tuple, tol: float = 1e-9) -> bool:
    if a[0] < b[0] - tol:
        return True
    if a[0] > b[0] + tol:
        return False
    if a[1] < b[1] - 1e-9:
        return True
    if a[1] > b[1] + 1e-9:
        return False
    return a[2] < b[2]


def revert_pass(units: Units, band: Band, option: np.ndarray, z_cap: float,
                mad_cap: float, rng: np.random.Generator, max_passes: int = 3,
                deadline: float = float("inf")) -> np.ndarray:
    """Level-3 helper: move changed units back to their current block (or to unarmed when
    that is what they were) one at a time, keeping the full-year worst violation ≤ z_cap and
    the full-year mean absolute deviation ≤ mad_cap.  Each trial updates two rows of the
    ``[block, interval]`` shares, so it costs O(intervals)."""
    nb = units.n_blocks
    opt = option.copy()
    s = shares(units, opt)
    n_t = s.shape[1]
    scale = band.scale
    dev_sum = np.abs(s - band.target[:, None]).sum(axis=1)
    total = max(nb * n_t, 1)

    def row_viol(row, b):
        return float(np.maximum(np.maximum(band.lo[b] - row, row - band.hi[b]), 0.0).max(
            initial=0.0) / scale[b])

    for _ in range(max_passes):
        changed = np.flatnonzero(opt != units.current)
        moved = False
        for u in rng.permutation(changed):
            if time.perf_counter() > deadline:
                return opt
            q = int(units.current[u])
            p = int(opt[u])
            if q < nb and not units.allowed[u, q]:
                continue
            if units.change_cost[u, q] >= units.change_cost[u, p]:
                continue
            pu = units.pp[u]
            new_dev = dev_sum.copy()
            rows = {}
            ok = True
            if p < nb:
                rows[p] = s[p] - pu
            if q < nb:
                rows[q] = s[q] + pu
            for b, row in rows.items():
                if row_viol(row, b) > z_cap:
                    ok = False
                    break
                new_dev[b] = np.abs(row - band.target[b]).sum()
            if not ok or new_dev.sum() / total > mad_cap:
                continue
            for b, row in rows.items():
                s[b] = row
            dev_sum = new_dev
            opt[u] = q
            moved = True
        if not moved:
            break
    return opt


#: elements of one [u, v, column] slab in the swapped-pair scoring (bounds memory: 4e6
#: float64 = 32 MB per temporary, whatever the number of intervals)
SWAP_SLAB = 4_000_000
SWAP_CANDIDATES = 40


def _swap_scores(units: Units, band: Band, s: np.ndarray, dev: np.ndarray, a: np.ndarray,
                 b: np.ndarray, p: int, q: int, z_cap: float) -> tuple[np.ndarray, np.ndarray]:
    """For every pair (u in a, v in b): is reverting both admissible (rows p and q keep the
    worst violation ≤ z_cap), and the new total |deviation| of rows p and q.  Row p gains
    pp_u − pp_v, row q loses it.  Computed over slabs of columns so no temporary exceeds
    :data:`SWAP_SLAB` elements."""
    nb = units.n_blocks
    n_t = s.shape[1]
    step = max(1, SWAP_SLAB // max(a.size * b.size, 1))
    worst = np.zeros((2, a.size, b.size))
    new_dev = np.zeros((a.size, b.size))
    for c0 in range(0, n_t, step):
        c1 = min(n_t, c0 + step)
        d = units.pp[a, c0:c1][:, None, :] - units.pp[b, c0:c1][None, :, :]
        for k, (row, sign) in enumerate(((p, 1.0), (q, -1.0))):
            if row >= nb:
                continue
            r = s[row, c0:c1][None, None, :] + sign * d
            v = np.maximum(np.maximum(band.lo[row] - r, r - band.hi[row]), 0.0).max(axis=2)
            np.maximum(worst[k], v / band.scale[row], out=worst[k])
            new_dev += np.abs(r - band.target[row]).sum(axis=2)
    untouched = dev.sum() - sum(dev[r] for r in (p, q) if r < nb)
    return (worst <= z_cap).all(axis=0), new_dev + untouched


def swap_revert_pass(units: Units, band: Band, option: np.ndarray, z_cap: float,
                     mad_cap: float, max_rounds: int = 200,
                     deadline: float = float("inf")) -> np.ndarray:
    """Revert *pairs* of changed units that swapped places.

    Unit u moved p → q and unit v moved q → p (p or q may be "unarmed"); reverting both
    changes only rows p and q, by ``±(pp_u − pp_v)``, which often keeps both blocks in band
    where reverting either alone would not.  All candidate pairs of a block pair are scored
    at once (:func:`_swap_scores`, in slabs of columns); the best admissible pair (lowest
    total deviation, worst violation ≤ z_cap, mean deviation ≤ mad_cap) is applied, then
    the next, until none is left or the deadline passes.
    """
    nb = units.n_blocks
    opt = option.copy()
    s = shares(units, opt)
    n_t = s.shape[1]
    total = max(nb * n_t, 1)
    dev = np.abs(s - band.target[:, None]).sum(axis=1)
    for _ in range(max_rounds):
        changed = np.flatnonzero(opt != units.current)
        best = None
        for p in range(nb + 1):
            for q in range(p + 1, nb + 1):
                if time.perf_counter() > deadline:
                    return opt
                a = changed[(units.current[changed] == p) & (opt[changed] == q)]
                b = changed[(units.current[changed] == q) & (opt[changed] == p)]
                if p < nb:
                    a = a[units.allowed[a, p]]
                if q < nb:
                    b = b[units.allowed[b, q]]
                if a.size == 0 or b.size == 0:
                    continue
                a, b = a[:SWAP_CANDIDATES], b[:SWAP_CANDIDATES]
                ok, new_dev = _swap_scores(units, band, s, dev, a, b, p, q, z_cap)
                ok &= new_dev / total <= mad_cap
                if not ok.any():
                    continue
                cand = np.where(ok, new_dev, np.inf)
                i, j = np.unravel_index(int(np.argmin(cand)), cand.shape)
                if best is None or cand[i, j] < best[0]:
                    best = (cand[i, j], int(a[i]), int(b[j]), p, q)
        if best is None:
            break
        _, u, v, p, q = best
        if p < nb:
            s[p] += units.pp[u] - units.pp[v]
            dev[p] = np.abs(s[p] - band.target[p]).sum()
        if q < nb:
            s[q] += units.pp[v] - units.pp[u]
            dev[q] = np.abs(s[q] - band.target[q]).sum()
        opt[u], opt[v] = p, q
    return opt
