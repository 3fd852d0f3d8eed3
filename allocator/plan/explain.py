"""Say in a planner's words why a scheme cannot be held in band, before and after solving."""

from __future__ import annotations

import numpy as np

from ..domain import Study
from ..year import Year
from .heuristic import Band, shares, violation_rel
from .units import Units


def _when(year: Year, units: Units, pos: int) -> str:
    t = units.valid_index[pos]
    return year.local_times[t].strftime("%a %d %b %Y %H:%M %Z")


def explain_before(study: Study, year: Year, units: Units, band: Band) -> list[str]:
    """Necessary conditions checked on every interval before any solve.

    At interval t no plan can give block b more than the sum of the positive contributions
    of the units allowed in it, nor the whole scheme more than that over all armable units
    (a unit is in one block only, and exporting feeders are best left out)."""
    out: list[str] = []
    if units.pp.shape[1] == 0:
        return ["no interval with positive demand: nothing to plan against"]
    pos = np.maximum(units.pp, 0.0)
    armable = units.allowed.any(axis=1)
    total = pos[armable].sum(axis=0)
    need = float(band.lo.sum())
    t = int(np.argmin(total))
    if total[t] < need - 1e-9:
        out.append(f"The armable, non-priority load at its lowest interval ({_when(year, units, t)}) "
                   f"is {total[t]:.1f} % of demand, while the blocks' minima add to {need:.1f} %: "
                   "no allocation can keep every block in band there.")
    for b, blk in enumerate(study.blocks):
        cap = pos[units.allowed[:, b]].sum(axis=0)
        tb = int(np.argmin(cap))
        if cap[tb] < band.lo[b] - 1e-9:
            out.append(f"Block {blk.name}: the feeders that may be armed in it carry at most "
                       f"{cap[tb]:.1f} % of demand at {_when(year, units, tb)}, below its "
                       f"minimum of {blk.min_pct:g} %.")
    return out


def explain_after(study: Study, year: Year, units: Units, band: Band, option: np.ndarray,
                  key: tuple, lower_bound: float | None, max_changes: int | None) -> list[str]:
    """Where the chosen plan still leaves a block out of band, and whether that is proven
    unavoidable."""
    out: list[str] = []
    if key[0] <= 1e-9:
        return out
    s = shares(units, option)
    v = violation_rel(s, band)
    for b, blk in enumerate(study.blocks):
        if v[b].max() <= 1e-9:
            continue
        t = int(np.argmax(v[b]))
        n_bad = int((v[b] > 1e-9).sum())
        side = "below its minimum" if s[b, t] < band.lo[b] else "above its maximum"
        lim = blk.min_pct if s[b, t] < band.lo[b] else blk.max_pct
        out.append(f"Block {blk.name} is {side} in {n_bad} interval(s); worst {s[b, t]:.1f} % "
                   f"against {lim:g} % at {_when(year, units, t)}.")
    if lower_bound is not None and lower_bound > 1e-9:
        rules = "these feeders and rules" + (f" and at most {max_changes} changes"
                                              if max_changes is not None else "")
        out.append(f"This is unavoidable with {rules}: no allocation has a worst violation "
                   f"below {100 * lower_bound:.2f} % of target (solver bound on a subset of "
                   "intervals, valid for the whole year).")
    elif max_changes is None:
        out.append("The solver did not prove that a better plan is impossible within the time "
                   "limit; a longer --time-limit may improve it.")
    return out
