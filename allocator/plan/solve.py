"""Rounds of solve → check every interval → add the worst → solve again, for three
lexicographic levels.

Level 1 minimises the worst band violation z (relative to target) over the intervals held
in the model.  Any subset of intervals gives a *relaxation* of the full-year problem, so the
model's optimum (or its bound) is a valid lower bound for the whole year; when the check over
every interval finds nothing worse than the model's z, the plan is optimal for the full
year.  Otherwise the worst intervals of each block are added and the model is solved again.

Level 2 fixes ``z ≤ z*`` on the held intervals and minimises the mean absolute deviation from
target on a systematic sample of intervals (plus the held ones); level 3 fixes that too and
minimises the number of changed feeders.  The cap on z is re-verified on every interval after
each solve, with more intervals added when needed, so the final plan's worst violation is
exactly level 1's.  Levels are combined by *sequential solves* (no weights), each with a
small tolerance written in ``plan.json``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from ..domain import Study
from ..year import Year
from .heuristic import Band, evaluate, heuristic_plan, shares, systematic_sample, violation_rel
from .model import build_model, start_vector
from .solvers import solve, solver_version
from .units import Units, build_units, substation_excess

Z_TOL = 1e-7  # absolute tolerance on the relative violation z when capping later levels
MAD_REL_TOL = 0.10  # default of settings.deviation_tolerance_pct / 100
ADD_PER_BLOCK = 6  # intervals added per block and round
MAX_ROUNDS = 40
ROUND_SHARE = 0.15  # a level-1 round may use at most this share of the time limit
ROUND_MIN_S = 5.0


@dataclass
class PlanOutcome:
    option: np.ndarray  # [unit]
    block_idx: np.ndarray  # [feeder]
    status: str  # "optimal" | "feasible" | "infeasible" | "error"
    proven: bool
    levels: list[dict] = field(default_factory=list)
    rounds: int = 0
    band_intervals: int = 0
    mad_intervals: int = 0
    lower_bound_worst: float | None = None
    explanation: list[str] = field(default_factory=list)
    seconds: float = 0.0
    solver: str = "highs"
    solver_version: str = ""
    heuristic: dict = field(default_factory=dict)
    full_year: dict = field(default_factory=dict)
    combination: str = ""
    alternatives: dict = field(default_factory=dict)
    events: list[str] = field(default_factory=list)


def band_of(study: Study) -> Band:
    return Band(np.array([b.target_pct for b in study.blocks], dtype=float),
                np.array([b.min_pct for b in study.blocks], dtype=float),
                np.array([b.max_pct for b in study.blocks], dtype=float))


def _add_worst(units, option, band, band_set, z_ref, k=ADD_PER_BLOCK) -> np.ndarray:
    """Intervals where the full-year check finds a violation above ``z_ref`` that the model
    does not hold yet: the k worst per block."""
    s = shares(units, option)
    v = violation_rel(s, band)
    v[:, band_set] = -1.0
    new = []
    for b in range(v.shape[0]):
        over = np.flatnonzero(v[b] > z_ref + Z_TOL)
        if over.size:
            top = over[np.argsort(-v[b, over], kind="stable")[:k]]
            new.append(top)
    if not new:
        return np.array([], dtype=np.intp)
    return np.unique(np.concatenate(new))


class _Progress:
    def __init__(self, callback):
        self.cb = callback

    def __call__(self, **kw):
        if self.cb is not None:
            self.cb(**kw)


def _level(units, band, level, band_set, mad_set, incumbent, *, solver, deadline, gap, seed,
           z_cap=None, mad_cap=None, max_changes=None, progress, events, level_name,
           sub_cap_pct=None, sub_rows=None, total_s=None):
    """Solve one level with interval rounds.  Returns (option, info dict, band_set)."""
    nb = units.n_blocks
    info = {"level": level_name, "rounds": 0, "status": None, "objective": None,
            "bound": None, "gap": None, "seconds": 0.0}
    option = incumbent.copy()
    t0 = time.perf_counter()
    sub_rows = list(sub_rows or [])
    best_opt, best_key = incumbent.copy(), _rank(units, band, incumbent, sub_cap_pct, level)
    for rnd in range(MAX_ROUNDS):
        remaining = deadline - time.perf_counter()
        if remaining <= 0.5:
            events.append(f"{level_name}: time budget used before round {rnd + 1}")
            info["status"] = info["status"] or "time_limit"
            break
        model = build_model(units, band.target, band.lo, band.hi, band_set, mad_set, level,
                            z_cap=z_cap, mad_cap=mad_cap, max_changes=max_changes,
                            substation_rows=sub_rows)
        start = start_vector(model, units, option, band.target, band.lo, band.hi)
        # one round may not eat the whole budget: a round cut short still yields an
        # incumbent and new intervals, and later rounds can improve on it
        round_cap = max(ROUND_MIN_S, ROUND_SHARE * total_s) if total_s else remaining
        out = solve(model.arrays, solver, time_limit_s=min(remaining, round_cap), mip_gap=gap,
                    start=start, seed=seed)
        info["rounds"] = rnd + 1
        info["seconds"] = time.perf_counter() - t0
        if out.x is None:
            events.append(f"{level_name} round {rnd + 1}: solver {out.status} ({out.message});"
                          " keeping the previous plan")
            info["status"] = out.status
            break
        cand = model.option_from_x(out.x, units.n, nb)
        info.update(status=out.status, objective=out.objective, bound=out.bound, gap=out.gap)
        option = cand
        ck = _rank(units, band, cand, sub_cap_pct, level)
        if best_key is None or ck < best_key:
            best_opt, best_key = cand.copy(), ck
        z_model = float(out.x[model.i_z]) if level == "worst" else (z_cap or 0.0)
        z_ref = z_model if level == "worst" else (z_cap if z_cap is not None else np.inf)
        new = _add_worst(units, option, band, band_set, z_ref)
        worst_full = evaluate(units, option, band)[0]
        progress(level=level_name, round=rnd + 1, intervals=int(band_set.size),
                 worst=worst_full, status=out.status)
        more_rows = substation_excess(units, option, sub_cap_pct)
        sub_rows += more_rows
        if new.size == 0 and not more_rows:
            break
        band_set = np.union1d(band_set, new)
        if level != "worst":
            mad_set = np.union1d(mad_set, new) if mad_set.size else mad_set
    if _rank(units, band, option, sub_cap_pct, level) > best_key:
        events.append(f"{level_name}: the last round's plan was worse than an earlier one "
                      "(time limit); the best plan found is kept")
        option = best_opt
    return option, info, band_set, mad_set


def _rank(units, band, option, sub_cap_pct, level) -> tuple:
    """Order plans: hard substation rule first, then the level's full-year objective."""
    k = evaluate(units, option, band)
    n_sub = len(substation_excess(units, option, sub_cap_pct))
    if level == "changes":
        return (n_sub, round(k[0], 9), k[2], k[1])
    return (n_sub, round(k[0], 9), k[1], k[2])


def plan_allocation(study: Study, year: Year, solver: str = "highs",
                    time_limit_s: float | None = None, max_changes: int | None = None,
                    seed: int = 0, progress=None, mip_gap: float | None = None,
                    n_mad_sample: int | None = None) -> PlanOutcome:
    """Plan an allocation of feeders to blocks for the whole study year.

    Returns a :class:`PlanOutcome`; the caller runs the armed-load check on
    ``outcome.block_idx`` (the plan's reported worst violation is the check's).
    """
    t_start = time.perf_counter()
    s = study.settings
    tl = float(time_limit_s if time_limit_s is not None else s.solver_time_limit_s)
    gap = float(mip_gap if mip_gap is not None else s.mip_gap)
    if max_changes is None:
        max_changes = s.max_changes
    prog = _Progress(progress)
    events: list[str] = []
    units = build_units(study, year)
    band = band_of(study)
    deadline = t_start + tl
    from .explain import explain_before

    explanation = explain_before(study, year, units, band)
    # feeders whose current block breaks a hard rule must move: those changes are forced
    ok_opt = np.concatenate([units.allowed, np.ones((units.n, 1), dtype=bool)], axis=1)
    forced = int(np.where(ok_opt, units.change_cost, np.inf).min(axis=1).sum())
    if max_changes is not None and max_changes < forced:
        explanation.append(
            f"max_changes = {max_changes} is below the {forced} change(s) the hard rules force "
            "on the current allocation (feeders whose current block breaks a rule); planned "
            f"with max_changes = {forced}.")
        max_changes = forced

    # ---- heuristic start -----------------------------------------------------------------
    prog(level="heuristic", round=0, intervals=0, worst=float("nan"), status="running")
    h_opt, work = heuristic_plan(units, band, seed, time_budget_s=max(1.0, 0.25 * tl),
                                 max_changes=max_changes)
    h_key = evaluate(units, h_opt, band)
    prog(level="heuristic", round=0, intervals=int(work.size), worst=h_key[0], status="done")

    # ---- level 1 -------------------------------------------------------------------------
    from .heuristic import worst_intervals

    band_set = np.union1d(worst_intervals(units, h_opt, band, 10),
                          systematic_sample(units.pp.shape[1], 24))
    nb = units.n_blocks
    n_units = max(units.n, 1)
    if n_mad_sample is None:
        n_mad_sample = int(np.clip(4.0e5 / (nb * n_units), 48, 365))
    mad_set = systematic_sample(units.pp.shape[1], n_mad_sample)
    lvl_deadline = t_start + 0.45 * tl
    sub_cap = s.max_substation_share_pct
    opt1, info1, band_set, _ = _level(units, band, "worst", band_set, np.array([], np.intp),
                                      h_opt, solver=solver, deadline=lvl_deadline, gap=gap,
                                      seed=seed, max_changes=max_changes, progress=prog,
                                      events=events, level_name="worst violation",
                                      sub_cap_pct=sub_cap, total_s=tl)
    k1 = evaluate(units, opt1, band)
    if k1[0] > h_key[0] + Z_TOL and not substation_excess(units, h_opt, sub_cap):
        # the solver did worse than the start (time limit): keep the start
        events.append("level 1 ended above the heuristic start; the start is kept")
        opt1, k1 = h_opt, h_key
    z_star = k1[0]
    z_cap = z_star + Z_TOL
    proven1 = info1["status"] == "optimal" and k1[0] <= (info1["objective"] or 0) + 1e-6
    lb = info1["bound"] if info1["bound"] is not None else (
        info1["objective"] if info1["status"] == "optimal" else None)

    # ---- level 2: mean absolute deviation, by exact solves on neighbourhoods -------------
    from .lns import neighbourhood_search

    mad_set = np.union1d(mad_set, band_set)
    opt2, info2 = neighbourhood_search(
        units, band, opt1, "mad", band_set, mad_set, z_cap=z_cap, mad_cap_full=None,
        max_changes=max_changes, solver=solver, seed=seed, deadline=t_start + 0.75 * tl,
        events=events, progress=prog, sub_cap_pct=sub_cap)
    k2 = evaluate(units, opt2, band)
    # ---- level 3: changed feeders, MAD held within MAD_REL_TOL ---------------------------
    tol = s.deviation_tolerance_pct / 100.0
    s2 = shares(units, opt2, mad_set)
    mad_cap_sample = float(np.abs(s2 - band.target[:, None]).mean()) * (1 + tol) + 1e-12
    mad_cap_full = k2[1] * (1 + tol) + 1e-12
    from .heuristic import revert_pass

    from .heuristic import swap_revert_pass

    opt2r = revert_pass(units, band, opt2, z_cap, mad_cap_full,
                        np.random.default_rng(seed + 3))
    opt2r = swap_revert_pass(units, band, opt2r, z_cap, mad_cap_full)
    opt2r = revert_pass(units, band, opt2r, z_cap, mad_cap_full,
                        np.random.default_rng(seed + 4))
    if substation_excess(units, opt2r, sub_cap):
        opt2r = opt2
    opt3, info3 = neighbourhood_search(
        units, band, opt2r, "changes", band_set, mad_set, z_cap=z_cap,
        mad_cap_full=mad_cap_full, mad_cap_sample=mad_cap_sample, max_changes=max_changes,
        solver=solver, seed=seed, deadline=t_start + tl - min(2.0, 0.03 * tl), events=events,
        progress=prog,
        sub_cap_pct=sub_cap)
    final = opt3
    kf = evaluate(units, final, band)

    sub_left = substation_excess(units, final, sub_cap)
    if sub_left:
        events.append(f"max_substation_share_pct = {sub_cap:g}: {len(sub_left)} block/"
                      "substation pair(s) still above the cap at the block's lowest-share "
                      "interval (the solver ran out of rounds or time)")
    in_band = kf[0] <= 1e-9
    statuses = [info1["status"], info2["status"], info3["status"]]
    all_opt = info1["status"] == "optimal" and all(
        i["status"] == "converged" for i in (info2, info3))
    err = any(st in ("error",) for st in statuses)
    if in_band and not sub_left:
        status = "optimal" if all_opt else "feasible"
    else:
        status = "infeasible"
    if sub_left:
        all_opt = False
    proven = bool(proven1 and (in_band or (lb is not None and lb > 1e-9)))
    from .explain import explain_after

    explanation += explain_after(study, year, units, band, final, kf, lb, max_changes)
    if sub_left:
        names = sorted({study.blocks[b].name for b, *_ in sub_left})
        explanation.append(f"The rule max_substation_share_pct = {sub_cap:g} % is not met in "
                           f"block(s) {', '.join(names)} at their lowest-share interval; more "
                           "time (--time-limit) or a looser cap may be needed.")
    out = PlanOutcome(
        option=final, block_idx=units.to_feeders(final), status=status, proven=proven,
        levels=[info1, info2, info3], rounds=sum(i["rounds"] for i in (info1, info2, info3)),
        band_intervals=int(band_set.size), mad_intervals=int(mad_set.size),
        lower_bound_worst=lb, explanation=explanation, seconds=time.perf_counter() - t_start,
        solver=solver, solver_version=solver_version(solver),
        heuristic={"worst_violation_rel": h_key[0], "mad_pp": h_key[1], "changes": h_key[2]},
        full_year={"worst_violation_rel": kf[0], "mad_pp": kf[1], "changes": kf[2]},
        combination=("sequential, no weights: level 1 minimises the worst relative band "
                     "violation z with the MILP over interval rounds until the full-year check "
                     "agrees (exact when the last round is solved to optimality); level 2 "
                     "minimises the full-year mean absolute deviation from target by exact "
                     "MILP solves on neighbourhoods of block pairs (deviation modelled on a "
                     f"systematic sample of {mad_set.size} intervals, every step accepted only "
                     f"if the full-year check keeps z ≤ z* + {Z_TOL:g} and the full-year "
                     "deviation falls); level 3 minimises changed feeders the same way, holding "
                     f"the deviation within {s.deviation_tolerance_pct:g} % of level 2's "
                     "(setting deviation_tolerance_pct). Levels 2 and "
                     "3 are local optima, not proven global ones"),
        events=events + (["a solver error occurred; the best plan found so far is returned"]
                         if err else []),
    )
    # what would more changes give?
    if max_changes is not None and not in_band and sub_cap is None:
        out.alternatives = _without_cap(study, year, units, band, solver, seed, gap, tl)
        alt = out.alternatives
        if alt.get("changes") is not None and alt["worst_violation_rel"] < kf[0] - Z_TOL:
            out.explanation.append(
                f"max_changes = {max_changes} cannot bring every block within its band (best "
                f"worst violation {100 * kf[0]:.1f} % of target); without the cap, "
                f"{int(out.alternatives['changes'])} changes give a worst violation of "
                f"{100 * out.alternatives['worst_violation_rel']:.1f} % of target.")
    return out


def _without_cap(study, year, units, band, solver, seed, gap, tl) -> dict:
    """Plan again without max_changes (half the time) to say what more changes would give."""
    t_end = time.perf_counter() + max(2.0, 0.5 * tl)
    h_opt, _ = heuristic_plan(units, band, seed, time_budget_s=max(1.0, 0.1 * tl))
    band_set = np.union1d(systematic_sample(units.pp.shape[1], 24),
                          _add_worst(units, h_opt, band, np.array([], np.intp), -1.0))
    ev: list[str] = []
    opt1, info, band_set, _ = _level(units, band, "worst", band_set, np.array([], np.intp),
                                     h_opt, solver=solver, deadline=t_end - 0.3 * tl * 0.5,
                                     gap=gap, seed=seed, progress=_Progress(None), events=ev,
                                     level_name="worst violation (no cap)")
    k1 = evaluate(units, opt1, band)
    opt3, _, _, _ = _level(units, band, "changes", band_set, systematic_sample(
        units.pp.shape[1], 48), opt1, solver=solver, deadline=t_end, gap=gap, seed=seed,
        z_cap=k1[0] + Z_TOL, mad_cap=None, progress=_Progress(None), events=ev,
        level_name="changes (no cap)")
    k3 = evaluate(units, opt3, band)
    best = k3 if k3[0] <= k1[0] + Z_TOL else k1
    return {"worst_violation_rel": best[0], "mad_pp": best[1], "changes": best[2]}
