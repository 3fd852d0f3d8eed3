"""Benchmark ``review``: a folder of studies checked on a 2-worker Dask LocalCluster against
the same tasks one after another in this process (not a pytest test).

Run:  python bench/bench_review.py [--studies 8] [--feeders 500] [--workers 2]
      [--format none] [--data /tmp/ufls-bench-review]

Each study is an invented synthetic network (bench/synthetic.py ``make_network``, its own
seed, 4 blocks, hourly year 2025): a workbook with the network's feeders and blocks, the
current allocation set by ``spreadsheet_practice``, flat invented profiles, and beside it
``NAME.metered.parquet``, the network's whole net-load year as a wide file (one column per
feeder).  So every study is checked on three scenarios: clear_sky, no_pv (from the flat
profiles) and metered.  The files are written once into ``--data`` (not timed).

Timed, in one run: (1) ``fleet.review`` on a new LocalCluster, cluster start included, and
the tasks alone on that cluster; (2) ``fleet.run_serial``, the same ``check_one`` tasks one
after another in this process.  Both must give the same fleet summary (seconds aside).  The
load average (``os.getloadavg``) is printed beside the numbers: the machine may be shared.
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))
sys.path.insert(0, str(ROOT / "tests"))

from synthetic import CLASSES, TZ, make_network, spreadsheet_practice, with_current  # noqa


def _feeder_rows(study) -> list[dict]:
    rows = []
    for f in study.feeders:
        d = dataclasses.asdict(f)
        d.pop("row", None)
        ab = d["allowed_blocks"]
        d["allowed_blocks"] = None if ab is None else ",".join(ab) or None
        rows.append(d)
    return rows


def _block_rows(study) -> list[dict]:
    return [{"block": b.name, "order": b.order, "pickup_hz": b.pickup_hz,
             "delay_s": b.delay_s, "rocof_hz_per_s": b.rocof_hz_per_s,
             "target_pct": b.target_pct, "min_pct": b.min_pct, "max_pct": b.max_pct}
            for b in study.blocks]


def write_metered_wide(year, path: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    cols = {"timestamp": pa.array(year.timestamps_utc)}
    cols.update({f: pa.array(np.ascontiguousarray(year.net_mw[j]))
                 for j, f in enumerate(year.feeder_ids)})
    pq.write_table(pa.table(cols), path)


def write_studies(folder: Path, n: int, feeders: int) -> None:
    from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

    folder.mkdir(parents=True, exist_ok=True)
    settings = dict(BASE_SETTINGS, timezone=TZ, year=2025, interval_minutes=60,
                    priority_policy="last_block", pv_derate=1.0)
    for i in range(n):
        wb = folder / f"net{i:02d}.xlsx"
        if wb.exists():
            continue
        study, year = make_network(feeders, 4, seed=i)
        study = with_current(study, spreadsheet_practice(study, year))
        write_metered_wide(year, folder / f"net{i:02d}.metered.parquet")
        write_workbook(wb, settings=settings, blocks=_block_rows(study),
                       feeders=_feeder_rows(study),
                       profiles=flat_profiles(names=CLASSES, value=0.5))


def _load() -> str:
    return "{:.2f} {:.2f} {:.2f}".format(*os.getloadavg())


def time_cluster(folder: Path, out: Path, workers: int, fmt: str | None) -> dict:
    """review() on a new LocalCluster: wall with cluster start, and the tasks alone."""
    from allocator.pipeline import review as fleet

    studies, _ = fleet.find_studies(folder)
    load0, t0 = _load(), time.perf_counter()
    with fleet.fleet_client(None, workers) as client:
        t1 = time.perf_counter()
        res = fleet.run_review(client, studies, out / "studies", fmt)
        t2 = time.perf_counter()
    return {"mode": f"local cluster, {workers} workers", "wall_s": time.perf_counter() - t0,
            "tasks_s": t2 - t1, "results": res, "load_before": load0, "load_after": _load()}


def time_serial(folder: Path, out: Path, fmt: str | None) -> dict:
    from allocator.pipeline import review as fleet

    studies, _ = fleet.find_studies(folder)
    load0, t0 = _load(), time.perf_counter()
    res = fleet.run_serial(studies, out / "studies", fmt)
    wall = time.perf_counter() - t0
    return {"mode": "one after another", "wall_s": wall, "tasks_s": wall, "results": res,
            "load_before": load0, "load_after": _load()}


def same_summary(a, b) -> str:
    """Texts equal, numbers to 1e-9 relative (worker processes run BLAS on one thread, so
    sums may be added in another order), with the largest relative difference seen."""
    from allocator.pipeline.review import summary_frame

    fa, fb = (summary_frame(r).drop(columns=["seconds"]) for r in (a, b))
    num = ["min_pct", "max_pct", "min_share_pct", "shortfall_mwh"]
    x, y = (f[num].to_numpy(dtype=float) for f in (fa, fb))
    rel = float(np.nanmax(np.abs(x - y) / np.maximum(np.abs(y), 1e-12), initial=0.0))
    same = fa.drop(columns=num).equals(fb.drop(columns=num)) and rel <= 1e-9
    return f"{same} (largest relative difference of a number {rel:.1e})"


def table(runs: list[dict], n: int, feeders: int) -> str:
    base = runs[-1]["wall_s"]
    lines = [f"review of {n} studies × {feeders} feeders (hourly year, 3 scenarios each)",
             "| mode | wall s | tasks s | mean check s | speed-up | checked | load before"
             " | load after |", "|---|---|---|---|---|---|---|---|"]
    for r in runs:
        ok = sum(x.status == "checked" for x in r["results"])
        mean = float(np.mean([x.seconds for x in r["results"]]))
        lines.append(f"| {r['mode']} | {r['wall_s']:.1f} | {r['tasks_s']:.1f} | {mean:.1f} | "
                     f"{base / r['wall_s']:.2f}× | {ok}/{n} | {r['load_before']} | "
                     f"{r['load_after']} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--studies", type=int, default=8)
    ap.add_argument("--feeders", type=int, default=500)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--format", default="none")
    ap.add_argument("--data", default=str(Path(tempfile.gettempdir()) / "ufls-bench-review"))
    a = ap.parse_args(argv)
    folder = Path(a.data) / f"studies_{a.studies}x{a.feeders}"
    t = time.perf_counter()
    write_studies(folder, a.studies, a.feeders)
    print(f"studies ready in {folder} ({time.perf_counter() - t:.0f} s, not timed)", flush=True)
    outs = [Path(a.data) / "out_cluster", Path(a.data) / "out_serial"]
    for o in outs:
        shutil.rmtree(o, ignore_errors=True)
    cl = time_cluster(folder, outs[0], a.workers, a.format)
    se = time_serial(folder, outs[1], a.format)
    print(table([cl, se], a.studies, a.feeders))
    print("same fleet summary both ways:", same_summary(cl["results"], se["results"]))
    for r in cl["results"] + se["results"]:
        if r.status != "checked":
            print(f"  {r.name}: {r.status}: {r.message}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
