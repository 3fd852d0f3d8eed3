"""Large-neighbourhood search with the MILP solver for the planner's levels 2 and 3.

The full level-2 model (mean absolute deviation) has an LP relaxation whose bound is ~0 (a
fractional plan can sit on every target), so a monolithic solve spends its time at the root
and stops wherever the clock says - a different plan on every run.  Instead, each step frees
the units of a few blocks (plus unarmed units that may join them), holds everything else
fixed as constant shares, and solves that small MILP exactly (node-limited, so the result is
the same on every run).  A step is accepted only if the *full-year* evaluation improves
lexicographically while the level-1 cap on the worst violation still holds on every interval.
"""

from __future__ import annotations

import itertools
import time
from dataclasses import dataclass, replace

import numpy as np

from .heuristic import Band, evaluate, shares, violation_rel
from .model import build_model, start_vector
from .solvers import solve
from .units import Units, substation_excess

SUB_NODE_LIMIT = 25  # per neighbourhood solve: deterministic work limit
SUB_TIME_LIMIT_S = 20.0  # safety net only; reaching it is reported as an event
MAX_FREE_UNITS = 36
SUB_MAD_INTERVALS = 96  # deviation rows per neighbourhood model (a systematic subsample)


def _sub_units(units: Units, free: np.ndarray, blocks: np.ndarray) -> Units:
    nb = units.n_blocks
    cols = np.concatenate([blocks, [nb]])
    cur = units.current[free]
    cur_sub = np.full(free.size, blocks.size, dtype=np.intp)
    for k, b in enumerate(blocks):
        cur_sub[cur == b] = k
    return Units(members=tuple(units.members[i] for i in free), pp=units.pp[free],
                 allowed=units.allowed[free][:, blocks],
                 change_cost=units.change_cost[free][:, cols], current=cur_sub,
                 valid_index=units.valid_index, n_blocks=int(blocks.size),
                 n_feeders=units.n_feeders)


def _better(level: str, new: tuple, old: tuple, z_cap: float, mad_cap: float | None) -> bool:
    if new[0] > z_cap:
        return False
    if level == "mad":
        return new[1] < old[1] - 1e-9
    if mad_cap is not None and new[1] > mad_cap + 1e-12:
        return False
    return new[2] < old[2] - 0.5 or (new[2] <= old[2] + 0.5 and new[1] < old[1] - 1e-9)


@dataclass
class _Search:
    """The fixed inputs of one neighbourhood search, the columns its models hold and its
    report (``info``)."""

    units: Units
    band: Band
    level: str
    band_set: np.ndarray  # columns held as band rows; grows when a held-out one breaks z_cap
    mad_set: np.ndarray  # deviation columns (already subsampled)
    z_cap: float
    mad_cap_sample: float | None
    max_changes: int | None
    solver: str
    seed: int
    deadline: float  # time.perf_counter() seconds
    events: list[str]
    sub_cap_pct: float | None
    armed_caps: list[tuple[np.ndarray, float]]
    rng: np.random.Generator
    info: dict

    def free_units(self, cur: np.ndarray, blocks: np.ndarray) -> np.ndarray:
        """The units freed for ``blocks``: those in them, plus unarmed ones that may join,
        at most :data:`MAX_FREE_UNITS` (a random choice beyond that)."""
        units, nb, rng = self.units, self.units.n_blocks, self.rng
        inb = np.isin(cur, blocks)
        cand_un = np.flatnonzero((cur == nb) & units.allowed[:, blocks].any(axis=1))
        free = np.flatnonzero(inb & units.allowed.any(axis=1))
        room = MAX_FREE_UNITS - free.size
        if room > 0 and cand_un.size:
            take = cand_un if cand_un.size <= room else np.sort(
                rng.choice(cand_un, room, replace=False))
            free = np.union1d(free, take)
        elif free.size > MAX_FREE_UNITS:
            free = np.sort(rng.choice(free, MAX_FREE_UNITS, replace=False))
        return free

    def sub_mad_cap(self, cur: np.ndarray, blocks: np.ndarray) -> float | None:
        """The cap on the sample MAD (pp) of ``blocks`` that keeps the whole plan's sample MAD
        within ``mad_cap_sample`` (level ``changes`` only, else None)."""
        if self.level != "changes" or self.mad_cap_sample is None:
            return None
        # keep the sample MAD of these blocks no worse than the cap allows: the other
        # blocks' deviation is constant, so the cap moves to these blocks
        nb, mad_set = self.units.n_blocks, self.mad_set
        s_all = shares(self.units, cur, mad_set)
        dev = np.abs(s_all - self.band.target[:, None])
        other = np.setdiff1d(np.arange(nb), blocks)
        budget = self.mad_cap_sample * nb * mad_set.size - dev[other].sum()
        return budget / (blocks.size * mad_set.size)

    def model(self, cur: np.ndarray, free: np.ndarray, blocks: np.ndarray):
        """The neighbourhood MILP of ``free`` units over ``blocks``, the rest held fixed:
        (model, sub-units, start vector)."""
        units, band, nb = self.units, self.band, self.units.n_blocks
        fixed = np.setdiff1d(np.arange(units.n), free)
        sub = _sub_units(units, free, blocks)
        held = cur.copy()
        held[free] = nb  # the shares of the units that stay where they are
        s_fixed = shares(units, held)[blocks]
        fixed_changes = float(units.change_cost[fixed, cur[fixed]].sum())
        sub_band = Band(band.target[blocks], band.lo[blocks], band.hi[blocks])
        mc = None if self.max_changes is None else self.max_changes - fixed_changes
        mad_cap = self.sub_mad_cap(cur, blocks)
        sub_cur = sub.current.copy()
        caps = [(m[free], cap - float(np.sum(m[fixed] & (cur[fixed] < nb))))
                for m, cap in self.armed_caps]
        model = build_model(sub, sub_band.target, sub_band.lo, sub_band.hi, self.band_set,
                            self.mad_set, self.level, z_cap=self.z_cap, mad_cap=mad_cap,
                            max_changes=mc, share_offset=s_fixed, change_offset=fixed_changes,
                            armed_caps=caps)
        start = start_vector(model, sub, sub_cur, sub_band.target, sub_band.lo,
                             sub_band.hi, share_offset=s_fixed)
        return model, sub, start

    def solve_step(self, model, start):
        """Solve one neighbourhood model (node-limited, at most :data:`SUB_TIME_LIMIT_S` s);
        the solution vector, or None (a fault is noted)."""
        info, events = self.info, self.events
        remaining = max(0.5, min(SUB_TIME_LIMIT_S, self.deadline - time.perf_counter()))
        out = solve(model.arrays, self.solver, time_limit_s=remaining, mip_gap=1e-6,
                    start=start, seed=self.seed, node_limit=SUB_NODE_LIMIT)
        info["steps"] += 1
        if out.message == "time_limit_hit" and remaining >= SUB_TIME_LIMIT_S:
            events.append(f"{info['level']}: a neighbourhood solve hit its "
                          f"{remaining:.0f} s safety limit")
        if out.x is None:
            if out.status == "error":
                info["status"] = "solver_fault"
                events.append(f"{info['level']}: a neighbourhood solve failed "
                              f"({out.status}: {out.message}); that step was skipped")
            return None
        return out.x

    def admissible(self, new: np.ndarray) -> tuple | None:
        """The full-year key of plan ``new``, or None when it breaks max_changes, the cap
        z_cap (its worst columns are then held in later models), the substation cap or an
        armed cap."""
        units, nb = self.units, self.units.n_blocks
        if self.max_changes is not None and float(
                units.change_cost[np.arange(units.n), new].sum()) > self.max_changes + 1e-9:
            return None
        new_key = evaluate(units, new, self.band)
        if new_key[0] > self.z_cap:
            # a held-out interval broke the cap: hold it in later models
            v = violation_rel(shares(units, new), self.band)
            worst_t = np.unique(np.argsort(-v, axis=1)[:, :4])
            self.band_set = np.union1d(self.band_set, worst_t)
            return None
        if self.sub_cap_pct is not None and substation_excess(units, new, self.sub_cap_pct):
            return None
        if any(np.sum(m & (new < nb)) > cap + 1e-9 for m, cap in self.armed_caps):
            return None
        return new_key

    def step(self, cur: np.ndarray, blocks: np.ndarray) -> tuple[np.ndarray, tuple] | None:
        """One exact solve on the neighbourhood of ``blocks``: (new plan, its key), or None
        when nothing admissible came of it."""
        nb = self.units.n_blocks
        free = self.free_units(cur, blocks)
        if free.size == 0:
            return None
        model, sub, start = self.model(cur, free, blocks)
        x = self.solve_step(model, start)
        if x is None:
            return None
        sub_opt = model.option_from_x(x, sub.n, sub.n_blocks)
        new = cur.copy()
        new[free] = np.where(sub_opt < blocks.size, blocks[np.minimum(sub_opt,
                                                                      blocks.size - 1)], nb)
        new_key = self.admissible(new)
        return None if new_key is None else (new, new_key)


def _new_info(level: str, key: tuple) -> dict:
    """The report of a search of ``level`` starting from a plan with ``key``."""
    return {"level": "deviation from target" if level == "mad" else "relays changed", "method":
            "neighbourhood search", "steps": 0, "accepted": 0, "status": "converged",
            "objective": key[1] if level == "mad" else key[2], "bound": None, "gap": None,
            "seconds": 0.0, "rounds": 0}


def _block_pairs(nb: int) -> list[np.ndarray]:
    """The neighbourhoods: every pair of blocks (the one block when there is only one)."""
    return [np.array(p) for p in itertools.combinations(range(nb), 2)] if nb > 1 else \
        [np.array([0])]


def _subsample(mad_set: np.ndarray) -> np.ndarray:
    """At most about :data:`SUB_MAD_INTERVALS` of ``mad_set``, evenly spaced."""
    if mad_set.size > SUB_MAD_INTERVALS:
        step = int(np.ceil(mad_set.size / SUB_MAD_INTERVALS))
        mad_set = mad_set[::step]
    return mad_set


def neighbourhood_search(units: Units, band: Band, option: np.ndarray, level: str,
                         band_set: np.ndarray, mad_set: np.ndarray, *, z_cap: float,
                         mad_cap_full: float | None, max_changes: int | None, solver: str,
                         mad_cap_sample: float | None = None,
                         seed: int, deadline: float, events: list[str],
                         progress=None, max_passes: int = 3,
                         sub_cap_pct: float | None = None,
                         armed_caps: list[tuple[np.ndarray, float]] = ()
                         ) -> tuple[np.ndarray, dict]:
    """Improve ``option`` for ``level`` (``"mad"`` or ``"changes"``) by exact solves on
    neighbourhoods of block pairs.  Returns (option, info)."""
    rng = np.random.default_rng(seed + (1 if level == "mad" else 2))
    cur = option.copy()
    key = evaluate(units, cur, band)
    info = _new_info(level, key)
    t0 = time.perf_counter()
    pairs = _block_pairs(units.n_blocks)
    mad_set = _subsample(mad_set)
    model_t = np.union1d(band_set, mad_set)
    search = _Search(units, band, level, band_set, mad_set, z_cap, mad_cap_sample,
                     max_changes, solver, seed, deadline, events, sub_cap_pct, armed_caps,
                     rng, info)
    for _ in range(max_passes):
        improved_pass = False
        order = rng.permutation(len(pairs))
        for pi in order:
            if time.perf_counter() > deadline:
                info["status"] = "time_limit"
                events.append(f"{info['level']}: time budget reached during neighbourhood "
                              "search; the plan may differ from a run with more time")
                info["seconds"] = time.perf_counter() - t0
                info["objective"] = key[1] if level == "mad" else key[2]
                return cur, info
            got = search.step(cur, pairs[pi])
            if got is None:
                continue
            new, new_key = got
            if _better(level, new_key, key, z_cap, mad_cap_full):
                cur, key = new, new_key
                info["accepted"] += 1
                improved_pass = True
                if progress is not None:
                    progress(level=info["level"], round=info["steps"],
                             intervals=int(model_t.size), worst=key[0], status="improved")
        info["rounds"] += 1
        if not improved_pass:
            break
    info["objective"] = key[1] if level == "mad" else key[2]
    info["seconds"] = time.perf_counter() - t0
    return cur, info
