"""Load test of the command line under a memory cap (not a pytest test).

Run:  /work/venv/bin/python bench/bench_load.py [--check-feeders 5000] [--plan-feeders 1000]
                                                [--cap-gb 8] [--plan-time-limit 120]
                                                [--full-reports] [--json FILE]

Two runs, each ``python -m allocator ...`` in a fresh subprocess whose address space is
capped with ``resource.setrlimit(RLIMIT_AS, cap)`` (set in ``preexec_fn``):

* ``check`` on a synthetic workbook of N feeders at 15-minute intervals (35,040 intervals in
  2025), ``--format none`` (``--full-reports`` adds a run with every report format);
* ``plan`` on a synthetic workbook of M feeders at hourly intervals (8,760 intervals).

Reported per run: exit code, wall time (including reading the workbook and writing the
outputs) and the child's peak resident set size (``ru_maxrss`` from ``os.wait4`` for that
child alone).  Workbooks are written to a temporary folder first (not timed).  All feeders and
load shapes are invented.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

sys.path.insert(0, str(ROOT / "bench"))
from bench_year import PROFILES, SEASONS, _value  # noqa: E402  (one invented load shape)


def write_study(path: Path, n_feeders: int, interval_minutes: int) -> Path:
    """N invented feeders on 60 substations: ~9 % without relay, ~15 % direction-blocked,
    some PV, about a fifth each currently in S1 and S2, trip groups of two."""
    from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

    feeders = []
    for i in range(n_feeders):
        relay = "none" if i % 11 == 0 else ("direction_blocked" if i % 7 == 0 else "standard")
        cur = None if relay == "none" else {0: "S1", 1: "S2"}.get(i % 5)
        feeders.append({
            "feeder_id": f"F{i:05d}", "substation": f"SUB{i % 60:02d}",
            "profile": PROFILES[i % len(PROFILES)], "peak_mw": 1.0 + (i * 37 % 100) / 20,
            "pv_mw": (i * 13 % 7) / 4, "relay": relay, "current_block": cur,
            "trip_group": f"G{i // 2}" if i % 97 in (10, 11) and relay != "none" else None})
    # trip-group members share a block
    for a, b in zip(feeders, feeders[1:]):
        if a["trip_group"] and a["trip_group"] == b["trip_group"]:
            b["current_block"] = a["current_block"]
    settings = dict(BASE_SETTINGS, interval_minutes=interval_minutes)
    return write_workbook(path, settings=settings, feeders=feeders,
                          profiles=flat_profiles(names=PROFILES, seasons=tuple(SEASONS),
                                                 value=_value, step_minutes=15),
                          seasons=[{"season": s, "months": m} for s, m in SEASONS.items()])


def run_capped(argv: list[str], cwd: Path, cap_bytes: int) -> dict:
    """Run ``python -m allocator argv`` under RLIMIT_AS; wall time and that child's peak RSS."""
    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (cap_bytes, cap_bytes))

    env = dict(os.environ, MPLBACKEND="Agg")
    t0 = time.perf_counter()
    with open(cwd / "stdout.txt", "wb") as out, open(cwd / "stderr.txt", "wb") as err:
        p = subprocess.Popen([sys.executable, "-m", "allocator", *argv], cwd=cwd, env=env,
                             stdout=out, stderr=err, preexec_fn=cap)
        _, status, ru = os.wait4(p.pid, 0)
    wall = time.perf_counter() - t0
    p.returncode = os.waitstatus_to_exitcode(status)
    tail = (cwd / "stderr.txt").read_text(errors="replace").strip().splitlines()[-3:]
    return {"argv": " ".join(argv), "exit_code": p.returncode, "wall_s": round(wall, 1),
            "peak_rss_mb": round(ru.ru_maxrss / 1024), "stderr_tail": tail}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--check-feeders", type=int, default=5000)
    ap.add_argument("--plan-feeders", type=int, default=1000)
    ap.add_argument("--cap-gb", type=float, default=8.0)
    ap.add_argument("--plan-time-limit", type=float, default=120.0)
    ap.add_argument("--full-reports", action="store_true",
                    help="also run check with every report format (xlsx, html, png)")
    ap.add_argument("--json", help="write the results to this file as JSON")
    a = ap.parse_args(argv)
    cap = int(a.cap_gb * (1 << 30))
    results = []
    with tempfile.TemporaryDirectory(prefix="ufls-load-") as tmp:
        d = Path(tmp)
        t = time.perf_counter()
        write_study(d / "check.xlsx", a.check_feeders, 15)
        write_study(d / "plan.xlsx", a.plan_feeders, 60)
        print(f"workbooks written in {time.perf_counter() - t:.0f} s (not timed below)")
        runs = [(f"check {a.check_feeders} feeders x 15 min (35,040 intervals), --format none",
                 ["check", "check.xlsx", "--out", "out_check", "--format", "none", "--quiet"])]
        if a.full_reports:
            runs.append((f"check {a.check_feeders} feeders x 15 min, all report formats",
                         ["check", "check.xlsx", "--out", "out_check_full", "--quiet"]))
        runs.append((f"plan {a.plan_feeders} feeders hourly (8,760 intervals), "
                     f"--time-limit {a.plan_time_limit:g}, --format none",
                     ["plan", "plan.xlsx", "--out", "out_plan", "--time-limit",
                      str(a.plan_time_limit), "--format", "none", "--quiet"]))
        for label, args in runs:
            r = run_capped(args, d, cap)
            r["run"] = label
            if args[0] == "plan" and r["exit_code"] == 0:
                info = json.loads((d / "out_plan" / "plan.json").read_text())
                r["plan_status"] = info["status"]
                r["plan_solve_s"] = round(info["solve_seconds"], 1)
                r["worst_violation_pct_of_target"] = round(
                    info["worst_violation_pct_of_target"], 3)
            results.append(r)
            print(f"{label}\n  exit {r['exit_code']}, wall {r['wall_s']} s, peak RSS "
                  f"{r['peak_rss_mb']} MB (cap {a.cap_gb:g} GB)"
                  + (f", status {r.get('plan_status')}, solve {r.get('plan_solve_s')} s"
                     if args[0] == "plan" else ""))
            if r["exit_code"] != 0:
                print("  " + "\n  ".join(r["stderr_tail"]))
    if a.json:
        Path(a.json).write_text(json.dumps(results, indent=2) + "\n")
    return 0 if all(r["exit_code"] == 0 for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
