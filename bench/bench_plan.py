"""Benchmark the planner on plans that must hold several scenarios (not a pytest test).

Run:  python bench/bench_plan.py                      # every instance, rows a, o, b
      python bench/bench_plan.py --quick              # the demo only
      python bench/bench_plan.py --reference          # adds row (r): 30 minutes
      python bench/bench_plan.py --previous ddf210b   # adds row (p): an earlier release
      python bench/bench_plan.py --instances demo,1000x6x2 --rows a,o

Instances (invented data):

* ``demo``: the demo workbook (240 feeders, 5 blocks, hourly 2025) on its default scenarios
  clear_sky and no_pv;
* ``NxBxS``: :mod:`synthetic` networks of N feeders and B blocks on S scenarios, hourly:
  S = 2 is {clear_sky, no_pv}, S = 4 adds a weather-like year (seeded daily clearness) and a
  growth year (load × 1.05, PV × 1.5).  Their ``current_block`` is the spreadsheet-practice
  allocation (row b), so changes count relays moved away from it.

Rows on the same instance, each in its own subprocess (peak RSS is the subprocess's own,
instance included):

(a) ours, default order (worst violation, fewest relay changes, closest to target), 60 s
    (300 s at 5,000 feeders);
(o) ours with ``objective = closest_to_target`` (the order before this release), same limit;
(r) ours, default order, 30 minutes (``--reference``; demo and 1,000 feeders): the fewest
    changes the same model finds with time;
(p) an earlier release (``--previous REV``, demo only): checked out with ``git worktree``
    into a temporary folder and run there with its own default (one clear-sky year, 60 s);
    its plan is then judged here on both scenarios;
(b) the spreadsheet practice: feeders by annual mean load into the block furthest below
    target (``synthetic.spreadsheet_practice``; for the demo, the workbook's own
    ``current_block``).

Columns: relays changed (a trip group counts once), the proven lower bound on relay changes,
worst violation over every scenario (pp), whether every block is in band in every interval of
every scenario, wall seconds, peak MB.  Targets (printed at the end): (a) holds every
scenario within its limit; (a) ≤ 1.2 × (r); (a) ≤ 1/3 of (p); 5,000 × 2 scenarios ≤ 300 s
and ≤ 6 GB; 1,000 × 4 scenarios ≤ 2 GB.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(ROOT))

INSTANCES = ["demo", "1000x6x2", "1000x6x4", "5000x6x2"]
SCENARIO_SETS = {2: ("clear_sky", "no_pv"), 4: ("clear_sky", "no_pv", "weather", "growth")}
SEED = 0
DEMO = ROOT / "inputs_demo" / "lindmark.xlsx"


def time_limit(instance: str, row: str) -> float:
    if row == "r":
        return 1800.0
    return 300.0 if instance.startswith("5000") else 60.0


def load(instance: str):
    """(study, years) of an instance."""
    if instance == "demo":
        from allocator.scenarios import build_years
        from allocator.workbook import read_study

        study = read_study(DEMO)
        return study, build_years(study)
    from synthetic import make_network, spreadsheet_practice, with_current

    n, nb, ns = (int(v) for v in instance.split("x"))
    study, years = make_network(n, nb, SEED, SCENARIO_SETS[ns])
    return with_current(study, spreadsheet_practice(study, years[0])), years


PREVIOUS_SCRIPT = """
import json, sys
sys.path.insert(0, {src!r})
from allocator.workbook import read_study
from allocator.year import build_year
from allocator.plan import plan_allocation
study = read_study({demo!r})
out = plan_allocation(study, build_year(study), time_limit_s={tl})
print("RESULT " + json.dumps([int(b) for b in out.block_idx]))
"""


def previous_release(rev: str, tl: float) -> np.ndarray:
    """Plan the demo with an earlier release (its own default, one clear-sky year)."""
    with tempfile.TemporaryDirectory() as d:
        src = str(Path(d) / "prev")
        subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", src, rev],
                       check=True, capture_output=True)
        try:
            code = PREVIOUS_SCRIPT.format(src=src, demo=str(DEMO), tl=tl)
            p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                               cwd=src)
        finally:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", src],
                           capture_output=True)
    line = [ln for ln in p.stdout.splitlines() if ln.startswith("RESULT ")]
    if not line:
        raise RuntimeError(p.stderr[-800:])
    return np.array(json.loads(line[-1][7:]), dtype=np.intp)


def run_one(instance: str, row: str, rev: str | None) -> dict:
    from allocator.check import run_checks

    study, years = load(instance)
    tl = time_limit(instance, row)
    extra: dict = {"time_limit_s": tl}
    t0 = time.perf_counter()
    if row in ("a", "o", "r"):
        from allocator.plan import plan_allocation

        out = plan_allocation(study, years, time_limit_s=tl, seed=0,
                              objective="closest_to_target" if row == "o" else None)
        block_idx = out.block_idx
        extra.update(lower_bound=out.changes_lower_bound,
                     claims=[lv["claim"] for lv in out.levels], status=out.status)
    elif row == "p":
        block_idx = previous_release(rev, tl)
    elif row == "b":
        block_idx = study.current_assignment
    else:
        raise ValueError(row)
    wall = time.perf_counter() - t0
    chk = run_checks(study, years, block_idx)
    return {"instance": instance, "row": row, "relays": study.relays_changed(block_idx),
            "feeders": int((block_idx != study.current_assignment).sum()),
            "worst_pp": chk.worst_violation_pp, "in_band": bool(chk.worst_violation_pp <= 1e-9),
            "scenarios": list(chk.names), "wall_s": wall,
            "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, **extra}


def spawn(instance: str, row: str, rev: str | None) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--one", instance, row]
    if rev:
        cmd += ["--previous", rev]
    p = subprocess.run(cmd, capture_output=True, text=True)
    lines = [ln for ln in p.stdout.splitlines() if ln.startswith("RESULT ")]
    if p.returncode != 0 or not lines:
        return {"instance": instance, "row": row, "error": (p.stderr or p.stdout)[-800:]}
    return json.loads(lines[-1][len("RESULT "):])


LABEL = {"a": "(a) fewest changes", "o": "(o) closest first", "r": "(r) 30 min",
         "p": "(p) earlier release", "b": "(b) spreadsheet"}
HEAD = (f"{'instance':<10} {'row':<21} {'relays':>6} {'bound':>5} {'worst pp':>8} "
        f"{'in band':>7} {'wall s':>7} {'peak MB':>7}  level claims")


def fmt_row(r: dict) -> str:
    head = f"{r['instance']:<10} {LABEL[r['row']]:<21}"
    if "error" in r:
        return head + " ERROR " + r["error"].strip().splitlines()[-1][:80]
    lb = "" if r.get("lower_bound") is None else str(r["lower_bound"])
    claims = "; ".join(c.split(" (")[0] for c in r.get("claims", []))
    return (head + f" {r['relays']:>6} {lb:>5} {r['worst_pp']:>8.3f} "
            f"{'yes' if r['in_band'] else 'no':>7} {r['wall_s']:>7.1f} {r['peak_mb']:>7.0f}  "
            f"{claims}")


def report_targets(results: list[dict]) -> None:
    print("\ntargets:")
    by = {(r["instance"], r["row"]): r for r in results if "error" not in r}
    for inst in dict.fromkeys(r["instance"] for r in results):
        a = by.get((inst, "a"))
        if a is None:
            continue
        bits = [f"(a) in band in every scenario within {a['time_limit_s']:g} s: "
                f"{'OK' if a['in_band'] and a['wall_s'] <= a['time_limit_s'] * 1.1 else 'MISS'}"
                f" ({a['wall_s']:.1f} s)"]
        r = by.get((inst, "r"))
        if r is not None:
            bits.append(f"(a) {a['relays']} ≤ 1.2 × (r) {r['relays']}: "
                        f"{'OK' if a['relays'] <= 1.2 * r['relays'] + 1e-9 else 'MISS'}")
        p = by.get((inst, "p"))
        if p is not None:
            bits.append(f"(a) {a['relays']} ≤ (p) {p['relays']} / 3: "
                        f"{'OK' if 3 * a['relays'] <= p['relays'] else 'MISS'}")
        gb = a["peak_mb"] / 1024
        if inst == "5000x6x2":
            bits.append(f"≤ 300 s and ≤ 6 GB: "
                        f"{'OK' if a['wall_s'] <= 300 and gb <= 6 else 'MISS'} ({gb:.2f} GB)")
        if inst == "1000x6x4":
            bits.append(f"≤ 2 GB: {'OK' if gb <= 2 else 'MISS'} ({gb:.2f} GB)")
        print(f"  {inst}: " + "; ".join(bits))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="the demo only")
    ap.add_argument("--instances", help="comma list (default: " + ",".join(INSTANCES) + ")")
    ap.add_argument("--rows", default="b,a,o", help="rows to run (default b,a,o)")
    ap.add_argument("--reference", action="store_true", help="add row (r), 30 minutes")
    ap.add_argument("--previous", metavar="REV", help="add row (p): this git revision")
    ap.add_argument("--json", help="also write the rows to this file")
    ap.add_argument("--one", nargs=2, metavar=("INSTANCE", "ROW"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        print("RESULT " + json.dumps(run_one(*args.one, args.previous)), flush=True)
        return
    instances = ["demo"] if args.quick else INSTANCES
    if args.instances:
        instances = args.instances.split(",")
    rows = args.rows.split(",")
    print(f"bench_plan: seed {SEED}, instances {instances}, rows {rows}"
          + (" + r" if args.reference else "") + (f" + p ({args.previous})"
                                                   if args.previous else ""))
    print(HEAD, flush=True)
    results = []
    for inst in instances:
        todo = list(rows)
        if args.reference and (inst == "demo" or inst.startswith("1000x6x2")):
            todo.append("r")
        if args.previous and inst == "demo":
            todo.append("p")
        for row in todo:
            res = spawn(inst, row, args.previous)
            results.append(res)
            print(fmt_row(res), flush=True)
    if args.json:
        Path(args.json).write_text(json.dumps(results, indent=1))
    report_targets(results)


if __name__ == "__main__":
    main()
