"""Benchmark: ``check --metered`` on utility-scale metered files against a minimal pyarrow
read + pivot of the same file (not a pytest test).

Run:  python bench/bench_metered.py [--quick] [--cases csv3k,pq3k,wpq3k,pq10k,csv5min]
                                    [--data /work/bench-data] [--keep] [--json FILE]

For each case a synthetic study (``bench_load.write_study``: invented feeders F00000...,
profiles and PV) and a metered file of its whole year are written into ``--data`` (reused
when present; not timed; ``--keep`` keeps them, otherwise the metered files are deleted at
the end).  Then, each in its own child process so peaks do not mix:

* **baseline**: this script with ``--baseline``: ``pyarrow.csv.read_csv`` or
  ``pyarrow.parquet.read_table`` of the whole file (feeder ids and timestamp texts
  dictionary-encoded, MW as float64), each distinct timestamp parsed once, feeder ids
  looked up, values scattered into a ``[feeder, interval]`` float64 array.  No checks.
* **tool**: ``python -m allocator check WORKBOOK --metered FILE --format none --quiet``:
  the whole command (workbook, metered file with every check, the year, the armed-load
  check, the CSV/JSON outputs).

Wall time by ``time.perf_counter`` around the child, CPU time (user + system) and peak RSS
from ``os.wait4`` (that child alone, started from a small launcher process: see
``LAUNCHER``).  CPU time varies less than wall time when other work shares the machine.  The load average at the start of each run is printed, since the machine is shared.

Targets (issue 13): 3,000 feeders × 35,040 intervals long CSV ≤ 60 s, ≤ 4 GB, ≤ 2.5× the
baseline; the same as long and wide Parquet ≤ 20 s, ≤ 3 GB; 10,000 feeders long Parquet and
1,000 feeders at 5 minutes (105,120 intervals) complete.  The metered values are invented:
a daily shape per feeder, PV at midday, noise, and a one-day gap in every 20th feeder.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

YEAR, TZ = 2025, "Europe/Berlin"


@dataclass(frozen=True)
class Case:
    name: str
    feeders: int
    interval: int
    fmt: str  # csv | parquet
    layout: str  # long | wide
    max_s: float | None
    max_gb: float | None
    max_ratio: float | None = None

    @property
    def file(self) -> str:
        ext = "csv" if self.fmt == "csv" else "parquet"
        return f"{self.layout}_{self.feeders}x{self.interval}min.{ext}"


CASES = {
    "csv3k": Case("csv3k", 3000, 15, "csv", "long", 60, 4, 2.5),
    "pq3k": Case("pq3k", 3000, 15, "parquet", "long", 20, 3),
    "wpq3k": Case("wpq3k", 3000, 15, "parquet", "wide", 20, 3),
    "pq10k": Case("pq10k", 10000, 15, "parquet", "long", None, None),
    "csv5min": Case("csv5min", 1000, 5, "csv", "long", None, None),
}
QUICK = {"csv3k": 150, "pq3k": 150, "wpq3k": 150, "pq10k": 300, "csv5min": 50}


# --------------------------------------------------------------------------------------------
# synthetic data
# --------------------------------------------------------------------------------------------
def intervals(interval: int) -> pd.DatetimeIndex:
    start = pd.Timestamp(year=YEAR, month=1, day=1, tz=TZ)
    end = pd.Timestamp(year=YEAR + 1, month=1, day=1, tz=TZ)
    n = int((end - start) / pd.Timedelta(minutes=interval))
    return pd.date_range(start.tz_convert("UTC"), periods=n, freq=f"{interval}min")


def values(n: int, ts: pd.DatetimeIndex, a: int, b: int, rng) -> np.ndarray:
    """Invented net MW ``[interval a:b, feeder]`` within the tool's plausibility range for the
    peak_mw / pv_mw of bench_load.write_study."""
    i = np.arange(n)
    peak = 1.0 + (i * 37 % 100) / 20
    pv = (i * 13 % 7) / 4
    h = ((ts[a:b].hour + ts[a:b].minute / 60 + 1) % 24).to_numpy()[:, None]
    shape = 0.35 + 0.4 * np.sin(np.pi * ((h + i % 5) % 24) / 24) ** 2
    sun = np.clip(np.sin(np.pi * (h - 6) / 12), 0, None)
    v = peak * shape - 0.8 * pv * sun + rng.normal(0, 0.02, (b - a, n))
    return np.round(v, 3)


def gap_mask(n: int, ts: pd.DatetimeIndex, a: int, b: int) -> np.ndarray:
    """[interval, feeder] True where a reading is left out: a day in June, every 20th feeder."""
    day = (ts[a:b] >= pd.Timestamp("2025-06-10", tz="UTC")) & \
          (ts[a:b] < pd.Timestamp("2025-06-11", tz="UTC"))
    return np.asarray(day)[:, None] & (np.arange(n) % 20 == 7)[None, :]


def offset_text(ts: pd.DatetimeIndex) -> np.ndarray:
    s = pd.Series(ts.tz_convert(TZ).strftime("%Y-%m-%dT%H:%M:%S%z"))
    return (s.str[:-2] + ":" + s.str[-2:]).to_numpy(dtype=object)


def write_metered(c: Case, path: Path) -> None:
    import pyarrow as pa
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    ts = intervals(c.interval)
    ids = np.array([f"F{i:05d}" for i in range(c.feeders)], dtype=object)
    rng = np.random.default_rng(13)
    step = max(1, 4_000_000 // c.feeders)
    tmp = path.with_suffix(path.suffix + ".part")
    writer = None
    text = offset_text(ts) if c.fmt == "csv" else None
    with open(tmp, "wb") as fh:
        for a in range(0, len(ts), step):
            b = min(a + step, len(ts))
            v = values(c.feeders, ts, a, b, rng)
            gap = gap_mask(c.feeders, ts, a, b)
            if c.layout == "wide":
                cols = {"timestamp": pa.array(ts[a:b])}
                cols.update({f: pa.array(np.where(gap[:, j], np.nan, v[:, j]),
                                         from_pandas=True) for j, f in enumerate(ids)})
                tab = pa.table(cols)
            else:
                keep = ~gap.ravel()
                t = (pa.array(np.repeat(text[a:b], c.feeders)[keep]) if text is not None
                     else pa.array(np.repeat(ts[a:b], c.feeders)[keep]))
                tab = pa.table({"timestamp": t, "feeder_id": np.tile(ids, b - a)[keep],
                                "mw": v.ravel()[keep]})
            if c.fmt == "csv":
                pcsv.write_csv(tab, fh, pcsv.WriteOptions(include_header=a == 0,
                                                          quoting_style="none"))
            else:
                writer = writer or pq.ParquetWriter(fh, tab.schema)
                writer.write_table(tab)
        if writer is not None:
            writer.close()
    tmp.rename(path)


def prepare(c: Case, data: Path) -> tuple[Path, Path]:
    from bench_load import write_study

    wb = data / f"study_{c.feeders}x{c.interval}min.xlsx"
    if not wb.exists():
        t = time.perf_counter()
        write_study(wb, c.feeders, c.interval)
        print(f"  wrote {wb.name} in {time.perf_counter() - t:.0f} s", flush=True)
    m = data / c.file
    if not m.exists():
        t = time.perf_counter()
        write_metered(c, m)
        print(f"  wrote {m.name} ({m.stat().st_size / 2**30:.2f} GB) in "
              f"{time.perf_counter() - t:.0f} s", flush=True)
    return wb, m


# --------------------------------------------------------------------------------------------
# the baseline: a minimal read + pivot (run in a child process)
# --------------------------------------------------------------------------------------------
def _times_ns(col) -> np.ndarray:
    import pyarrow as pa
    import pyarrow.compute as pc

    if pa.types.is_dictionary(col.type):
        u = pd.to_datetime(pd.Series(col.dictionary.to_pylist()), format="ISO8601", utc=True)
        return pd.DatetimeIndex(u).as_unit("ns").asi8[col.indices.to_numpy()]
    return pc.cast(pc.cast(col, pa.timestamp("ns", "UTC")), pa.int64()).to_numpy()


def baseline(path: Path, n: int, interval: int) -> float:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    t0 = time.perf_counter()
    ts = intervals(interval)
    ts0, iv = ts[0].value, interval * 60 * 10**9
    ids = pa.array([f"F{i:05d}" for i in range(n)])
    d = pa.dictionary(pa.int32(), pa.string())
    if path.suffix == ".csv":
        tab = pcsv.read_csv(path, convert_options=pcsv.ConvertOptions(
            column_types={"timestamp": d, "feeder_id": d, "mw": pa.float64()}))
    else:
        tab = pq.read_table(path, read_dictionary=["feeder_id"])
    out = np.full((n, len(ts)), np.nan)
    wide = "feeder_id" not in tab.column_names
    for b in tab.to_batches():
        i = (_times_ns(b.column("timestamp")) - ts0) // iv
        if wide:
            for j in range(n):
                out[j, i] = b.column(j + 1).to_numpy(zero_copy_only=False)
            continue
        f = b.column("feeder_id")
        code = pc.index_in(f.dictionary, ids).to_numpy(zero_copy_only=False)[
            f.indices.to_numpy()].astype(np.intp)
        out[code, i] = b.column("mw").to_numpy()
    print(json.dumps({"s": time.perf_counter() - t0, "sum": float(np.nansum(out))}),
          file=sys.stderr)
    return time.perf_counter() - t0


# --------------------------------------------------------------------------------------------
# running
# --------------------------------------------------------------------------------------------
#: A small launcher process starts each run and reports its peak RSS.  On Linux a child's
#: ru_maxrss also counts the memory of the process that exec'd it (the high-water mark of
#: the address space replaced at exec, which for a vfork-started child is the parent's), so
#: starting the runs straight from this script would report at least this script's own
#: high-water mark.  The launcher is a bare interpreter (-S, a few MB).
LAUNCHER = """
import json, os, sys, time
t0 = time.perf_counter()
pid = os.fork()
if pid == 0:
    os.execv(sys.argv[1], sys.argv[1:])
_, status, ru = os.wait4(pid, 0)
print(json.dumps({"rc": os.waitstatus_to_exitcode(status), "s": time.perf_counter() - t0,
                  "maxrss_kb": ru.ru_maxrss, "cpu_s": ru.ru_utime + ru.ru_stime}))
"""


def run_child(argv: list[str], cwd: Path) -> dict:
    load = os.getloadavg()[0]
    env = dict(os.environ, MPLBACKEND="Agg")
    with open(cwd / "stderr.txt", "wb") as err:
        p = subprocess.run([sys.executable, "-S", "-c", LAUNCHER, sys.executable, *argv],
                           cwd=cwd, env=env, stdout=subprocess.PIPE, stderr=err, check=False)
    res = json.loads(p.stdout.decode().strip().splitlines()[-1])
    tail = (cwd / "stderr.txt").read_text(errors="replace").strip().splitlines()[-3:]
    return {"rc": res["rc"], "wall_s": res["s"], "peak_gb": res["maxrss_kb"] / 2**20,
            "cpu_s": res["cpu_s"], "load": load, "tail": tail}


def run_case(c: Case, data: Path) -> dict:
    print(f"{c.name}: {c.feeders} feeders x {c.interval} min, {c.layout} {c.fmt}", flush=True)
    wb, m = prepare(c, data)
    work = data / f"run_{c.name}"
    work.mkdir(exist_ok=True)
    base = run_child([str(Path(__file__).resolve()), "--baseline", str(m), str(c.feeders),
                      str(c.interval)], work)
    tool = run_child(["-m", "allocator", "check", str(wb), "--metered", str(m), "--format",
                      "none", "--quiet", "--out", str(work / "out")], work)
    rows = len(intervals(c.interval)) * c.feeders
    r = {"case": c.name, "rows_m": rows / 1e6, "file_gb": m.stat().st_size / 2**30,
         "tool": tool, "baseline": base}
    print(f"  baseline {base['wall_s']:.1f} s {base['peak_gb']:.2f} GB (load {base['load']:.1f})"
          f"; tool {tool['wall_s']:.1f} s {tool['peak_gb']:.2f} GB (load {tool['load']:.1f}) "
          f"exit {tool['rc']}", flush=True)
    if tool["rc"] != 0:
        print("  " + "\n  ".join(tool["tail"]))
    return r


def verdict(c: Case, r: dict) -> str:
    t, b = r["tool"], r["baseline"]
    if t["rc"] != 0:
        return f"exit {t['rc']}"
    bad = []
    if c.max_s is not None and t["wall_s"] > c.max_s:
        bad.append(f"> {c.max_s:g} s")
    if c.max_gb is not None and t["peak_gb"] > c.max_gb:
        bad.append(f"> {c.max_gb:g} GB")
    if c.max_ratio is not None and t["wall_s"] > c.max_ratio * b["wall_s"]:
        bad.append(f"> {c.max_ratio:g}x")
    return "met" if not bad else "MISSED " + ", ".join(bad)


def table(cases: list[Case], results: list[dict]) -> str:
    head = ("| case | rows | file | tool s | tool CPU s | tool peak | baseline s | "
            "baseline CPU s | baseline peak | ratio | target | load | verdict |")
    lines = [head, "|" + "---|" * 13]
    for c, r in zip(cases, results):
        t, b = r["tool"], r["baseline"]
        target = ", ".join(x for x in (
            f"≤ {c.max_s:g} s" if c.max_s else "", f"≤ {c.max_gb:g} GB" if c.max_gb else "",
            f"≤ {c.max_ratio:g}x" if c.max_ratio else "") if x) or "completes"
        lines.append(
            f"| {c.name}: {c.feeders:,} × {c.interval} min {c.layout} {c.fmt} | "
            f"{r['rows_m']:.1f} M | {r['file_gb']:.2f} GB | {t['wall_s']:.1f} | "
            f"{t['cpu_s']:.1f} | {t['peak_gb']:.2f} GB | {b['wall_s']:.1f} | {b['cpu_s']:.1f} | "
            f"{b['peak_gb']:.2f} GB | "
            f"{t['wall_s'] / b['wall_s']:.2f} | {target} | {t['load']:.1f} | "
            f"{verdict(c, r)} |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    if argv and argv[0] == "--baseline":
        baseline(Path(argv[1]), int(argv[2]), int(argv[3]))
        return 0
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="small feeder counts (smoke run)")
    ap.add_argument("--cases", default=",".join(CASES))
    ap.add_argument("--data", default="/work/bench-data")
    ap.add_argument("--keep", action="store_true", help="keep the metered files")
    ap.add_argument("--json")
    a = ap.parse_args(argv)
    data = Path(a.data) / ("quick" if a.quick else "full")
    data.mkdir(parents=True, exist_ok=True)
    cases = [CASES[k] for k in a.cases.split(",")]
    if a.quick:
        cases = [Case(c.name, QUICK[c.name], c.interval, c.fmt, c.layout, None, None)
                 for c in cases]
    print(f"{os.cpu_count()} CPUs; data in {data}", flush=True)
    results = [run_case(c, data) for c in cases]
    print(table(cases, results))
    if a.json:
        Path(a.json).write_text(json.dumps(results, indent=2) + "\n")
    if not a.keep:
        for c in cases:
            (data / c.file).unlink(missing_ok=True)
    return 0 if all(r["tool"]["rc"] == 0 for r in results) else 1


if __name__ == "__main__":
    sys.exit(main())
