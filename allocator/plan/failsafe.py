"""What a switched plan holds if the switching stops: ``schedule → the shares with every
switchable feeder stuck in one period's block all year``, for each period.

A schedule depends on the control system switching the remote-settable relays at each
period boundary.  If that stops, each relay stays where the last switch left it; the worst
case is the period whose blocks, held all year, leave the least room to a band edge.  Each
case is a full check (:func:`allocator.check.run_checks`) of that period's column of the
schedule on every scenario.
"""

from __future__ import annotations

import numpy as np

from ..check import run_checks, smallest_headroom_pp
from ..domain import Study


def _weakest(c) -> dict:
    """The block with the least room to a band edge: its name, the edge, its share there."""
    v = min(c.verdicts, key=lambda v: min(v.headroom_to_min_pp, v.headroom_to_max_pp))
    low = v.headroom_to_min_pp <= v.headroom_to_max_pp
    return {"block": v.block, "side": "min" if low else "max",
            "share_pct": float(v.min_share_pct if low else v.max_share_pct),
            "band_edge_pct": float(v.min_pct if low else v.max_pct)}


def stuck_in_period(study: Study, years, schedule: np.ndarray, k: int) -> dict:
    """The shares if the switching stops in period ``k``: every feeder holds its block of
    that period (``schedule[:, k]``) all year; ``weakest`` names the block nearest to (or
    furthest past) a band edge, the edge and its share there."""
    c = run_checks(study, years, schedule[:, k])
    return {"stuck_in_period": study.period_names[k], "compliant": c.compliant,
            "worst_violation_pp": float(c.worst_violation_pp),
            "smallest_headroom_pp": smallest_headroom_pp(c), "weakest": _weakest(c),
            "lowest_share_pct": {v.block: v.min_share_pct for v in c.verdicts},
            "highest_share_pct": {v.block: v.max_share_pct for v in c.verdicts}}


def if_switching_fails(study: Study, years, schedule: np.ndarray) -> dict:
    """Every period's stuck case and the worst of them (largest violation, then least
    room): ``{"worst": case, "per_period": [case, ...]}``."""
    per = [stuck_in_period(study, years, schedule, k) for k in range(len(study.periods))]
    worst = max(per, key=lambda d: (d["worst_violation_pp"], -d["smallest_headroom_pp"]))
    return {"worst": worst, "per_period": per}


def fails_safe(cases: dict) -> bool:
    """True when every block stays in band in every interval whichever period the switching
    stops in (``cases``: :func:`if_switching_fails`)."""
    return all(c["worst_violation_pp"] <= 1e-9 for c in cases["per_period"])


__all__ = ["if_switching_fails", "stuck_in_period", "fails_safe"]
