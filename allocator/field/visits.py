"""The visit order: in which order to visit the substations so that, after each visit, every
block stays in band (or at least no worse than the allocation in service now) in every
scenario judged.  ``ScenarioChecks of the new allocation + the allocation now → VisitOrder``.

Setting changes are grouped by substation (a relay belongs to the substation of its first
feeder, see :mod:`allocator.field.changes`); the control room's remote settings are one step
more (:data:`allocator.field.changes.REMOTE_STEP`), each remote relay's change holding in its
period's columns only.  After step i the network runs with the changes of steps 1..i done
and the rest as now, so the last step is the allocation (or schedule) as planned.  The share of block b at column c (every valid
interval of every scenario, side by side, as in :mod:`allocator.plan.units`) is then
``S0[b, c] + Σ_{visited k} D_k[b, c]``, with ``S0`` the shares now and ``D_k`` the rows a
substation's changes move: its relays' percentage points of demand leave their old block's
row and join their new block's.  The state after a visit depends only on the *set* of
substations visited, not on their order.

Measure of a state: ``edge = max over b, c of max(min_pct − share, share − max_pct)``, in
pp: positive = the worst distance outside a band (the violation), negative = minus the
least room left to a band's edge.  A visit keeps the band when its edge is at most
``max(0, edge now)``: in band, or no worse than the allocation in service now.

Algorithm (bottleneck order): choose the order whose largest edge over visits 1..K is the
smallest possible, i.e. the order that keeps the most room at its tightest visit.

* Up to :data:`EXACT_MAX_SUBSTATIONS` substations: exact.  Dynamic programming over the
  2^K sets of visited substations, ``f(A) = max(edge(A), min over k not in A of
  f(A ∪ {k}))``, on a working set of columns; the edge on a subset of columns is a lower
  bound of the edge on all of them, so the optimum found is a lower bound for every order.
  The chosen order is then evaluated on every column; the columns where its visits are
  tightest are added and the search repeated until the order's true bottleneck equals the
  bound: the order is then proven optimal, and when it breaks the band, no order keeps it.
* More substations: greedy (at each step the substation whose changes leave the largest
  room, i.e. the smallest edge, over every scenario); proven only when its bottleneck meets
  the simple bound ``max(edge(all done), min_k edge({k}))``.

Ties (within 1e-9 pp): the smaller edge right after the visit, then the substation with the
most relays to change, then the substation name.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd

from ..armed import armed_mw, contribution_mw
from ..check import ScenarioChecks, as_set
from ..domain import UNARMED
from ..timefmt import iso_local
from ..year import year_period_index
from .changes import REMOTE_STEP, RelayChange, relay_changes, remote_changes

TOL_PP = 1e-9
#: exact search over every set of visited substations up to this many (2^12 = 4096 sets)
EXACT_MAX_SUBSTATIONS = 12
MAX_ROUNDS = 40
#: subsets per slab when evaluating every set on the working columns
_SLAB = 512


@dataclass(frozen=True)
class Visit:
    substation: str
    changes: tuple[RelayChange, ...]

    @property
    def relays(self) -> int:
        """Relays set at this step (a remote relay changed in several periods counts once)."""
        return len({c.feeders for c in self.changes})

    @property
    def feeders(self) -> int:
        return sum(len(f) for f in {c.feeders for c in self.changes})

    @property
    def is_remote(self) -> bool:
        """The control room's step (remote settings), not a substation visit."""
        return self.substation == REMOTE_STEP


@dataclass(frozen=True)
class VisitStep:
    """The network after ``visit`` visits (0 = as in service now): its edge (pp, see the
    module docstring) and where it is (scenario, block, ISO 8601 local time, which edge)."""

    visit: int
    substation: str
    relays: int
    feeders: int
    edge_pp: float
    scenario: str
    block: str
    local_time: str
    side: str  # "min" | "max": the band edge it is nearest to (or past)

    @property
    def worst_violation_pp(self) -> float:
        return max(self.edge_pp, 0.0)

    @property
    def least_room_pp(self) -> float:
        return -self.edge_pp


@dataclass(frozen=True)
class VisitOrder:
    visits: tuple[Visit, ...]  # in visit order
    steps: tuple[VisitStep, ...]  # steps[0]: now; steps[i]: after visit i
    method: str  # "exact" | "greedy" | "none" (nothing to change or nothing to judge)
    proven: bool  # the bottleneck is the smallest of every order
    lower_bound_pp: float  # no order has a smaller largest edge over its visits
    scenarios: tuple[str, ...]
    changes: tuple[RelayChange, ...]
    #: ``[feeder]`` the allocation in service now (visit 0)
    now_idx: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    #: the control room's changes (one per remote relay and period), its own step
    remote: tuple[RelayChange, ...] = ()

    @property
    def site_visits(self) -> tuple[Visit, ...]:
        """The substation visits (the control room's step left out)."""
        return tuple(v for v in self.visits if not v.is_remote)

    @property
    def limit_pp(self) -> float:
        """A visit keeps the band when its worst violation is at most this (pp)."""
        return self.steps[0].worst_violation_pp

    @cached_property
    def visit_of(self) -> dict[str, int]:
        return {v.substation: i for i, v in enumerate(self.visits, 1)}

    def excess_pp(self, step: VisitStep) -> float:
        return max(step.worst_violation_pp - self.limit_pp, 0.0)

    @property
    def judged(self) -> bool:
        """False when no scenario has an interval with demand > 0 (every edge NaN)."""
        return all(np.isfinite(s.edge_pp) for s in self.steps)

    def status(self, step: VisitStep) -> str:
        if step.visit == 0:
            return "in service now"
        if not np.isfinite(step.edge_pp):
            return "not judged"
        if step.worst_violation_pp <= TOL_PP:
            return "in band"
        if step.worst_violation_pp <= self.limit_pp + TOL_PP:
            return "no worse than now"
        return "breaks the band"

    @property
    def first_break(self) -> VisitStep | None:
        return next((s for s in self.steps[1:] if self.excess_pp(s) > TOL_PP), None)

    @property
    def keeps_band(self) -> bool:
        return self.judged and self.first_break is None


# --------------------------------------------------------------------------------------------
# the shares: now, and the rows each substation's changes move
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Shares:
    s0: np.ndarray  # [block, column] shares now, pp of demand
    pp: np.ndarray  # [change, column] each relay's tripped pp of demand
    move: np.ndarray  # [visit, block, change]: +1 joins the block's row, -1 leaves it
    lo: np.ndarray  # [block] band min
    hi: np.ndarray  # [block] band max
    col_scenario: np.ndarray  # [column] index of the check
    col_interval: np.ndarray  # [column] interval in its year


def _shares(cs: ScenarioChecks, old: np.ndarray, visits: list[list[RelayChange]],
            changes: tuple[RelayChange, ...]) -> _Shares:
    st = cs.study
    nb = len(st.blocks)
    s0, pp, cs_i, ct = [], [], [], []
    for i, c in enumerate(cs.checks):
        y, v = c.year, np.flatnonzero(c.valid)
        scale = 100.0 / y.demand_mw[v]
        s0.append(armed_mw(y.net_mw, st.relay_code, old, nb)[:, v] * scale[None, :])
        rows = np.zeros((len(changes), v.size))
        period = year_period_index(st, y)[v] if any(ch.period >= 0 for ch in changes) else None
        for k, ch in enumerate(changes):
            f = np.asarray(ch.feeders)
            rows[k] = contribution_mw(y.net_mw[f], st.relay_code[f]).sum(axis=0)[v] * scale
            if ch.period >= 0:  # a remote schedule's change holds in its period only
                rows[k] *= period == ch.period
        pp.append(rows)
        cs_i.append(np.full(v.size, i, dtype=np.intp))
        ct.append(v)
    pos = {id(ch): k for k, ch in enumerate(changes)}
    move = np.zeros((len(visits), nb, len(changes)))
    for j, group in enumerate(visits):
        for ch in group:
            if ch.old_block != UNARMED:
                move[j, ch.old_block, pos[id(ch)]] -= 1.0
            if ch.new_block != UNARMED:
                move[j, ch.new_block, pos[id(ch)]] += 1.0
    lo = np.array([b.min_pct for b in st.blocks], dtype=float)
    hi = np.array([b.max_pct for b in st.blocks], dtype=float)
    return _Shares(np.hstack(s0), np.hstack(pp), move, lo, hi, np.concatenate(cs_i),
                   np.concatenate(ct))


def _edges(sh: _Shares, s: np.ndarray, rows=slice(None)) -> np.ndarray:
    """``max(min − share, share − max)`` elementwise for shares ``s[..., block, column]``
    of the blocks ``rows``."""
    lo, hi = sh.lo[rows, None], sh.hi[rows, None]
    return np.maximum(lo - s, s - hi)


def _delta(sh: _Shares, j: int) -> tuple[np.ndarray, np.ndarray]:
    """Rows visit j moves and what it adds to them: (block rows, [row, column])."""
    rows = np.flatnonzero(np.any(sh.move[j] != 0, axis=1))
    return rows, sh.move[j][rows] @ sh.pp


# --------------------------------------------------------------------------------------------
# exact search on a working set of columns
# --------------------------------------------------------------------------------------------
def _subset_edges(sh: _Shares, cols: np.ndarray) -> np.ndarray:
    """Largest edge on columns ``cols`` of every set of visited substations ``[2^K]``
    (set A = the bits of its index)."""
    n_v = sh.move.shape[0]
    d = np.einsum("vbr,rc->vbc", sh.move, sh.pp[:, cols])  # [visit, block, column]
    base = sh.s0[:, cols]
    n = 1 << n_v
    out = np.empty(n)
    bits = (np.arange(n)[:, None] >> np.arange(n_v)[None, :]) & 1
    for a in range(0, n, _SLAB):
        x = bits[a:a + _SLAB].astype(float)
        s = base[None] + np.tensordot(x, d, axes=(1, 0))
        out[a:a + _SLAB] = _edges(sh, s).reshape(x.shape[0], -1).max(axis=1)
    return out


def _bottleneck(edge: np.ndarray, n_v: int) -> np.ndarray:
    """``f[A]`` = the smallest possible largest edge over the rest of a route from set A to
    all visited (A's own edge included, except for the empty set: the network now)."""
    n = 1 << n_v
    idx = np.arange(n)
    pop = np.array([bin(a).count("1") for a in range(n)])
    f = np.full(n, np.inf)
    f[n - 1] = edge[n - 1]
    for p in range(n_v - 1, -1, -1):
        a = idx[pop == p]
        best = np.full(a.size, np.inf)
        for k in range(n_v):
            free = ((a >> k) & 1) == 0
            best = np.where(free, np.minimum(best, f[a | (1 << k)]), best)
        f[a] = best if p == 0 else np.maximum(edge[a], best)
    return f


def _pick(cands: list[int], keys: list[np.ndarray], relays: np.ndarray) -> int:
    """Among ``cands``: the smallest first key (within TOL_PP), then the next key, then the
    most relays, then the lowest index."""
    c = np.asarray(cands)
    for key in keys:
        c = c[key[c] <= key[c].min() + TOL_PP]
    return int(c[np.lexsort((c, -relays[c]))][0])


def _route(f: np.ndarray, edge: np.ndarray, relays: np.ndarray) -> list[int]:
    n_v = relays.size
    a, order = 0, []
    for _ in range(n_v):
        cands = [k for k in range(n_v) if not (a >> k) & 1]
        nxt = np.full(n_v, np.inf)
        now = np.full(n_v, np.inf)
        for k in cands:
            nxt[k], now[k] = f[a | (1 << k)], edge[a | (1 << k)]
        k = _pick(cands, [nxt, now], relays)
        order.append(k)
        a |= 1 << k
    return order


def _walk(sh: _Shares, order: list[int]) -> tuple[list[tuple], np.ndarray]:
    """Evaluate the states now and after each visit of ``order`` on every column: per state
    (edge, block, column, "min" or "max") of its largest edge, and the columns of each
    block's lowest and highest share in every state (where a bound can be tightened).
    Without any column (no interval with demand > 0) every edge is NaN."""
    s = sh.s0.copy()
    if s.shape[1] == 0:
        return [(float("nan"), -1, -1, "")] * (len(order) + 1), np.zeros(0, dtype=np.intp)
    out, cols = [], []
    for j in [None] + list(order):
        if j is not None:
            rows, add = _delta(sh, j)
            s[rows] += add
        e = _edges(sh, s)
        b, c = np.unravel_index(int(np.argmax(e)), e.shape)
        side = "min" if sh.lo[b] - s[b, c] >= s[b, c] - sh.hi[b] else "max"
        out.append((float(e[b, c]), int(b), int(c), side))
        cols += [np.argmin(s, axis=1), np.argmax(s, axis=1)]
    return out, np.unique(np.concatenate(cols))


def _exact(sh: _Shares, relays: np.ndarray) -> tuple[list[int], list, bool, float]:
    n_v = relays.size
    _, cols = _walk(sh, list(range(n_v)))
    for j in range(n_v):  # each substation alone, too
        cols = np.union1d(cols, _walk(sh, [j])[1])
    for _ in range(MAX_ROUNDS):
        edge = _subset_edges(sh, cols)
        f = _bottleneck(edge, n_v)
        order = _route(f, edge, relays)
        states, more = _walk(sh, order)
        worst = max(st[0] for st in states[1:])
        if worst <= f[0] + TOL_PP:
            return order, states, True, float(f[0])
        new = np.setdiff1d(more, cols)
        if new.size == 0:
            break
        cols = np.union1d(cols, new)
    return order, states, False, float(f[0])


def _greedy(sh: _Shares, relays: np.ndarray) -> tuple[list[int], list, bool, float]:
    n_v = relays.size
    s = sh.s0.copy()
    left, order, first = list(range(n_v)), [], None
    for _ in range(n_v):
        row_max = _edges(sh, s).max(axis=1)
        cand = np.full(n_v, np.inf)
        for k in left:
            rows, add = _delta(sh, k)
            rest = np.delete(row_max, rows)
            cand[k] = max(_edges(sh, s[rows] + add, rows).max(initial=-np.inf),
                          rest.max(initial=-np.inf))
        first = cand.copy() if first is None else first
        k = _pick(left, [cand], relays)
        rows, add = _delta(sh, k)
        s[rows] += add
        order.append(k)
        left.remove(k)
    states, _ = _walk(sh, order)
    bound = max(states[-1][0], float(first.min()))
    return order, states, max(st[0] for st in states[1:]) <= bound + TOL_PP, bound


# --------------------------------------------------------------------------------------------
# public
# --------------------------------------------------------------------------------------------
def group_by_substation(changes: tuple[RelayChange, ...]) -> list[tuple[str, list[RelayChange]]]:
    """Changes per visit substation, substations by name."""
    by: dict[str, list[RelayChange]] = {}
    for ch in changes:
        by.setdefault(ch.substation, []).append(ch)
    return sorted(by.items())


def _step(cs: ScenarioChecks, sh: _Shares, i: int, visit: Visit | None,
          state: tuple[float, int, int, str]) -> VisitStep:
    e, b, c, side = state
    where = ("", "", "")
    if c >= 0:
        chk = cs.checks[int(sh.col_scenario[c])]
        where = (chk.scenario, cs.study.blocks[b].name,
                 iso_local(chk.year.local_times[int(sh.col_interval[c])]))
    return VisitStep(i, visit.substation if visit else "", visit.relays if visit else 0,
                     visit.feeders if visit else 0, e, *where, side)


def visit_order(checks, previous_idx: np.ndarray, remote: bool = False) -> VisitOrder:
    """The visit order from ``previous_idx`` (block per feeder, in service now) to the
    allocation ``checks`` was made of, judged on every scenario of ``checks``.

    ``remote``: the remote-settable relays are set by the control room
    (:meth:`allocator.domain.Study.field_allocation`), as one more step of the order (placed
    by the same search), so the last step is the allocation (or schedule) as planned."""
    cs = as_set(checks)
    st = cs.study
    old = np.asarray(previous_idx, dtype=np.intp)
    planned = cs.schedule if cs.schedule is not None else cs.block_idx
    if cs.schedule is not None and not remote:
        raise ValueError("a schedule's visit order needs remote=True")
    new = st.field_allocation(planned, old) if remote else cs.block_idx
    changes = relay_changes(st, old, new)
    extra = remote_changes(st, planned, old) if remote else ()
    groups = group_by_substation(changes) + ([(REMOTE_STEP, list(extra))] if extra else [])
    visits = [Visit(s, tuple(g)) for s, g in groups]
    sh = _shares(cs, old, [g for _, g in groups], changes + extra)
    relays = np.array([v.relays for v in visits], dtype=np.intp)
    if not visits:
        states, _ = _walk(sh, [])
        return VisitOrder((), (_step(cs, sh, 0, None, states[0]),), "none", True,
                          states[0][0], cs.names, changes, old, extra)
    if sh.s0.shape[1] == 0:  # nothing to judge: the visits by name, every edge NaN
        order, states, proven, bound, method = (list(range(len(visits))),
                                                _walk(sh, list(range(len(visits))))[0],
                                                False, float("nan"), "none")
    else:
        search = _exact if len(visits) <= EXACT_MAX_SUBSTATIONS else _greedy
        order, states, proven, bound = search(sh, relays)
        method = "exact" if search is _exact else "greedy"
    done = [visits[k] for k in order]
    steps = [_step(cs, sh, 0, None, states[0])]
    steps += [_step(cs, sh, i, v, st) for i, (v, st) in enumerate(zip(done, states[1:]), 1)]
    return VisitOrder(tuple(done), tuple(steps), method, proven, bound, cs.names, changes,
                      old, extra)


__all__ = ["Visit", "VisitStep", "VisitOrder", "visit_order", "group_by_substation",
           "EXACT_MAX_SUBSTATIONS"]


VISIT_COLUMNS = ("visit", "substation", "relays", "feeders", "worst_violation_pp",
                 "least_room_pp", "scenario", "block", "band_edge", "local_time", "status",
                 "excess_over_limit_pp")


def visit_order_table(order: VisitOrder) -> pd.DataFrame:
    """One row for the network now (visit 0) and one per visit: the worst violation over
    every scenario after it (pp; 0 = every block in band), the least room left to a band
    edge (negative = outside), where that is (scenario, block, which edge, local time), the
    status and by how much it exceeds the limit (the worst violation now, or 0)."""
    rows = [(s.visit, s.substation if s.visit else "(now)", s.relays, s.feeders,
             s.worst_violation_pp, s.least_room_pp, s.scenario, s.block, s.side,
             s.local_time, order.status(s), order.excess_pp(s)) for s in order.steps]
    return pd.DataFrame(rows, columns=list(VISIT_COLUMNS))


def _steps_words(order: VisitOrder) -> str:
    n = len(order.site_visits)
    if n == len(order.visits):
        return f"{n} visits"
    return f"{len(order.visits)} steps ({n} substation visits and the control room's remote settings)"


def order_words(order: VisitOrder) -> str:
    """What the order achieves, in one or two sentences (for every output)."""
    sc = ", ".join(order.scenarios)
    if not order.visits:
        return "No relay setting changes, so no visits."
    if not order.judged:
        return ("The visits are listed by substation name and not judged: no scenario has an "
                "interval with netted demand above 0.")
    how = ("exact search over every order" if order.method == "exact" else
           "greedy search (too many substations for the exact search)")
    now = order.steps[0]
    brk = order.first_break
    if brk is None:
        lim = ("every block stays in band" if order.limit_pp <= TOL_PP else
               f"no block goes further outside its band than the {now.worst_violation_pp:.2f} "
               "pp of the allocation in service now")
        return (f"After each of the {_steps_words(order)} {lim}, in every scenario "
                f"judged ({sc}); {how}.")
    edge = "below its minimum" if brk.side == "min" else "above its maximum"
    words = (f"Visit {brk.visit} ({brk.substation}) breaks the band: block {brk.block} is "
             f"{brk.worst_violation_pp:.2f} pp {edge} "
             f"in scenario {brk.scenario} at {brk.local_time}, {order.excess_pp(brk):.2f} pp "
             f"more than the limit of {order.limit_pp:.2f} pp (the worst violation now"
             f"{'' if order.limit_pp > TOL_PP else ', i.e. in band'}).")
    if order.proven:
        return words + (f" No order of the visits keeps the band in every scenario judged "
                        f"({sc}): this one exceeds the limit least ({how}).")
    return words + f" A better order may exist ({how}; not proven)."


__all__ += ["VISIT_COLUMNS", "visit_order_table", "order_words"]
