"""Benchmark the switched plan against the best fixed plan (not a pytest test).

Run:  python bench/bench_switched.py                   # demo and 1000x6, 60 s per plan
      python bench/bench_switched.py --time-limit 30 --instances demo

Instances (invented data):

* ``demo``: the demo workbook (240 feeders, 5 blocks, hourly 2025, clear_sky and no_pv), its
  12 remote_switch feeders and its four periods;
* ``1000x6``: a :mod:`synthetic` network of 1,000 feeders and 6 blocks, hourly, on
  {clear_sky, no_pv}, current_block the spreadsheet practice, every fifth feeder outside a
  trip group marked remote_switch (20 %), and the four periods of the demo (two seasons ×
  day/night).

Per instance, side by side in one run, both plans counted the same way (a remote-settable
relay is set from the control room, in the fixed plan too): the smallest headroom to the
band over every block and scenario (pp; negative = outside), worst violation (pp), relays
changed in the field and set remotely, switching operations per year, feeders switched, the
smallest headroom if the switching stops in the worst period, solve seconds.  The target:
the switched plan's solve time ≤ 2 × the fixed plan's at the same size.
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

from allocator.check import smallest_headroom_pp  # noqa: E402
from allocator.domain import Period  # noqa: E402
from allocator.pipeline.plan import (PlanOptions, fixed_candidate,  # noqa: E402
                                     switched_candidate)

SEED = 7
SUMMER, WINTER = (4, 5, 6, 7, 8, 9), (10, 11, 12, 1, 2, 3)
PERIODS = (Period("summer_day", SUMMER, (0, 1, 2), 420, 1140),
           Period("summer_night", SUMMER, (0, 1, 2), 1140, 420),
           Period("winter_day", WINTER, (0, 1, 2), 420, 1140),
           Period("winter_night", WINTER, (0, 1, 2), 1140, 420))


def load(instance: str):
    if instance == "demo":
        from allocator.scenarios import build_years
        from allocator.workbook import read_study

        study = read_study(ROOT / "inputs_demo" / "lindmark.xlsx")
        return study, build_years(study)
    from synthetic import make_network, spreadsheet_practice, with_current

    n, nb = (int(x) for x in instance.split("x"))
    study, years = make_network(n, nb, SEED, ("clear_sky", "no_pv"))
    study = with_current(study, spreadsheet_practice(study, years[0]))
    feeders = tuple(replace(f, remote_switch=(i % 5 == 0 and f.trip_group is None))
                    for i, f in enumerate(study.feeders))
    return replace(study, feeders=feeders, period_list=PERIODS), years


def run(instance: str, tl: float) -> list[tuple]:
    """The fixed and the switched plan of one instance as ``plan`` makes them (the switched
    one never worse than the fixed one), counted the same way: a remote-settable relay is
    set from the control room in both (field plan counts)."""
    study, years = load(instance)
    opt = PlanOptions(time_limit_s=tl)
    t0 = time.perf_counter()
    fx = fixed_candidate(study, years, opt)
    t_fx = time.perf_counter() - t0
    t0 = time.perf_counter()
    sw = switched_candidate(study, years, opt, fixed=fx)
    t_sw = time.perf_counter() - t0
    n_sw = int(study.is_switchable.sum())
    out = []
    for c, secs in ((fx, t_fx), (sw, t_sw)):
        s = c.switched
        fail = None if c.if_fails is None else c.if_fails["worst"]["smallest_headroom_pp"]
        ops_claim = "" if s is None else next(
            (lv["claim"] for lv in c.outcome.levels if lv.get("level") ==
             "switching operations"), "fixed plan used as the schedule")
        out.append((instance, c.arming, smallest_headroom_pp(c.checks),
                    c.checks.worst_violation_pp, c.field.counts.field_relays,
                    c.field.counts.remote_relays, 0 if s is None else s.switch_ops_per_year,
                    0 if s is None else s.switched_feeders, secs, n_sw, fail, ops_claim))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--time-limit", type=float, default=60.0)
    ap.add_argument("--instances", default="demo,1000x6")
    a = ap.parse_args()
    rows = []
    for inst in a.instances.split(","):
        rows += run(inst, a.time_limit)
    print(f"time limit {a.time_limit:g} s per plan; load average "
          f"{open('/proc/loadavg').read().split()[0]}")
    print("| instance | plan | smallest headroom pp | worst violation pp | field relays | "
          "remote relays | switching ops/yr | feeders switched (of switchable) | "
          "if switching fails: headroom pp | solve s | level 3 (operations) |")
    print("|---|---|---|---|---|---|---|---|---|---|---|")
    for r in rows:
        fail = "" if r[10] is None else f"{r[10]:.3f}"
        print(f"| {r[0]} | {r[1]} | {r[2]:.3f} | {r[3]:.3f} | {r[4]} | {r[5]} | {r[6]} | "
              f"{r[7]} of {r[9]} | {fail} | {r[8]:.1f} | {r[11]} |")
    for k in range(0, len(rows), 2):
        ratio = rows[k + 1][8] / max(rows[k][8], 1e-9)
        print(f"{rows[k][0]}: switched solve time {ratio:.2f} × fixed (target ≤ 2): "
              f"{'met' if ratio <= 2 else 'not met'}")


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
