"""Benchmark ``allocator.field.visits.visit_order`` on the demo network (not a pytest test).

Run:  python bench/bench_visits.py [--substations 4,8,12,16,30]

For each K, an invented assignment moves one or two armable feeders at each of K substations
of the demo workbook (seeded, so runs repeat; the demo has 11 substations, so K is capped
there), checks it on the demo's two scenarios (clear_sky and no_pv, hourly, 17,520 columns)
and times ``visit_order`` (wall clock): the exact search up to ``EXACT_MAX_SUBSTATIONS``
substations, greedy above; the last row times the greedy search on the largest case.
Target: the exact search on 11 substations in <= 5 s.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

TARGET_S = 5.0


def _assignment(study, k: int, rng) -> np.ndarray:
    new = study.current_assignment.copy()
    allowed = study.allowed_matrix()
    subs = sorted({f.substation for f in study.feeders})
    for s in rng.choice(subs, size=min(k, len(subs)), replace=False):
        idx = [i for i, f in enumerate(study.feeders) if f.substation == s
               and allowed[i].any() and not f.trip_group]
        for i in rng.choice(idx, size=min(2, len(idx)), replace=False):
            opts = [b for b in np.flatnonzero(allowed[i]) if b != new[i]] + [-1]
            new[i] = rng.choice(opts)
    return new


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--substations", default="4,8,12,16,30")
    args = ap.parse_args()
    from allocator.check import run_checks
    from allocator.scenarios import build_years
    from allocator.workbook import read_study

    import allocator.field.visits as V

    study = read_study(ROOT / "inputs_demo" / "lindmark.xlsx")
    years = build_years(study)
    print(f"{'substations':>11} {'relays':>6} {'method':>7} {'proven':>6} {'seconds':>8}")
    ks = [int(x) for x in args.substations.split(",")]
    for k, greedy in [(k, False) for k in ks] + [(ks[-1], True)]:
        new = _assignment(study, k, np.random.default_rng(k))
        cs = run_checks(study, years, new)
        V.EXACT_MAX_SUBSTATIONS = 0 if greedy else 12
        t0 = time.perf_counter()
        order = V.visit_order(cs, study.current_assignment)
        dt = time.perf_counter() - t0
        print(f"{len(order.visits):>11} {len(order.changes):>6} {order.method:>7} "
              f"{str(order.proven):>6} {dt:>8.2f}")
    print(f"target: the exact search on the demo's 11 substations in <= {TARGET_S:g} s")


if __name__ == "__main__":
    main()
