"""Benchmark: several metered years in one run (not a pytest test).

Run:  python bench/bench_metered_years.py [--feeders 300] [--data /tmp/bench-years]

Writes a synthetic study (``bench_load.write_study``, study year 2025) and long Parquet
metered files of invented readings (``bench_metered.values``) at 15 minutes: both years in one
file, and the same readings cut into a 2024 and a 2025 file.  Then, each in its own child process
(``bench_metered.run_child``: wall, CPU, peak RSS of that child):
``check --metered 2025.parquet`` (the one-year path), ``check --metered both.parquet``
(two scenarios, a read per year) and ``check --metered 2024 --metered 2025`` (two files),
all ``--scenarios metered --format none``.  Prints one table.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

TZ = "Europe/Berlin"


def _intervals(y0: int, y1: int) -> pd.DatetimeIndex:
    a = pd.Timestamp(year=y0, month=1, day=1, tz=TZ).tz_convert("UTC")
    b = pd.Timestamp(year=y1 + 1, month=1, day=1, tz=TZ).tz_convert("UTC")
    return pd.date_range(a, b, freq="15min", inclusive="left")


def write_years(path: Path, n: int, y0: int, y1: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    from bench_metered import values

    ts = _intervals(y0, y1)
    ids = np.array([f"F{i:05d}" for i in range(n)], dtype=object)
    rng = np.random.default_rng(7)
    step = max(1, 2_000_000 // n)
    writer = None
    for a in range(0, len(ts), step):
        b = min(a + step, len(ts))
        tab = pa.table({"timestamp": pa.array(np.repeat(ts[a:b], n)),
                        "feeder_id": np.tile(ids, b - a),
                        "mw": values(n, ts, a, b, rng).ravel()})
        writer = writer or pq.ParquetWriter(path, tab.schema)
        writer.write_table(tab)
    writer.close()


def split_years(both: Path, p2024: Path, p2025: Path) -> None:
    """The same readings as ``both``, cut at local midnight of 1 January 2025."""
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    tab = pq.read_table(both)
    cut = pd.Timestamp("2025-01-01", tz=TZ).tz_convert("UTC")
    early = pc.less(tab["timestamp"], pa_scalar(cut))
    pq.write_table(tab.filter(early), p2024)
    pq.write_table(tab.filter(pc.invert(early)), p2025)


def pa_scalar(t: pd.Timestamp):
    import pyarrow as pa

    return pa.scalar(t.to_pydatetime(), type=pa.timestamp("ns", "UTC"))


def main(argv: list[str] | None = None) -> int:
    from bench_load import write_study
    from bench_metered import run_child

    ap = argparse.ArgumentParser()
    ap.add_argument("--feeders", type=int, default=300)
    ap.add_argument("--data", default="/tmp/bench-years")
    a = ap.parse_args(argv)
    d = Path(a.data)
    d.mkdir(parents=True, exist_ok=True)
    wb = d / f"study_{a.feeders}.xlsx"
    if not wb.exists():
        write_study(wb, a.feeders, 15)
    files = {k: d / f"{k}_{a.feeders}.parquet" for k in ("both", "y2024", "y2025")}
    if not files["both"].exists():
        write_years(files["both"], a.feeders, 2024, 2025)
        split_years(files["both"], files["y2024"], files["y2025"])
    runs = {"one year (2025)": ["--metered", files["y2025"]],
            "one file, 2024-2025": ["--metered", files["both"]],
            "two files, 2024 + 2025": ["--metered", files["y2024"], "--metered",
                                       files["y2025"]]}
    print(f"{a.feeders} feeders x 15 min, long Parquet, check --scenarios metered "
          "--format none")
    print(f"| case | tool s | CPU s | peak GB | load | exit |\n|---|---|---|---|---|---|")
    for k, extra in runs.items():
        work = d / ("run_" + k.split()[0] + k.split()[1].strip(","))
        work.mkdir(exist_ok=True)
        r = run_child(["-m", "allocator", "check", str(wb), *map(str, extra), "--scenarios",
                       "metered", "--format", "none", "--quiet", "--out", str(work / "out")],
                      work)
        print(f"| {k} | {r['wall_s']:.1f} | {r['cpu_s']:.1f} | {r['peak_gb']:.2f} | "
              f"{r['load']:.1f} | {r['rc']} |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
