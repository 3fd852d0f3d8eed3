"""The planner's levels, solved one after the other (lexicographic, no weights).

Every level works on the *columns* of :mod:`.units`: the intervals with demand > 0 of every
scenario's year, so "every interval" means every interval of every scenario.

Level 1 minimises the worst band violation z (relative to target, with the band narrowed by
``band_margin_pp``) over the columns held in the model.  Any subset of columns gives a
*relaxation* of the full problem, so the model's optimum (or its dual bound) is a valid lower
bound for all scenarios together; when the check over every column finds nothing worse than
the model's z, the plan is optimal for every scenario.  Otherwise the worst columns of each
block are added and the model is solved again (interval rounds).

The later levels hold ``z ≤ z*`` on every column (re-verified on the full set after each
solve, with more columns added when needed).  Their order is the setting ``objective``:

* ``fewest_changes`` (default): level 2 minimises the relays whose setting changes (a trip
  group is one relay) with the same interval rounds, so its bound is valid for every
  scenario too ("at least N changes are needed"); level 3 minimises the mean absolute
  deviation from target with the change count held, by neighbourhood search (a local
  optimum, never called optimal).
* ``closest_to_target``: level 2 minimises the mean absolute deviation (neighbourhood
  search), level 3 the relays changed within ``deviation_tolerance_pct`` of level 2's
  deviation.

With ``exporting_standard_relays = avoid`` a level between 1 and 2 minimises how many
exporting feeders on standard relays stay armed (only where disarming them would break the
band); that count is then held as a cap.

A level is reported "optimal" only when it was proven so (its last MILP round solved to
optimality and the full check agreeing); otherwise "best found" with the bound beside it.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np

from ..domain import Study
from ..year import Year
from .heuristic import (Band, evaluate, heuristic_plan, revert_pass, shares, swap_revert_pass,
                        systematic_sample, violation_rel, worst_intervals)
from .model import build_model, start_vector
from .solvers import solve, solver_version
from .units import Units, build_units, substation_excess

Z_TOL = 1e-7  # absolute tolerance on the relative violation z when capping later levels
ADD_PER_BLOCK = 6  # columns added per block and round (level 1)
ADD_PER_BLOCK_CAPPED = 24  # ... in the levels that hold z ≤ z*: a violated plan is useless
EXTREMES_PER_BLOCK = 12  # lowest and highest columns of each block seeded into level 2
MAX_ROUNDS = 40
ROUND_SHARE = 0.15  # a level-1 round may use at most this share of the time limit
ROUND_MIN_S = 5.0
#: the planner's phases end at these fractions of the time limit (the rest is the margin
#: for the final check); a phase that finishes early leaves its time to the next
PHASE_END = {"heuristic": 0.20, "worst": 0.40, "exporting": 0.50, "level2": 0.78}
FINAL_MARGIN_S = 2.0
#: how many leading entries of :meth:`_Ctx.key` are the level's own objective
PRIMARY = {"worst": 3, "changes": 4, "armed": 3}
LEVEL_NAMES = {"worst": "worst violation", "changes": "relays changed",
               "mad": "deviation from target", "armed": "exporting feeders kept armed"}


@dataclass
class PlanOutcome:
    option: np.ndarray  # [unit]
    block_idx: np.ndarray  # [feeder]
    status: str  # "in_band" | "out_of_band"
    proven: bool  # level 1 (worst violation) proven optimal for every scenario
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
    objective: str = "fewest_changes"
    margin_pp: float = 0.0
    scenarios: tuple[str, ...] = ()
    relays_changed: int = 0
    feeders_changed: int = 0
    changes_lower_bound: int | None = None
    exporting_kept: tuple[str, ...] = ()  # feeder ids: exporting standard relays kept armed
    exporting_avoided: tuple[str, ...] = ()  # feeder ids not armed because they export


def band_of(study: Study, margin_pp: float = 0.0) -> Band:
    """The band the planner holds: [min + margin, max − margin] per block, never past the
    target (a margin wider than half the band pins the block at its target)."""
    t = np.array([b.target_pct for b in study.blocks], dtype=float)
    lo = np.array([b.min_pct for b in study.blocks], dtype=float) + margin_pp
    hi = np.array([b.max_pct for b in study.blocks], dtype=float) - margin_pp
    return Band(t, np.minimum(lo, t), np.maximum(hi, t))


def _add_worst(units, option, band, band_set, z_ref, k=ADD_PER_BLOCK) -> np.ndarray:
    """Columns where the full check finds a violation above ``z_ref`` that the model does
    not hold yet: the k worst per block."""
    v = violation_rel(shares(units, option), band)
    v[:, band_set] = -1.0
    new = []
    for b in range(v.shape[0]):
        over = np.flatnonzero(v[b] > z_ref + Z_TOL)
        if over.size:
            new.append(over[np.argsort(-v[b, over], kind="stable")[:k]])
    return np.unique(np.concatenate(new)) if new else np.array([], dtype=np.intp)


@dataclass
class _Ctx:
    """What every level needs: the units, the band, the clock and the notes."""

    study: Study
    units: Units
    band: Band
    solver: str
    gap: float
    seed: int
    t_start: float
    time_limit_s: float
    progress: object
    events: list[str]
    max_changes: int | None
    sub_cap: float | None
    armed_caps: list = field(default_factory=list)
    exporting_mask: np.ndarray | None = None  # [unit] exporting standard relays
    years: tuple = ()
    objective: str = "fewest_changes"

    def at(self, phase: str) -> float:
        if phase == "end":
            return self.t_start + self.time_limit_s - min(FINAL_MARGIN_S,
                                                          0.03 * self.time_limit_s)
        return self.t_start + PHASE_END[phase] * self.time_limit_s

    def prog(self, **kw) -> None:
        if self.progress is not None:
            self.progress(**kw)

    def key(self, option: np.ndarray, level: str) -> tuple:
        """Order plans: hard rules first, then the level's objective on every column, then
        the later levels' objectives as tie-breaks (:data:`PRIMARY` says how many entries
        are the level's own)."""
        k = evaluate(self.units, option, self.band)
        n_sub = len(substation_excess(self.units, option, self.sub_cap))
        over = sum(max(0.0, float(np.sum(m[option < self.units.n_blocks])) - cap)
                   for m, cap in self.armed_caps)
        if level == "changes":
            return (n_sub, over, round(k[0], 9), k[2], k[1])
        if level == "armed":
            return (n_sub, round(k[0], 9), self.armed_count(option), k[2], k[1])
        if self.objective == "fewest_changes":
            return (n_sub, over, round(k[0], 9), k[2], k[1])
        return (n_sub, over, round(k[0], 9), k[1], k[2])

    def armed_count(self, option: np.ndarray) -> int:
        m = self.exporting_mask
        return 0 if m is None else int(np.sum(m & (option < self.units.n_blocks)))


def _solve_round(ctx: _Ctx, level: str, band_set, mad_set, warm, sub_rows, remaining, *,
                 z_cap, mad_cap, armed_cost, round_share):
    """Build one round's model on ``band_set`` and solve it warm-started from ``warm``
    within ``remaining`` s (at most the round's share of the time limit): (model, result)."""
    units, band = ctx.units, ctx.band
    model = build_model(units, band.target, band.lo, band.hi, band_set, mad_set, level,
                        z_cap=z_cap, mad_cap=mad_cap, max_changes=ctx.max_changes,
                        substation_rows=sub_rows, armed_caps=ctx.armed_caps,
                        armed_cost=armed_cost)
    start = start_vector(model, units, warm, band.target, band.lo, band.hi)
    cap = max(ROUND_MIN_S, round_share * ctx.time_limit_s)
    out = solve(model.arrays, ctx.solver, time_limit_s=min(remaining, cap),
                mip_gap=ctx.gap, start=start, seed=ctx.seed)
    return model, out


def _best_of_level(ctx: _Ctx, level: str, option, best_opt, best_key, info) -> np.ndarray:
    """The last round's plan, or the best earlier one when the last is worse (noted when
    worse on the level's own objective, not only on a tie-break)."""
    last_key = ctx.key(option, level)
    if last_key > best_key:
        p = PRIMARY.get(level, len(best_key))
        if last_key[:p] != best_key[:p]:  # worse on the level itself, not a tie-break
            ctx.events.append(f"{info['level']}: the last round's plan was worse than an "
                              "earlier one (time limit); the best plan found is kept")
            info["converged"] = False
        option = best_opt
    return option


def _level(ctx: _Ctx, level: str, band_set, mad_set, incumbent, *, deadline, z_cap=None,
           mad_cap=None, armed_cost=None, round_share=ROUND_SHARE):
    """Solve one level with interval rounds.  Returns (option, info, band_set).

    Level 1 warm-starts each round from the last round's plan (any plan is feasible there,
    z is free).  The capped levels warm-start from the best plan that holds z ≤ z* on every
    column (feasible for every round's model), and add more columns per round, since a plan
    that breaks the cap anywhere cannot be used."""
    units, band = ctx.units, ctx.band
    name = LEVEL_NAMES[level]
    info = {"level": name, "method": "MILP with interval rounds", "rounds": 0,
            "status": None, "objective": None, "bound": None, "gap": None, "seconds": 0.0,
            "converged": False}
    t0 = time.perf_counter()
    sub_rows: list = []
    option = incumbent.copy()
    best_opt, best_key = incumbent.copy(), ctx.key(incumbent, level)
    bounds: list[float] = []
    for rnd in range(MAX_ROUNDS):
        remaining = deadline - time.perf_counter()
        if remaining <= 0.5:
            ctx.events.append(f"{name}: time budget used before round {rnd + 1}")
            info["status"] = info["status"] or "time_limit"
            break
        model, out = _solve_round(ctx, level, band_set, mad_set,
                                  option if level == "worst" else best_opt, sub_rows,
                                  remaining, z_cap=z_cap, mad_cap=mad_cap,
                                  armed_cost=armed_cost, round_share=round_share)
        info.update(rounds=rnd + 1, seconds=time.perf_counter() - t0)
        if out.x is None:
            ctx.events.append(f"{name} round {rnd + 1}: solver {out.status} ({out.message}); "
                              "keeping the previous plan")
            info["status"] = out.status
            break
        option = model.option_from_x(out.x, units.n, units.n_blocks)
        info.update(status=out.status, objective=out.objective, bound=out.bound, gap=out.gap)
        if out.bound is not None:
            bounds.append(out.bound)
        if ctx.key(option, level) < best_key:
            best_opt, best_key = option.copy(), ctx.key(option, level)
        z_ref = float(out.x[model.i_z]) if level == "worst" else z_cap
        new = _add_worst(units, option, band, band_set, z_ref,
                         ADD_PER_BLOCK if level == "worst" else ADD_PER_BLOCK_CAPPED)
        ctx.prog(level=name, round=rnd + 1, intervals=int(band_set.size),
                 worst=evaluate(units, option, band)[0], status=out.status)
        more = substation_excess(units, option, ctx.sub_cap)
        sub_rows += more
        if new.size == 0 and not more:
            info["converged"] = True
            break
        band_set = np.union1d(band_set, new)
    option = _best_of_level(ctx, level, option, best_opt, best_key, info)
    info["bound"] = max(bounds) if bounds else None
    return option, info, band_set


# --------------------------------------------------------------------------------------------
# the phases
# --------------------------------------------------------------------------------------------
def _forced_changes(units: Units) -> int:
    """Changes the hard rules force on the current allocation (units whose current block
    breaks a rule, or a trip group split across blocks)."""
    ok = np.concatenate([units.allowed, np.ones((units.n, 1), dtype=bool)], axis=1)
    return int(np.where(ok, units.change_cost, np.inf).min(axis=1).sum())


def _restrict_exporting(study: Study, units: Units) -> tuple[Units, np.ndarray]:
    """``exporting_standard_relays = avoid``: an exporting unit on a standard relay may stay
    in its current block (if armed now) or be disarmed; it is never armed anew."""
    mask = units.exports_standard.copy() if units.exports_standard is not None else \
        np.zeros(units.n, dtype=bool)
    allowed = units.allowed.copy()
    nb = units.n_blocks
    keep = mask & (units.current < nb)
    cur_ok = np.zeros_like(allowed)
    cur_ok[np.flatnonzero(keep), units.current[keep]] = True
    allowed[mask] = allowed[mask] & cur_ok[mask]
    return replace(units, allowed=allowed), mask


def _phase_worst(ctx: _Ctx, h_opt) -> tuple[np.ndarray, dict, np.ndarray]:
    units, band = ctx.units, ctx.band
    band_set = np.union1d(worst_intervals(units, h_opt, band, 10),
                          systematic_sample(units.pp.shape[1], 24))
    opt1, info, band_set = _level(ctx, "worst", band_set, np.array([], np.intp), h_opt,
                                  deadline=ctx.at("worst"))
    h_key, k1 = evaluate(units, h_opt, band), evaluate(units, opt1, band)
    if k1[0] > h_key[0] + Z_TOL and not substation_excess(units, h_opt, ctx.sub_cap):
        ctx.events.append("level 1 ended above the heuristic start; the start is kept")
        opt1 = h_opt
        info["converged"] = False
    elif (ctx.objective == "fewest_changes" and h_key[0] <= k1[0] + Z_TOL
          and h_key[2] < k1[2] and not substation_excess(units, h_opt, ctx.sub_cap)):
        opt1 = h_opt  # as good on level 1 and nearer the current allocation
    k1 = evaluate(units, opt1, band)
    info["proven_optimal"] = bool(info["status"] == "optimal" and info["converged"]
                                  and k1[0] <= (info["objective"] or 0) + 1e-6)
    return opt1, info, band_set


def _phase_exporting(ctx: _Ctx, opt, band_set, z_cap):
    """Fewest exporting standard relays kept armed, with z ≤ z*; the count becomes a cap."""
    if ctx.exporting_mask is None or ctx.armed_count(opt) == 0:
        return opt, None, band_set
    cost = ctx.exporting_mask.astype(float)
    opt_e, info, band_set = _level(ctx, "armed", band_set, np.array([], np.intp), opt,
                                   deadline=ctx.at("exporting"), z_cap=z_cap, armed_cost=cost)
    k = ctx.armed_count(opt_e)
    info["objective"] = k
    info["proven_optimal"] = bool(info["status"] == "optimal" and info["converged"])
    ctx.armed_caps.append((ctx.exporting_mask, float(k)))
    return opt_e, info, band_set


def _frozen_for_revert(ctx: _Ctx, opt) -> np.ndarray:
    """Units a revert pass must not move back: exporting standard relays disarmed by the
    plan (re-arming them would break the exporting cap)."""
    m = ctx.exporting_mask
    if m is None:
        return np.zeros(ctx.units.n, dtype=bool)
    return m & (opt == ctx.units.n_blocks)


def _reverted(ctx: _Ctx, opt, z_cap, mad_cap, deadline) -> np.ndarray:
    """Cheap passes that move changed units back to their current block (one at a time,
    then swapped pairs, then one at a time again) while z ≤ z_cap and MAD ≤ mad_cap."""
    units, band = ctx.units, ctx.band
    frozen = _frozen_for_revert(ctx, opt)
    view = replace(units, current=np.where(frozen, opt, units.current))
    r = revert_pass(view, band, opt, z_cap, mad_cap, np.random.default_rng(ctx.seed + 3),
                    deadline=deadline)
    r = swap_revert_pass(view, band, r, z_cap, mad_cap, deadline=deadline)
    r = revert_pass(view, band, r, z_cap, mad_cap, np.random.default_rng(ctx.seed + 4),
                    deadline=deadline)
    if substation_excess(units, r, ctx.sub_cap) or ctx.key(r, "changes")[1] > 0:
        return opt
    return r


def _lns(ctx: _Ctx, level, opt, band_set, mad_set, z_cap, deadline, max_changes,
         mad_cap_full=None, mad_cap_sample=None):
    from .lns import neighbourhood_search

    return neighbourhood_search(
        ctx.units, ctx.band, opt, level, band_set, mad_set, z_cap=z_cap,
        mad_cap_full=mad_cap_full, mad_cap_sample=mad_cap_sample, max_changes=max_changes,
        solver=ctx.solver, seed=ctx.seed, deadline=deadline, events=ctx.events,
        progress=ctx.prog, sub_cap_pct=ctx.sub_cap, armed_caps=ctx.armed_caps)


def _extremes(units: Units, options, k: int = EXTREMES_PER_BLOCK) -> np.ndarray:
    """Each block's k lowest- and k highest-share columns under each of ``options``: where
    the band's edges are likely to bind for plans near them."""
    out = []
    for opt in options:
        s = shares(units, np.asarray(opt))
        kk = min(k, s.shape[1])
        if kk == 0:
            continue
        out += [np.argpartition(s, kk - 1, axis=1)[:, :kk].ravel(),
                np.argpartition(-s, kk - 1, axis=1)[:, :kk].ravel()]
    return np.unique(np.concatenate(out)) if out else np.array([], dtype=np.intp)


def _phase_fewest_changes(ctx: _Ctx, opt1, band_set, mad_set, z_cap):
    """Level 2: fewest relays changed (MILP rounds, bound valid for every scenario);
    level 3: closest to target with that many changes (neighbourhood search)."""
    # the revert passes get a quarter of the level's time at most (their swapped-pair
    # scoring grows with units² × columns); the MILP rounds need the rest
    now = time.perf_counter()
    start = _reverted(ctx, opt1, z_cap, np.inf, now + 0.25 * max(0.0, ctx.at("level2") - now))
    band_set = np.union1d(band_set, _extremes(ctx.units, (ctx.units.current, start)))
    opt2, info2, band_set = _level(ctx, "changes", band_set, np.array([], np.intp), start,
                                   deadline=ctx.at("level2"), z_cap=z_cap, round_share=0.35)
    n2 = ctx.units.changes(opt2)
    bound = info2["bound"]
    proven = bool(info2["status"] == "optimal" and info2["converged"])
    if bound is not None:
        proven = proven or math.ceil(bound - 1e-6) >= n2
    if not proven and time.perf_counter() < ctx.at("level2"):
        opt_l, info_l = _lns(ctx, "changes", opt2, band_set, mad_set, z_cap, ctx.at("level2"),
                             ctx.max_changes)
        if ctx.key(opt_l, "changes") < ctx.key(opt2, "changes"):
            opt2, n2 = opt_l, ctx.units.changes(opt_l)
            info2["method"] += ", then neighbourhood search"
        if bound is not None:
            proven = math.ceil(bound - 1e-6) >= n2
    info2.update(objective=n2, proven_optimal=proven)
    cap = int(round(n2)) if ctx.max_changes is None else min(int(round(n2)), ctx.max_changes)
    opt3, info3 = _lns(ctx, "mad", opt2, band_set, mad_set, z_cap, ctx.at("end"), cap)
    info3["proven_optimal"] = False
    return opt3, [info2, info3], band_set


def _phase_closest(ctx: _Ctx, opt1, band_set, mad_set, z_cap):
    """Level 2: mean absolute deviation (neighbourhood search); level 3: relays changed
    with the deviation held within deviation_tolerance_pct."""
    units, band = ctx.units, ctx.band
    opt2, info2 = _lns(ctx, "mad", opt1, band_set, mad_set, z_cap, ctx.at("level2"),
                       ctx.max_changes)
    k2 = evaluate(units, opt2, band)
    tol = ctx.study.settings.deviation_tolerance_pct / 100.0
    s2 = shares(units, opt2, mad_set)
    mad_cap_sample = float(np.abs(s2 - band.target[:, None]).mean()) * (1 + tol) + 1e-12
    mad_cap_full = k2[1] * (1 + tol) + 1e-12
    now = time.perf_counter()
    opt2r = _reverted(ctx, opt2, z_cap, mad_cap_full, now + 0.25 * max(0.0, ctx.at("end") - now))
    opt3, info3 = _lns(ctx, "changes", opt2r, band_set, mad_set, z_cap, ctx.at("end"),
                       ctx.max_changes, mad_cap_full=mad_cap_full,
                       mad_cap_sample=mad_cap_sample)
    info2["proven_optimal"] = info3["proven_optimal"] = False
    return opt3, [info2, info3], band_set


# --------------------------------------------------------------------------------------------
# the whole plan
# --------------------------------------------------------------------------------------------
def _claim(info: dict, seconds: float, unit: str = "") -> str:
    """What may be said of a level: "optimal" only when proven."""
    if info.get("proven_optimal"):
        return "optimal (proven)"
    b = info.get("bound")
    txt = f"best found in {seconds:.1f} s" if seconds < 10 else f"best found in {seconds:.0f} s"
    if info.get("level") == LEVEL_NAMES["changes"] and b is not None and b > 1 - 1e-6:
        return txt + f"; at least {max(0, math.ceil(b - 1e-6))} {unit or 'changes'} are needed"
    if info.get("level") == LEVEL_NAMES["worst"] and b is not None and b > 1e-9:
        return txt + f"; no plan has a worst violation below {100 * b:.3g} % of target"
    if info.get("method", "").startswith("neighbourhood"):
        return txt + " (a local optimum of the neighbourhood search)"
    return txt


def _start(ctx: _Ctx, explanation: list[str]) -> np.ndarray:
    """The explanation of necessary conditions, the forced changes, the heuristic start."""
    from .explain import explain_before

    explanation += explain_before(ctx.study, ctx.years, ctx.units, ctx.band)
    forced = _forced_changes(ctx.units)
    if ctx.max_changes is not None and ctx.max_changes < forced:
        explanation.append(
            f"max_changes = {ctx.max_changes} is below the {forced} change(s) the hard rules "
            "force on the current allocation (relays whose current block breaks a rule); "
            f"planned with max_changes = {forced}.")
        ctx.max_changes = forced
    ctx.prog(level="heuristic", round=0, intervals=0, worst=float("nan"), status="running")
    prefer = "changes" if ctx.objective == "fewest_changes" else "mad"
    h_opt, work = heuristic_plan(ctx.units, ctx.band, ctx.seed,
                                 time_budget_s=max(1.0, ctx.at("heuristic") - time.perf_counter()),
                                 max_changes=ctx.max_changes, prefer=prefer)
    ctx.prog(level="heuristic", round=0, intervals=int(work.size),
             worst=evaluate(ctx.units, h_opt, ctx.band)[0], status="done")
    return h_opt


def plan_allocation(study: Study, years, solver: str = "highs",
                    time_limit_s: float | None = None, max_changes: int | None = None,
                    seed: int = 0, progress=None, mip_gap: float | None = None,
                    n_mad_sample: int | None = None, objective: str | None = None,
                    margin_pp: float | None = None, units: Units | None = None
                    ) -> PlanOutcome:
    """Plan an allocation of feeders to blocks that holds every interval of every scenario.

    ``years``: one :class:`Year` or the scenarios' years (:func:`allocator.scenarios.
    build_years`).  ``objective`` and ``margin_pp`` default to the settings ``objective``
    and ``band_margin_pp``.  Returns a :class:`PlanOutcome`; the caller runs the armed-load
    check on ``outcome.block_idx`` for every scenario (the reported figures are the check's).
    ``units``: prebuilt units (the switched plan passes its period units).
    """
    t_start = time.perf_counter()
    years = (years,) if isinstance(years, Year) else tuple(years)
    s = study.settings
    objective = objective or s.objective
    margin = float(s.band_margin_pp if margin_pp is None else margin_pp)
    units = build_units(study, years) if units is None else units
    mask = None
    if s.exporting_standard_relays == "avoid":
        units, mask = _restrict_exporting(study, units)
    ctx = _Ctx(study, units, band_of(study, margin + units.guard_pp), solver,
               float(mip_gap if mip_gap is not None else s.mip_gap), seed, t_start,
               float(time_limit_s if time_limit_s is not None else s.solver_time_limit_s),
               progress, [], max_changes if max_changes is not None else s.max_changes,
               s.max_substation_share_pct, exporting_mask=mask, years=years,
               objective=objective)
    explanation: list[str] = []
    h_opt = _start(ctx, explanation)
    opt1, info1, band_set = _phase_worst(ctx, h_opt)
    z_cap = evaluate(units, opt1, ctx.band)[0] + Z_TOL
    n_mad = n_mad_sample or int(np.clip(4.0e5 / (units.n_blocks * max(units.n, 1)), 48, 365))
    mad_set = np.union1d(systematic_sample(units.pp.shape[1], n_mad * len(years)), band_set)
    opt_e, info_e, band_set = _phase_exporting(ctx, opt1, band_set, z_cap)
    phase = _phase_fewest_changes if objective == "fewest_changes" else _phase_closest
    final, later, band_set = phase(ctx, opt_e, band_set, mad_set, z_cap)
    levels = [info1] + ([info_e] if info_e else []) + later
    return _outcome(ctx, years, objective, margin, final, levels, info1, h_opt, band_set,
                    mad_set, explanation)


def _substation_left(ctx: _Ctx, final, explanation: list[str]) -> list:
    """The block/substation pairs of plan ``final`` still above max_substation_share_pct
    (noted in the events and the explanation)."""
    sub_left = substation_excess(ctx.units, final, ctx.sub_cap)
    if sub_left:
        names = sorted({ctx.study.blocks[b].name for b, *_ in sub_left})
        ctx.events.append(f"max_substation_share_pct = {ctx.sub_cap:g}: {len(sub_left)} "
                          "block/substation pair(s) still above the cap at the block's "
                          "lowest-share interval (the solver ran out of rounds or time)")
        explanation.append(f"The rule max_substation_share_pct = {ctx.sub_cap:g} % is not met "
                           f"in block(s) {', '.join(names)} at their lowest-share interval; "
                           "more time (--time-limit) or a looser cap may be needed.")
    return sub_left


def _claim_levels(ctx: _Ctx, levels, info1, sub_left, elapsed: float,
                  explanation: list[str]) -> float | None:
    """Set each level's proven_optimal and claim (``elapsed`` in s); returns the lower
    bound on the worst violation, None under a substation cap (explained)."""
    capped = ctx.sub_cap is not None
    for info in levels:
        if capped:
            # the substation rule binds at each plan's own weakest interval; the planner
            # holds it by rows at the weakest intervals it has met, which may exclude
            # plans that keep the rule, so no bound or optimality is claimed with it
            info["proven_optimal"], info["bound"] = False, None
        info["proven_optimal"] = bool(info.get("proven_optimal")) and not sub_left
        # the level's own time (the whole run's when a level kept none)
        info["claim"] = _claim(info, float(info.get("seconds", elapsed)), "relay changes")
    lb = None if capped else info1["bound"] if info1["bound"] is not None else (
        info1["objective"] if info1["status"] == "optimal" else None)
    if capped:
        explanation.append(
            f"max_substation_share_pct = {ctx.sub_cap:g} % is held by rows at the weakest "
            "intervals the planner met; a plan that keeps the rule at its own weakest "
            "interval can be missed, so no level is claimed optimal and no bound is given.")
    return lb


def _changes_lower_bound(levels, objective: str) -> int | None:
    """At least this many relay changes are needed (level ``changes``' bound, rounded up),
    under objective fewest_changes only."""
    ch_info = next((i for i in levels if i["level"] == LEVEL_NAMES["changes"]), None)
    ch_lb = None
    if ch_info is not None and ch_info.get("bound") is not None and objective == "fewest_changes":
        ch_lb = max(0, math.ceil(ch_info["bound"] - 1e-6))
    return ch_lb


def _outcome(ctx, years, objective, margin, final, levels, info1, h_opt, band_set, mad_set,
             explanation) -> PlanOutcome:
    """The :class:`PlanOutcome` of plan ``final`` with its claims, bounds and explanation."""
    units, band, study = ctx.units, ctx.band, ctx.study
    kf = evaluate(units, final, band)
    sub_left = _substation_left(ctx, final, explanation)
    elapsed = time.perf_counter() - ctx.t_start
    lb = _claim_levels(ctx, levels, info1, sub_left, elapsed, explanation)
    from .explain import explain_after, explain_changes, explain_exporting

    explanation += explain_after(study, years, units, band, final, kf, lb, ctx.max_changes,
                                 margin)
    explanation += explain_changes(levels, kf[2])
    block_idx = units.to_feeders(final)
    kept, avoided = explain_exporting(ctx, final, explanation)
    ch_lb = _changes_lower_bound(levels, objective)
    err = any(i.get("status") == "error" for i in levels)
    out = PlanOutcome(
        option=final, block_idx=block_idx,
        status="in_band" if kf[0] <= 1e-9 and not sub_left else "out_of_band",
        proven=bool(info1["proven_optimal"] and not sub_left),
        levels=levels, rounds=sum(i.get("rounds", 0) for i in levels),
        band_intervals=int(band_set.size), mad_intervals=int(mad_set.size),
        lower_bound_worst=lb, explanation=explanation, seconds=elapsed,
        solver=ctx.solver, solver_version=solver_version(ctx.solver),
        heuristic=dict(zip(("worst_violation_rel", "mad_pp", "changes"),
                           evaluate(units, h_opt, band))),
        full_year={"worst_violation_rel": kf[0], "mad_pp": kf[1], "changes": kf[2]},
        combination=_combination(objective, study, mad_set.size, margin),
        events=ctx.events + (["a solver error occurred; the best plan found so far is "
                              "returned"] if err else []),
        objective=objective, margin_pp=margin, scenarios=tuple(y.scenario for y in years),
        relays_changed=study.relays_changed(study.field_allocation(block_idx)),
        feeders_changed=int((block_idx != study.current_assignment).sum()),
        changes_lower_bound=ch_lb, exporting_kept=kept, exporting_avoided=avoided)
    if ctx.max_changes is not None and kf[0] > 1e-9 and ctx.sub_cap is None:
        _explain_cap(ctx, years, out, kf)
    return out


def _combination(objective: str, study: Study, n_mad: int, margin: float) -> str:
    tol = study.settings.deviation_tolerance_pct
    head = ("sequential, no weights, on every interval of every scenario: level 1 minimises "
            "the worst relative band violation z"
            + (f" with the band narrowed by {margin:g} pp on each side" if margin else "")
            + " by MILP interval rounds until the full check agrees (exact when the last "
            f"round is solved to optimality), holding z ≤ z* + {Z_TOL:g} in every later "
            "level; ")
    if objective == "fewest_changes":
        return head + ("level 2 minimises the relays whose setting changes (a trip group is "
                       "one relay) by the same interval rounds, so its bound holds for every "
                       "scenario; level 3 lowers the mean absolute deviation from target with "
                       "that many changes at most, by exact MILP solves on neighbourhoods of "
                       f"block pairs (deviation sampled on {n_mad} intervals, every step "
                       "accepted only on the full check); level 3 is a local optimum")
    return head + ("level 2 minimises the mean absolute deviation from target by "
                   "neighbourhood search; level 3 minimises relays changed the same way, "
                   f"holding the deviation within {tol:g} % of level 2's (setting "
                   "deviation_tolerance_pct); levels 2 and 3 are local optima")


def _explain_cap(ctx, years, out: PlanOutcome, kf) -> None:
    """What would more changes give? Plan again without max_changes (half the time)."""
    alt = _without_cap(ctx, years)
    out.alternatives = alt
    if alt.get("changes") is not None and alt["worst_violation_rel"] < kf[0] - Z_TOL:
        out.explanation.append(
            f"max_changes = {ctx.max_changes} cannot bring every block within its band (best "
            f"worst violation {100 * kf[0]:.1f} % of target); without the cap, "
            f"{int(alt['changes'])} changes give a worst violation of "
            f"{100 * alt['worst_violation_rel']:.1f} % of target.")


def _without_cap(ctx: _Ctx, years) -> dict:
    tl = ctx.time_limit_s
    sub = replace(ctx, max_changes=None, events=[], progress=None,
                  t_start=time.perf_counter(), time_limit_s=max(2.0, 0.5 * tl),
                  armed_caps=list(ctx.armed_caps))
    units, band = ctx.units, ctx.band
    h_opt, _ = heuristic_plan(units, band, ctx.seed, time_budget_s=max(1.0, 0.1 * tl))
    band_set = np.union1d(systematic_sample(units.pp.shape[1], 24),
                          _add_worst(units, h_opt, band, np.array([], np.intp), -1.0))
    opt1, _, band_set = _level(sub, "worst", band_set, np.array([], np.intp), h_opt,
                               deadline=sub.at("level2"))
    k1 = evaluate(units, opt1, band)
    opt3, _, _ = _level(sub, "changes", band_set, np.array([], np.intp), opt1,
                        deadline=sub.at("end"), z_cap=k1[0] + Z_TOL)
    k3 = evaluate(units, opt3, band)
    best = k3 if k3[0] <= k1[0] + Z_TOL else k1
    return {"worst_violation_rel": best[0], "mad_pp": best[1], "changes": best[2]}


__all__ = ["PlanOutcome", "plan_allocation", "band_of"]
