"""Benchmark ``allocator.year.build_year`` on synthetic studies (not a pytest test).

Run:  /work/venv/bin/python bench/bench_year.py [--sizes 300,1000,5000]

Each size runs in a fresh subprocess: it writes a synthetic workbook (invented demo data:
5 profiles x 4 seasons at 15-minute resolution, N feeders, some with PV), reads it with
``read_study``, then times ``build_year`` (wall clock) for the 15-minute year (35,040
intervals).  Peak memory is the subprocess's ``ru_maxrss`` (high-water resident set size, the
whole process: interpreter, pandas, the study and the year), so sizes do not contaminate each
other.  Target: 5,000 feeders in <= 20 s and <= 3 GB.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

TARGET_FEEDERS, TARGET_S, TARGET_MB = 5000, 20.0, 3 * 1024
PROFILES = ("res", "com", "ind", "agri", "mixed")
SEASONS = {"winter": "12,1,2", "spring": "3,4,5", "summer": "6,7,8", "autumn": "9,10,11"}


def _value(p: str, s: str, d: str, m: int) -> float:
    """Invented demo load shape (per unit of peak), varying by profile, season, day, time."""
    pi, si = PROFILES.index(p), list(SEASONS).index(s)
    dip = {"workday": 1.0, "saturday": 0.85, "sunday": 0.75}[d]
    h = m / 60
    return round(dip * (0.45 + 0.1 * si / 3 + 0.35 * math.sin(math.pi * ((h + pi) % 24) / 24)
                        ** 2 + 0.05 * math.cos(2 * math.pi * h / 6)), 6)


def write_study(path: Path, n_feeders: int) -> Path:
    from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

    feeders = [{"feeder_id": f"F{i:05d}", "substation": f"SUB{i % 60:02d}",
                "profile": PROFILES[i % len(PROFILES)], "peak_mw": 1.0 + (i * 37 % 100) / 20,
                "pv_mw": (i * 13 % 7) / 4, "relay": "none" if i % 11 == 0 else "standard"}
               for i in range(n_feeders)]
    settings = dict(BASE_SETTINGS, interval_minutes=15)
    return write_workbook(path, settings=settings, feeders=feeders,
                          profiles=flat_profiles(names=PROFILES, seasons=tuple(SEASONS),
                                                 value=_value, step_minutes=15),
                          seasons=[{"season": s, "months": m} for s, m in SEASONS.items()])


def run_one(n_feeders: int) -> dict:
    from allocator.workbook import read_study
    from allocator.year import build_year

    with tempfile.TemporaryDirectory() as d:
        study = read_study(write_study(Path(d) / "bench.xlsx", n_feeders))
    base_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB
    t0 = time.perf_counter()
    year = build_year(study)
    wall = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    assert year.net_mw.shape == (n_feeders, 35040)
    return {"feeders": n_feeders, "intervals": year.n_intervals, "wall_s": wall,
            "base_mb": base_mb, "peak_mb": peak_mb}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="300,1000,5000")
    ap.add_argument("--one", type=int, help=argparse.SUPPRESS)  # child mode
    a = ap.parse_args()
    if a.one:
        print(json.dumps(run_one(a.one)))
        return 0
    rows = []
    for n in (int(x) for x in a.sizes.split(",")):
        out = subprocess.run([sys.executable, __file__, "--one", str(n)], check=True,
                             capture_output=True, text=True).stdout
        rows.append(json.loads(out.strip().splitlines()[-1]))
    print(f"{'feeders':>8} {'intervals':>10} {'wall s':>8} {'peak MB':>9} {'before MB':>10}")
    for r in rows:
        print(f"{r['feeders']:>8} {r['intervals']:>10} {r['wall_s']:>8.2f} "
              f"{r['peak_mb']:>9.0f} {r['base_mb']:>10.0f}")
    ok = True
    for r in rows:
        if r["feeders"] >= TARGET_FEEDERS:
            good = r["wall_s"] <= TARGET_S and r["peak_mb"] <= TARGET_MB
            ok &= good
            print(f"target {TARGET_FEEDERS} feeders <= {TARGET_S:g} s and <= {TARGET_MB} MB: "
                  f"{'met' if good else 'MISSED'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
