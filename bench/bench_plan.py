"""Benchmark the allocation planner on seeded synthetic networks (not a pytest test).

Run:  /work/venv/bin/python bench/bench_plan.py            # 200, 1,000 and 5,000 feeders
      /work/venv/bin/python bench/bench_plan.py --quick    # 200 feeders only
      /work/venv/bin/python bench/bench_plan.py --reference  # adds row (d), 1,000 feeders

Instances: :mod:`synthetic` (invented data) — hourly full year (8,760 intervals), five feeder
classes, rooftop PV, priority / direction-blocked / relay-none / allowed_blocks / trip-group
rules; schemes of 4 blocks (10 % ± 2.5 pp, 40 % in all) and 6 blocks (8 % ± 2.5 pp, 48 %).
Configurations: 200 × 4 and 200 × 6, 1,000 × 4 and 1,000 × 6, 5,000 × 6.

Rows on the same instance:

(a) ours: ``allocator.plan.plan_allocation`` (HiGHS), time limit 60 s (≤ 1,000 feeders) or
    300 s (5,000);
(b) the spreadsheet practice: feeders (trip groups as one) sorted by annual mean load, each
    put in the allowed block furthest below its target by annual mean share, stop when every
    block has reached its target (``synthetic.spreadsheet_practice``);
(c) one monolithic PuLP + CBC model minimising the worst relative band violation z, built
    with PuLP expressions (share variables y[b, t] = Σ pp·x, band rows on y and z) over an
    evenly spread sample of the year's intervals — as many as fit in the non-zero budget
    ``--mono-nnz`` (default 4 M: the dense share rows have one term per allowed (unit, block)
    pair per interval; at 4 M terms PuLP holds ~1-2 GB and CBC ~2-3 GB, and writing the MPS
    file alone takes tens of seconds); no warm start; the CBC time limit is the same limit
    minus the expression-building time (at least 10 s); PuLP's MPS write and solution read
    come on top and are in the row's wall time;
(d) ours with 30 minutes (only with ``--reference``, 1,000 feeders).

"current" for the synthetic networks = the spreadsheet-practice result (b): the study's
``current_block`` is set from it, so (b) has 0 changes and the change counts of (a), (c), (d)
are feeders moved away from the spreadsheet allocation.

Columns: worst violation in pp of demand and in % of the block's target, % of intervals with
every block in band (all from ``allocator.check.run_check`` on the full year), changes vs
current, wall seconds of the method (instance generation excluded), peak memory: each row
runs in its own subprocess and reports ``ru_maxrss`` of itself and of its children (CBC runs
as a child process); the larger of the two is shown (it includes the instance, ~70 B per
feeder-interval).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

CONFIGS = [(200, 4), (200, 6), (1000, 4), (1000, 6), (5000, 6)]
QUICK = [(200, 4), (200, 6)]
SEED = 0
MONO_NNZ = 4_000_000


def time_limit(n: int) -> float:
    return 60.0 if n <= 1000 else 300.0


# --------------------------------------------------------------------------------------------
# (c) monolithic PuLP + CBC
# --------------------------------------------------------------------------------------------
def mono_intervals(n_t: int, n_pairs: int, nnz_budget: int) -> np.ndarray:
    """As many intervals as the non-zero budget allows (one term per allowed pair and
    interval in the share rows), spread evenly over the year; the spacing is not a whole
    number of hours, so the sample walks through every time of day."""
    k = max(1, nnz_budget // max(n_pairs, 1))
    if k >= n_t:
        return np.arange(n_t)
    return np.unique(np.round(np.linspace(0, n_t - 1, k)).astype(np.intp))


def monolithic_cbc(study, year, tl: float, nnz_budget: int) -> tuple[np.ndarray, dict]:
    import pulp

    from allocator.check import contribution_mw
    from allocator.domain import UNARMED

    t0 = time.perf_counter()
    nb = len(study.blocks)
    allowed_f = study.allowed_matrix()
    groups = study.trip_groups()
    units = [sorted(m) for m in groups.values()]
    grouped = {i for m in units for i in m}
    units += [[i] for i in range(len(study.feeders)) if i not in grouped]
    u_allowed = np.array([allowed_f[m].all(axis=0) for m in units])
    n_pairs = int(u_allowed.sum())
    valid = np.flatnonzero(year.demand_mw > 0)
    cols = valid[mono_intervals(valid.size, n_pairs, nnz_budget)]
    contrib = contribution_mw(year.net_mw[:, cols], study.relay_code)
    pct = 100.0 * contrib / year.demand_mw[cols][None, :]
    pp = np.array([pct[m].sum(axis=0) for m in units])  # [unit, t]

    prob = pulp.LpProblem("ufls_monolithic", pulp.LpMinimize)
    z = pulp.LpVariable("z", lowBound=0)
    x = {}
    for u in range(len(units)):
        for b in np.flatnonzero(u_allowed[u]):
            x[u, int(b)] = pulp.LpVariable(f"x_{u}_{b}", cat=pulp.LpBinary)
    prob += z
    for u in range(len(units)):
        vs = [x[u, int(b)] for b in np.flatnonzero(u_allowed[u])]
        if len(vs) > 1:
            prob += pulp.lpSum(vs) <= 1
    # y[b, t] = share of block b at interval t (one dense row each); band rows on y and z
    for b, blk in enumerate(study.blocks):
        us = np.flatnonzero(u_allowed[:, b])
        xb = [x[int(u), b] for u in us]
        for j in range(cols.size):
            y = pulp.LpVariable(f"y_{b}_{j}")
            share = pulp.LpAffineExpression(zip(xb, pp[us, j].tolist()))
            prob += share - y == 0
            prob += y + blk.target_pct * z >= blk.min_pct
            prob += y - blk.target_pct * z <= blk.max_pct
    build_s = time.perf_counter() - t0
    cbc_tl = max(10.0, tl - build_s)
    cmd = pulp.PULP_CBC_CMD(msg=False, timeLimit=cbc_tl)
    prob.solve(cmd)
    status = pulp.LpStatus[prob.status]
    if prob.sol_status == pulp.LpSolutionIntegerFeasible:
        status = "time limit, integer solution"
    elif prob.sol_status == pulp.LpSolutionOptimal:
        status = "optimal on its intervals"
    block_idx = np.full(len(study.feeders), UNARMED, dtype=np.intp)
    # only an integer solution counts (a stopped CBC run can leave LP values behind)
    have = prob.sol_status in (pulp.LpSolutionOptimal, pulp.LpSolutionIntegerFeasible)
    if have:
        for (u, b), v in x.items():
            if v.varValue is not None and v.varValue > 0.5:
                block_idx[units[u]] = b
    info = {"intervals": int(cols.size), "nonzeros": int(n_pairs * cols.size + 5 * nb * cols.size),
            "build_s": round(build_s, 1), "cbc_time_limit_s": round(cbc_tl, 1),
            "cbc_status": status, "has_solution": have,
            "z_model": float(z.varValue) if z.varValue is not None else None}
    return block_idx, info


# --------------------------------------------------------------------------------------------
# one row (in a subprocess)
# --------------------------------------------------------------------------------------------
def run_one(method: str, n: int, nb: int, nnz_budget: int) -> dict:
    from allocator.check import run_check
    from synthetic import make_network, spreadsheet_practice, with_current

    study, year = make_network(n, nb, SEED)
    current = spreadsheet_practice(study, year)
    study = with_current(study, current)
    extra: dict = {}
    t0 = time.perf_counter()
    if method == "b":
        block_idx = current
    elif method in ("a", "d"):
        from allocator.plan import plan_allocation

        tl = time_limit(n) if method == "a" else 1800.0
        out = plan_allocation(study, year, time_limit_s=tl, seed=0)
        block_idx = out.block_idx
        extra = {"status": out.status, "proven": out.proven, "time_limit_s": tl,
                 "levels": [{k: v for k, v in lv.items() if k in ("level", "status", "rounds",
                                                                   "steps", "seconds")}
                            for lv in out.levels],
                 "events": out.events[:6], "n_events": len(out.events)}
    elif method == "c":
        block_idx, extra = monolithic_cbc(study, year, time_limit(n), nnz_budget)
        extra["time_limit_s"] = time_limit(n)
    else:
        raise ValueError(method)
    wall = time.perf_counter() - t0
    chk = run_check(study, year, block_idx)
    nan = float("nan")
    solved = extra.get("has_solution", True)
    self_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    child_kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return {"method": method, "n": n, "blocks": nb,
            "worst_pp": float(chk.worst_violation_pp) if solved else nan,
            "worst_pct_target": 100.0 * float(chk.worst_relative_violation) if solved else nan,
            "in_band_pct": 100.0 * float(chk.all_in_band_fraction) if solved else nan,
            "changes": int((np.asarray(block_idx) != current).sum()) if solved else -1,
            "wall_s": wall, "peak_mb": max(self_kb, child_kb) / 1024.0,
            "self_mb": self_kb / 1024.0, "children_mb": child_kb / 1024.0, **extra}


def spawn(method: str, n: int, nb: int, nnz_budget: int) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--one", method, str(n), str(nb),
           "--mono-nnz", str(nnz_budget)]
    p = subprocess.run(cmd, capture_output=True, text=True)
    lines = [ln for ln in p.stdout.splitlines() if ln.startswith("RESULT ")]
    if p.returncode != 0 or not lines:
        return {"method": method, "n": n, "blocks": nb, "error": (p.stderr or p.stdout)[-800:]}
    return json.loads(lines[-1][len("RESULT "):])


LABEL = {"a": "(a) ours", "b": "(b) spreadsheet", "c": "(c) PuLP+CBC mono",
         "d": "(d) ours, 30 min"}


def fmt_row(r: dict) -> str:
    head = f"{r['n']:>6} {r['blocks']:>2}  {LABEL[r['method']]:<19}"
    if "error" in r:
        return head + "  ERROR " + r["error"].strip().splitlines()[-1][:80]
    note = ""
    if r["method"] == "c":
        note = (f"{r['intervals']} intervals, build {r['build_s']} s, CBC {r['cbc_status']}"
                + ("" if r["has_solution"] else ", no integer solution"))
    elif r["method"] in ("a", "d"):
        note = f"{r['status']}{', proven' if r['proven'] else ''}"
    if r["changes"] < 0:  # no plan
        return head + f" {'—':>8} {'—':>8} {'—':>8} {'—':>7} {r['wall_s']:8.1f} " \
            f"{r['peak_mb']:8.0f}  {note}"
    return (head + f" {r['worst_pp']:8.3f} {r['worst_pct_target']:8.2f} {r['in_band_pct']:8.2f}"
            f" {r['changes']:7d} {r['wall_s']:8.1f} {r['peak_mb']:8.0f}  {note}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="200 feeders only")
    ap.add_argument("--reference", action="store_true", help="add row (d) for 1,000 feeders")
    ap.add_argument("--configs", help="e.g. 200x4,1000x6 (default: all)")
    ap.add_argument("--rows", default="b,a,c", help="methods to run (default b,a,c)")
    ap.add_argument("--mono-nnz", type=int, default=MONO_NNZ,
                    help="non-zero budget of the monolithic model's share rows")
    ap.add_argument("--json", help="also write the rows to this file")
    ap.add_argument("--table", help="print the table of an earlier --json file and stop")
    ap.add_argument("--one", nargs=3, metavar=("METHOD", "N", "BLOCKS"), help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.table:  # print the table of an earlier run's --json file
        results = json.loads(Path(args.table).read_text())
        for r in results:
            print(fmt_row(r))
        report_targets(results, sorted({(r["n"], r["blocks"]) for r in results},
                                       key=lambda c: (c[0], c[1])))
        return
    if args.one:
        m, n, nb = args.one
        print("RESULT " + json.dumps(run_one(m, int(n), int(nb), args.mono_nnz)), flush=True)
        return
    configs = QUICK if args.quick else CONFIGS
    if args.configs:
        configs = [tuple(int(v) for v in c.split("x")) for c in args.configs.split(",")]
    rows_wanted = args.rows.split(",")
    print(f"bench_plan: seed {SEED}, hourly year (8,760 intervals), configs {configs}")
    print(f"{'feeders':>6} {'B':>2}  {'row':<19} {'worst pp':>8} {'% target':>8} "
          f"{'in band%':>8} {'changes':>7} {'wall s':>8} {'peak MB':>8}  notes", flush=True)
    results = []
    for n, nb in configs:
        methods = list(rows_wanted)
        if args.reference and n == 1000 and "d" not in methods:
            methods.append("d")
        if n != 1000 or not args.reference:
            methods = [m for m in methods if m != "d"]
        for m in methods:
            r = spawn(m, n, nb, args.mono_nnz)
            results.append(r)
            print(fmt_row(r), flush=True)
    if args.json:
        Path(args.json).write_text(json.dumps(results, indent=1))
    report_targets(results, configs)


def report_targets(results: list[dict], configs) -> None:
    print("\ntargets:")
    by = {(r["n"], r["blocks"], r["method"]): r for r in results if "error" not in r}
    for (n, nb) in configs:
        a, b = by.get((n, nb, "a")), by.get((n, nb, "b"))
        if a is None:
            continue
        tl = time_limit(n)
        ok_t = a["wall_s"] <= tl
        line = f"  {n} x {nb}: (a) {a['wall_s']:.1f} s vs {tl:.0f} s {'OK' if ok_t else 'MISS'}"
        others = [by.get((n, nb, m)) for m in ("b", "c", "d")]
        possible = any(o is not None and o.get("changes", -1) >= 0 and o["worst_pp"] <= 1e-9
                       for o in others)
        if a["worst_pp"] <= 1e-9:
            line += "; every interval in band: OK"
        else:
            line += ("; every interval in band: MISS (another row reached it)" if possible
                     else "; not every interval in band (no row reached it)")
        if b is not None:
            ok_w = a["worst_pp"] <= b["worst_pp"] / 5 + 1e-12
            line += (f"; worst {a['worst_pp']:.3f} pp vs (b)/5 = {b['worst_pp'] / 5:.3f} pp "
                     f"{'OK' if ok_w else 'MISS'}")
        if n >= 5000:
            line += (f"; memory {a['peak_mb'] / 1024:.2f} GB vs 6 GB "
                     f"{'OK' if a['peak_mb'] <= 6 * 1024 else 'MISS'}")
        print(line)


if __name__ == "__main__":
    main()
