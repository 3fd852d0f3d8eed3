"""Planning units: feeders tripped together (trip groups) become one unit.

A unit's contribution ``pp[u, t]`` is the percentage points of demand it would disconnect
at interval t if armed (sum over its feeders of the armed-load check's contribution,
divided by demand).  ``allowed[u, b]`` is the intersection of its members' hard rules.
``change_cost[u, k]`` counts the member feeders whose block would differ from their
current one if the unit went to option k (k = 0..B-1 a block, k = B unarmed).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..check import contribution_mw
from ..domain import UNARMED, Study
from ..year import Year


@dataclass(frozen=True)
class Units:
    members: tuple[np.ndarray, ...]  # feeder indices per unit
    pp: np.ndarray  # [unit, valid interval] percentage points of demand
    allowed: np.ndarray  # [unit, block] bool
    change_cost: np.ndarray  # [unit, block + 1] (last column: unarmed)
    current: np.ndarray  # [unit] current option (block index, or B for unarmed / mixed)
    valid_index: np.ndarray  # [valid interval] → index into the year's intervals
    n_blocks: int
    n_feeders: int
    substation: np.ndarray | None = None  # [unit] substation code (first member's)

    @property
    def n(self) -> int:
        return len(self.members)

    def to_feeders(self, option: np.ndarray) -> np.ndarray:
        """Unit options (B = unarmed) → block index per feeder (UNARMED = −1)."""
        out = np.full(self.n_feeders, UNARMED, dtype=np.intp)
        for u, m in enumerate(self.members):
            k = int(option[u])
            if k < self.n_blocks:
                out[m] = k
        return out

    def from_feeders(self, block_idx: np.ndarray) -> np.ndarray:
        """Block index per feeder → unit options (first member's block; B for unarmed)."""
        b = np.asarray(block_idx)
        first = np.array([m[0] for m in self.members])
        opt = b[first].copy()
        opt[opt < 0] = self.n_blocks
        return opt


def build_units(study: Study, year: Year) -> Units:
    """Group feeders into units and compute their per-interval contributions (pp)."""
    nb = len(study.blocks)
    nf = len(study.feeders)
    allowed_f = study.allowed_matrix()
    groups = study.trip_groups()
    in_group = np.zeros(nf, dtype=bool)
    members: list[np.ndarray] = []
    for g in sorted(groups):
        idx = np.array(sorted(groups[g]), dtype=np.intp)
        in_group[idx] = True
        members.append(idx)
    singles = [np.array([i]) for i in range(nf) if not in_group[i]]
    members = sorted(members + singles, key=lambda m: int(m[0]))
    valid = year.demand_mw > 0
    valid_index = np.flatnonzero(valid)
    contrib = contribution_mw(year.net_mw[:, valid_index], study.relay_code)
    contrib *= 100.0 / year.demand_mw[valid_index][None, :]
    owner = np.empty(nf, dtype=np.intp)
    for u, m in enumerate(members):
        owner[m] = u
    n_u = len(members)
    if n_u == nf:
        pp = contrib
    else:
        from scipy.sparse import csr_matrix

        g = csr_matrix((np.ones(nf), (owner, np.arange(nf))), shape=(n_u, nf))
        pp = np.asarray(g @ contrib)
    allowed = np.ones((n_u, nb), dtype=bool)
    cur_f = study.current_assignment.copy()
    cur_opt_f = np.where(cur_f < 0, nb, cur_f)
    change_cost = np.zeros((n_u, nb + 1))
    current = np.empty(n_u, dtype=np.intp)
    for u, m in enumerate(members):
        allowed[u] = allowed_f[m].all(axis=0)
        for k in range(nb + 1):
            change_cost[u, k] = float(np.sum(cur_opt_f[m] != k))
        vals = np.unique(cur_opt_f[m])
        current[u] = vals[0] if vals.size == 1 else nb
    subs = sorted({f.substation for f in study.feeders})
    code = {s: i for i, s in enumerate(subs)}
    substation = np.array([code[study.feeders[int(m[0])].substation] for m in members],
                          dtype=np.intp)
    return Units(tuple(members), pp, allowed, change_cost, current, valid_index, nb, nf,
                 substation)


def substation_excess(units: Units, option: np.ndarray, cap_pct: float | None
                      ) -> list[tuple[int, int, np.ndarray, float]]:
    """Rows for the ``max_substation_share_pct`` rule that ``option`` breaks.

    The rule is measured at each block's interval of lowest share (where a block is
    weakest, concentration on one substation matters most).  Returns (block, interval
    position, unit mask of the substation, cap fraction) per offending block/substation."""
    if cap_pct is None or units.substation is None:
        return []
    cap = cap_pct / 100.0
    out = []
    nb = units.n_blocks
    for b in range(nb):
        sel = np.flatnonzero(option == b)
        if sel.size == 0:
            continue
        s = units.pp[sel].sum(axis=0)
        t = int(np.argmin(s))
        total = s[t]
        if total <= 0:
            continue
        by_sub = np.bincount(units.substation[sel], weights=units.pp[sel, t],
                             minlength=int(units.substation.max()) + 1)
        for k in np.flatnonzero(by_sub > cap * total + 1e-9):
            out.append((b, t, units.substation == k, cap))
    return out
