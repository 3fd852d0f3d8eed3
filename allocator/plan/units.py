"""Planning units: feeders tripped together (trip groups) become one unit, one relay.

A unit's contribution ``pp[u, c]`` is the percentage points of demand it would disconnect
at column c if armed (sum over its feeders of the armed-load check's contribution, divided
by demand).  The columns are the intervals with demand > 0 of every scenario's year, one
scenario after the other (``col_scenario``, ``col_interval`` say which), so a plan that
holds every column holds every interval of every scenario.  ``allowed[u, b]`` is the
intersection of its members' hard rules.  ``change_cost[u, k]`` is 1 if the unit's relay
would get a new block setting at option k (k = 0..B-1 a block, k = B unarmed), else 0: a
trip group is one relay, so it counts once however many feeders it trips; a remote-settable
relay (:attr:`allocator.domain.Study.is_remote_settable`) costs 0, since the control room,
not a field crew, sets it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..armed import contribution_mw
from ..domain import RELAY_STANDARD, UNARMED, Study
from ..year import Year

#: feeders per chunk when building contributions (bounds the temporaries)
_CHUNK = 512
#: above this size (bytes as float64) ``pp`` is stored as float32, halving the planner's
#: largest array; products over it still accumulate in float64 (see :func:`weighted_rows`)
PP_FLOAT64_MAX_BYTES = 1 << 30
#: with a float32 ``pp`` the planner holds every band this much (pp of demand) narrower, so
#: the rounding of the stored contributions (relative 6e-8 each, at most ~1e-6 pp on a
#: block's share) can never put a planned share outside the real band
FLOAT32_GUARD_PP = 1e-5
#: elements of one float64 slab in :func:`weighted_rows` (64 MB)
_SLAB = 8_000_000


@dataclass(frozen=True)
class Units:
    members: tuple[np.ndarray, ...]  # feeder indices per unit
    pp: np.ndarray  # [unit, column] percentage points of demand
    allowed: np.ndarray  # [unit, block] bool
    change_cost: np.ndarray  # [unit, block + 1] (last column: unarmed)
    current: np.ndarray  # [unit] current option (block index, or B for unarmed / mixed)
    valid_index: np.ndarray  # [column] → interval index in its scenario's year
    n_blocks: int
    n_feeders: int
    substation: np.ndarray | None = None  # [unit] substation code (first member's)
    col_scenario: np.ndarray | None = None  # [column] → index into the years
    exports_standard: np.ndarray | None = None  # [unit] a standard relay that exports
    owner: np.ndarray | None = None  # [feeder] → unit
    #: recent (option, shares) pairs of :func:`allocator.plan.heuristic.shares`
    share_cache: list = field(default_factory=list, compare=False, repr=False)

    @property
    def n(self) -> int:
        return len(self.members)

    @property
    def guard_pp(self) -> float:
        """How much narrower than the band the planner must hold it (see
        :data:`FLOAT32_GUARD_PP`)."""
        return FLOAT32_GUARD_PP if self.pp.dtype == np.float32 else 0.0

    def to_feeders(self, option: np.ndarray) -> np.ndarray:
        """Unit options (B = unarmed) → block index per feeder (UNARMED = −1)."""
        out = np.full(self.n_feeders, UNARMED, dtype=np.intp)
        owner, first = self.owner_and_first()
        k = np.asarray(option)[owner]
        armed = k < self.n_blocks
        out[armed] = k[armed]
        return out

    def owner_and_first(self) -> tuple[np.ndarray, np.ndarray]:
        owner = self.owner
        if owner is None:
            owner = np.empty(self.n_feeders, dtype=np.intp)
            for u, m in enumerate(self.members):
                owner[m] = u
        first = np.full(self.n, self.n_feeders, dtype=np.intp)
        np.minimum.at(first, owner, np.arange(self.n_feeders, dtype=np.intp))
        return owner, first

    def from_feeders(self, block_idx: np.ndarray) -> np.ndarray:
        """Block index per feeder → unit options (first member's block; B for unarmed)."""
        b = np.asarray(block_idx)
        _, first = self.owner_and_first()
        opt = b[first].copy()
        opt[opt < 0] = self.n_blocks
        return opt

    def changes(self, option: np.ndarray) -> float:
        """Relays changed by a unit assignment."""
        return float(self.change_cost[np.arange(self.n), option].sum())


def weighted_rows(pp: np.ndarray, weights: np.ndarray, cols: np.ndarray | None = None
                  ) -> np.ndarray:
    """``weights @ pp[:, cols]`` in float64, ``weights[k, unit]`` → ``[k, column]``, computed
    over slabs of columns so that no full-size copy of ``pp`` is made (a float32 ``pp`` is
    converted one slab at a time)."""
    w = np.asarray(weights, dtype=float)
    if cols is not None:
        return w @ pp[:, cols]
    n_u, n_c = pp.shape
    if pp.dtype == np.float64:
        return w @ pp
    out = np.empty((w.shape[0], n_c))
    step = max(1, _SLAB // max(n_u, 1))
    for c0 in range(0, n_c, step):
        out[:, c0:c0 + step] = w @ pp[:, c0:c0 + step].astype(np.float64)
    return out


def _members(study: Study) -> tuple[list[np.ndarray], np.ndarray]:
    """Units in order of their first feeder, and the owner unit of every feeder."""
    nf = len(study.feeders)
    groups = study.trip_groups()
    in_group = np.zeros(nf, dtype=bool)
    members: list[np.ndarray] = []
    for g in sorted(groups):
        idx = np.array(sorted(groups[g]), dtype=np.intp)
        in_group[idx] = True
        members.append(idx)
    members += [np.array([i]) for i in np.flatnonzero(~in_group)]
    members.sort(key=lambda m: int(m[0]))
    owner = np.empty(nf, dtype=np.intp)
    for u, m in enumerate(members):
        owner[m] = u
    return members, owner


def _contributions(study: Study, years: tuple[Year, ...], owner: np.ndarray, n_u: int
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``pp[unit, column]`` over every year's valid intervals, written chunk by chunk into
    one preallocated array; also the column → (year, interval) maps and which units hold a
    standard relay that exports in some interval of some year."""
    valid = [np.flatnonzero((y.demand_mw > 0) & y.judged) for y in years]
    n_c = int(sum(v.size for v in valid))
    big = n_u * n_c * 8 > PP_FLOAT64_MAX_BYTES
    pp = np.zeros((n_u, n_c), dtype=np.float32 if big else np.float64)
    col_s = np.concatenate([np.full(v.size, k, dtype=np.intp) for k, v in enumerate(valid)]
                           ) if n_c else np.zeros(0, dtype=np.intp)
    col_t = np.concatenate(valid) if n_c else np.zeros(0, dtype=np.intp)
    nf = owner.size
    single = np.bincount(owner, minlength=n_u)[owner] == 1  # [feeder] its unit is itself
    std = study.relay_code == RELAY_STANDARD
    exports = np.zeros(nf, dtype=bool)
    off = 0
    for y, v in zip(years, valid):
        scale = 100.0 / y.demand_mw[v]
        every = v.size == y.n_intervals  # no column to drop: a view, not a copy
        for a in range(0, nf, _CHUNK):
            b = min(a + _CHUNK, nf)
            net = y.net_mw[a:b]
            exports[a:b] |= std[a:b] & (net.min(axis=1) < 0)
            c = contribution_mw(net if every else net[:, v], study.relay_code[a:b])
            c *= scale[None, :]
            one = single[a:b]
            pp[owner[a:b][one], off:off + v.size] = c[one]
            for k in np.flatnonzero(~one):  # trip-group members: a few rows, summed
                pp[owner[a + k], off:off + v.size] += c[k]
        off += v.size
    exp_u = np.zeros(n_u, dtype=bool)
    np.logical_or.at(exp_u, owner, exports)
    return pp, col_s, col_t, exp_u


def build_units(study: Study, years) -> Units:
    """Group feeders into units and compute their contributions (pp) on every column.
    ``years`` is one :class:`Year` or a sequence of them (scenarios)."""
    years = (years,) if isinstance(years, Year) else tuple(years)
    nb = len(study.blocks)
    nf = len(study.feeders)
    members, owner = _members(study)
    n_u = len(members)
    pp, col_s, col_t, exp_u = _contributions(study, years, owner, n_u)
    allowed_f = study.allowed_matrix()
    allowed = np.ones((n_u, nb), dtype=bool)
    np.logical_and.at(allowed, owner, allowed_f)
    cur_f = study.current_assignment
    cur_opt_f = np.where(cur_f < 0, nb, cur_f)
    differs = cur_opt_f[:, None] != np.arange(nb + 1)[None, :]  # [feeder, option]
    change_cost = np.zeros((n_u, nb + 1))
    np.maximum.at(change_cost, owner, differs.astype(float))
    remote = np.ones(n_u, dtype=bool)  # set from the control room: not a field change
    np.logical_and.at(remote, owner, study.is_remote_settable)
    change_cost[remote] = 0.0
    lo = np.full(n_u, nb + 1, dtype=np.intp)
    hi = np.full(n_u, -1, dtype=np.intp)
    np.minimum.at(lo, owner, cur_opt_f)
    np.maximum.at(hi, owner, cur_opt_f)
    current = np.where(lo == hi, lo, nb).astype(np.intp)
    subs = sorted({f.substation for f in study.feeders})
    code = {s: i for i, s in enumerate(subs)}
    substation = np.array([code[study.feeders[int(m[0])].substation] for m in members],
                          dtype=np.intp)
    return Units(tuple(members), pp, allowed, change_cost, current, col_t, nb, nf,
                 substation, col_s, exp_u, owner)


def substation_excess(units: Units, option: np.ndarray, cap_pct: float | None
                      ) -> list[tuple[int, int, np.ndarray, float]]:
    """Rows for the ``max_substation_share_pct`` rule that ``option`` breaks.

    The rule is measured at each block's column of lowest share (where a block is
    weakest, concentration on one substation matters most).  Returns (block, column, unit
    mask of the substation, cap fraction) per offending block/substation."""
    if cap_pct is None or units.substation is None:
        return []
    cap = cap_pct / 100.0
    out = []
    nb = units.n_blocks
    onehot = (np.asarray(option)[None, :] == np.arange(nb)[:, None]).astype(float)
    shares = weighted_rows(units.pp, onehot)
    for b in range(nb):
        sel = np.flatnonzero(option == b)
        if sel.size == 0:
            continue
        t = int(np.argmin(shares[b]))
        total = shares[b, t]
        if total <= 0:
            continue
        by_sub = np.bincount(units.substation[sel], weights=units.pp[sel, t].astype(float),
                             minlength=int(units.substation.max()) + 1)
        for k in np.flatnonzero(by_sub > cap * total + 1e-9):
            out.append((b, t, units.substation == k, cap))
    return out
