"""Say in a planner's words why a plan looks as it does, before and after solving."""

from __future__ import annotations

import math

import numpy as np

from .. import vocab
from ..domain import Study
from ..timefmt import iso_local
from .heuristic import Band, shares, violation_rel
from .units import Units, weighted_rows


def _when(years, units: Units, pos: int) -> str:
    """Scenario and local time of a column: ``no_pv 2025-06-02T13:00+02:00``."""
    k = 0 if units.col_scenario is None else int(units.col_scenario[pos])
    y = years[k]
    return f"{y.scenario} {iso_local(y.local_times[units.valid_index[pos]])}"


def _positive_rows(pp: np.ndarray, weights: np.ndarray, slab: int = 4096) -> np.ndarray:
    """``weights @ max(pp, 0)`` over slabs of columns (no full-size temporary), in pp's own
    precision (these figures only word the explanation)."""
    out = np.empty((weights.shape[0], pp.shape[1]))
    w = weights.astype(pp.dtype)
    for c0 in range(0, pp.shape[1], slab):
        out[:, c0:c0 + slab] = w @ np.maximum(pp[:, c0:c0 + slab], 0)
    return out


def explain_before(study: Study, years, units: Units, band: Band) -> list[str]:
    """Necessary conditions checked on every column (every interval of every scenario)
    before any solve.

    At a column no plan can give block b more than the sum of the positive contributions
    of the units allowed in it, nor the whole scheme more than that over all armable units
    (a unit is in one block only, and exporting feeders are best left out)."""
    out: list[str] = []
    if units.pp.shape[1] == 0:
        return ["no interval with positive demand: nothing to plan against"]
    armable = units.allowed.any(axis=1)
    w = np.vstack([armable[None, :], units.allowed.T]).astype(float)
    caps = _positive_rows(units.pp, w)  # [1 + block, column]
    total = caps[0]
    need = float(band.lo.sum())
    t = int(np.argmin(total))
    if total[t] < need - 1e-9:
        out.append(f"The armable, non-priority load at its lowest interval "
                   f"({_when(years, units, t)}) is {total[t]:.1f} % of demand, while the "
                   f"blocks' minima add to {need:.1f} %: no allocation can keep every block "
                   "in band there.")
    for b, blk in enumerate(study.blocks):
        cap = caps[1 + b]
        tb = int(np.argmin(cap))
        if cap[tb] < band.lo[b] - 1e-9:
            out.append(f"Block {blk.name}: the feeders that may be armed in it carry at most "
                       f"{cap[tb]:.1f} % of demand at {_when(years, units, tb)}, below the "
                       f"{band.lo[b]:g} % the plan must hold.")
    return out


def explain_after(study: Study, years, units: Units, band: Band, option: np.ndarray,
                  key: tuple, lower_bound: float | None, max_changes: int | None,
                  margin_pp: float = 0.0) -> list[str]:
    """Where the chosen plan still leaves a block outside the band it must hold (the band
    narrowed by the margin), and whether that is proven unavoidable."""
    out: list[str] = []
    if key[0] <= 1e-9:
        return out
    s = shares(units, option)
    v = violation_rel(s, band)
    what = "band" if not margin_pp else f"band less the {margin_pp:g} pp margin"
    for b, blk in enumerate(study.blocks):
        if v[b].max() <= 1e-9:
            continue
        t = int(np.argmax(v[b]))
        n_bad = int((v[b] > 1e-9).sum())
        low = s[b, t] < band.lo[b]
        lim = band.lo[b] if low else band.hi[b]
        out.append(f"Block {blk.name} is {'below' if low else 'above'} its {what} in "
                   f"{vocab.count(n_bad, 'interval')}; worst {s[b, t]:.1f} % against {lim:g} % at "
                   f"{_when(years, units, t)}.")
    if lower_bound is not None and lower_bound > 1e-9:
        rules = "these feeders and rules" + (f" and at most {max_changes} changes"
                                              if max_changes is not None else "")
        out.append(f"This is unavoidable with {rules}: no allocation has a worst violation "
                   f"below {100 * lower_bound:.2f} % of target (solver bound on a subset of "
                   "intervals, valid for every scenario).")
    elif max_changes is None:
        out.append("The solver did not prove that a better plan is impossible within the time "
                   "limit; a longer --time-limit may improve it.")
    return out


def explain_changes(levels: list[dict], changes: float) -> list[str]:
    """"At least 9 changes are needed; this plan makes 11" when the bound is known."""
    for info in levels:
        if info.get("level") != "relays changed" or info.get("bound") is None:
            continue
        need = max(0, math.ceil(info["bound"] - 1e-6))
        n = int(round(changes))
        if info.get("proven_optimal") and n == 0:
            return ["No relay change is needed to hold this result in every scenario."]
        if info.get("proven_optimal"):
            return [f"{vocab.count(n, 'relay change').capitalize()} "
                    f"{'is' if n == 1 else 'are'} the fewest that hold"
                    f"{'s' if n == 1 else ''} this result in every scenario (proven by the "
                    "solver's bound)."]
        if need == 0:
            return [f"The solver's bound does not rule out fewer relay changes; this plan "
                    f"makes {n}."]
        return [f"At least {vocab.count(need, 'relay change')} "
                f"{'is' if need == 1 else 'are'} needed to hold this result in every "
                f"scenario; this plan makes {n}."]
    return []


def explain_exporting(ctx, option: np.ndarray, explanation: list[str]
                      ) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """``exporting_standard_relays = avoid``: which exporting feeders on standard relays the
    plan keeps armed (only where disarming them would break the band) and which it leaves
    out.  Returns (kept, avoided) feeder ids and adds a sentence to ``explanation``."""
    units, study = ctx.units, ctx.study
    m = ctx.exporting_mask
    if m is None or not m.any():
        return (), ()
    armed = option < units.n_blocks
    ids = study.feeder_ids
    kept = tuple(ids[f] for u in np.flatnonzero(m & armed) for f in units.members[u])
    avoided = tuple(ids[f] for u in np.flatnonzero(m & ~armed) for f in units.members[u])
    if kept:
        explanation.append(
            f"{vocab.count(len(kept), 'exporting feeder')} on standard relays "
            f"{'stays' if len(kept) == 1 else 'stay'} armed: the planner found "
            f"no plan without them that holds the band in every scenario: "
            f"{', '.join(kept[:20])}"
            + (" ..." if len(kept) > 20 else "") + ".")
    if avoided:
        one = len(avoided) == 1
        explanation.append(f"{vocab.count(len(avoided), 'feeder')} that "
                           f"{'exports' if one else 'export'} in some interval and "
                           f"{'has a standard relay is' if one else 'have standard relays are'}"
                           " not armed (exporting_standard_relays = avoid).")
    return kept, avoided
