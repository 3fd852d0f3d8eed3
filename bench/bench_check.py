"""Benchmark ``allocator.check.run_check`` against a straightforward pandas implementation
(not a pytest test).

Run:  /work/venv/bin/python bench/bench_check.py [--feeders 5000] [--intervals 35040]
      [--blocks 6] [--chunk 1000] [--repeat 3]

The data is synthetic and invented (seeded): N feeders x 35,040 fifteen-minute intervals,
net load = peak x daily shape - PV x sun shape + noise, so many feeders export at midday
(negative net load); about 15 % of the relays are direction-blocked and 3 % have no relay;
about 85 % of the feeders are armed in one of the blocks.  The ``Year`` and the ``Study``
are built directly (no workbook), so only the check is timed.

* ``run_check`` wall time: best of ``--repeat`` runs (target <= 5 s at 5,000 feeders).
* Extra memory of ``run_check``: the tracemalloc peak during one more run, started after the
  data exist (numpy reports its array allocations to tracemalloc; BLAS work buffers are not
  seen).  Target <= 2 GB.
* pandas reference: the long table (feeder x interval rows with a block and a relay column),
  rows of unarmed or relay-less feeders dropped, ``clip(lower=0)`` for the direction-blocked
  rows, ``groupby(["block", "interval"]).sum()``.  The long table of all 5,000 feeders would
  be 175 M rows (several GB before the groupby's own copies), so it is built in feeder
  chunks of ``--chunk`` feeders over the full year, and the per-chunk block sums are added;
  its time is the sum over the chunks, i.e. the whole data set, nothing extrapolated.  Its
  memory is the tracemalloc peak of one chunk.
* The two results must agree (``np.allclose``).
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from allocator.check import run_check  # noqa: E402
from allocator.domain import (RELAY_DIRECTION_BLOCKED, RELAY_KINDS, RELAY_NONE,  # noqa: E402
                              Block, Feeder, Profiles, Settings, Study)
from allocator.timegrid import study_intervals  # noqa: E402
from allocator.year import Year  # noqa: E402

TARGET_S, TARGET_GB = 5.0, 2.0


def make_case(n_f: int, n_t: int, n_b: int, seed: int = 2025) -> tuple[Study, Year, np.ndarray]:
    rng = np.random.default_rng(seed)
    iv = 15 if n_t > 8784 else 60
    ts = study_intervals(2025, "Europe/Berlin", iv)[:n_t]
    n_t = len(ts)
    hour = (np.arange(n_t) % (1440 // iv)) * iv / 60.0
    day = np.arange(n_t) // (1440 // iv)
    daily = 0.55 + 0.3 * np.sin(np.pi * np.clip(hour - 6, 0, 16) / 16)
    season = 0.6 + 0.4 * np.sin(np.pi * ((day - 80) % 365) / 365)
    sun = np.clip(np.sin(np.pi * (hour - 6) / 12), 0, None) * season
    peak = rng.uniform(0.5, 6.0, n_f)
    pv = peak * rng.uniform(0.0, 1.6, n_f) * (rng.random(n_f) < 0.6)
    net = np.empty((n_f, n_t))
    for a in range(0, n_f, 250):
        b = min(a + 250, n_f)
        net[a:b] = (peak[a:b, None] * daily[None, :] - pv[a:b, None] * sun[None, :]
                    + 0.05 * peak[a:b, None] * rng.standard_normal((b - a, n_t)))
    net.setflags(write=False)
    u = rng.random(n_f)
    relay = np.where(u < 0.15, RELAY_DIRECTION_BLOCKED, np.where(u < 0.18, RELAY_NONE, 1))
    blk = np.where(rng.random(n_f) < 0.85, rng.integers(0, n_b, n_f), -1).astype(np.intp)
    blk[relay == RELAY_NONE] = -1
    demand = net.sum(axis=0)

    settings = Settings("bench", 2025, "Europe/Berlin", 50.0, iv, 48.0, 12.0, None, None,
                        "feeders", 0.8, "exclude", "every_interval", None, None, 60.0, 0.0)
    blocks = tuple(Block(f"B{j + 1}", j + 1, 49.0 - 0.2 * j, 0.1, None, 10.0, 7.5, 12.5)
                   for j in range(n_b))
    feeders = tuple(Feeder(f"F{i:05d}", f"SUB{i % 60:02d}", None, "p", float(peak[i]),
                           float(pv[i]), RELAY_KINDS[relay[i]], None, None, None, None, 100,
                           i + 2) for i in range(n_f))
    profiles = Profiles(("p",), ("all",), np.ones((1, 1, 3, 1440)), np.zeros(12, np.intp))
    study = Study("<bench>", settings, blocks, feeders, profiles)
    z = np.zeros(n_t)
    year = Year(ts, "Europe/Berlin", iv, study.feeder_ids, net, demand, z,
                z.astype(np.intp), z.astype(np.int8))
    return study, year, blk


def pandas_armed(net: np.ndarray, relay: np.ndarray, blk: np.ndarray, n_b: int
                 ) -> np.ndarray:
    """Armed MW [block, interval] the plain pandas way, on one long table."""
    n_f, n_t = net.shape
    long = pd.DataFrame({"interval": np.tile(np.arange(n_t, dtype=np.int32), n_f),
                         "block": np.repeat(blk.astype(np.int16), n_t),
                         "relay": np.repeat(relay.astype(np.int8), n_t),
                         "mw": net.ravel()})
    long = long[(long["block"] >= 0) & (long["relay"] != RELAY_NONE)]
    db = long["relay"] == RELAY_DIRECTION_BLOCKED
    long["mw"] = long["mw"].where(~db, long["mw"].clip(lower=0.0))
    g = long.groupby(["block", "interval"])["mw"].sum()
    return (g.unstack(fill_value=0.0)
            .reindex(index=range(n_b), columns=range(n_t), fill_value=0.0).to_numpy())


def pandas_chunked(year: Year, relay: np.ndarray, blk: np.ndarray, n_b: int, chunk: int
                   ) -> tuple[np.ndarray, float, int]:
    out = np.zeros((n_b, year.n_intervals))
    wall = 0.0
    n = 0
    for a in range(0, year.net_mw.shape[0], chunk):
        b = min(a + chunk, year.net_mw.shape[0])
        t0 = time.perf_counter()
        out += pandas_armed(year.net_mw[a:b], relay[a:b], blk[a:b], n_b)
        wall += time.perf_counter() - t0
        n += 1
    return out, wall, n


def traced_peak(fn) -> int:
    tracemalloc.start()
    tracemalloc.reset_peak()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def time_report_xlsx(chk) -> float:
    """Wall time of writing report.xlsx for the check (into a temporary folder)."""
    import tempfile

    from allocator.report.excel import write_workbook

    with tempfile.TemporaryDirectory() as d:
        t0 = time.perf_counter()
        write_workbook(chk, Path(d) / "report.xlsx")
        return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--feeders", type=int, default=5000)
    ap.add_argument("--intervals", type=int, default=35040)
    ap.add_argument("--blocks", type=int, default=6)
    ap.add_argument("--chunk", type=int, default=1000)
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()

    t0 = time.perf_counter()
    study, year, blk = make_case(a.feeders, a.intervals, a.blocks)
    relay = study.relay_code
    gen_s = time.perf_counter() - t0
    nf, nt = year.net_mw.shape
    print(f"data: {nf} feeders x {nt} intervals x {a.blocks} blocks "
          f"({year.net_mw.nbytes / 2**30:.2f} GiB net load, built in {gen_s:.1f} s); "
          f"{100 * (year.net_mw < 0).mean():.1f} % of values negative; "
          f"{(relay == RELAY_DIRECTION_BLOCKED).sum()} direction-blocked, "
          f"{(relay == RELAY_NONE).sum()} without relay, {(blk >= 0).sum()} armed")

    times = []
    chk = None
    for _ in range(a.repeat):
        t0 = time.perf_counter()
        chk = run_check(study, year, blk)
        times.append(time.perf_counter() - t0)
    check_s = min(times)
    check_peak = traced_peak(lambda: run_check(study, year, blk))

    ref, pandas_s, n_chunks = pandas_chunked(year, relay, blk, a.blocks, a.chunk)
    pandas_peak = traced_peak(lambda: pandas_armed(year.net_mw[:a.chunk], relay[:a.chunk],
                                                   blk[:a.chunk], a.blocks))
    same = np.allclose(chk.armed_mw, ref, rtol=1e-9, atol=1e-6)
    maxdiff = float(np.abs(chk.armed_mw - ref).max())
    rss_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # Linux: KiB

    gb = 2**30
    rows = [
        ("run_check (numpy)", f"{nf} x {nt}", check_s, check_peak / gb),
        (f"pandas groupby, {n_chunks} chunks of {a.chunk}", f"{nf} x {nt}", pandas_s,
         pandas_peak / gb),
    ]
    print()
    print(f"{'implementation':<34} {'data':>14} {'wall s':>8} {'extra GB':>9}")
    print("-" * 68)
    for name, data, s, m in rows:
        print(f"{name:<34} {data:>14} {s:>8.2f} {m:>9.2f}")
    print("-" * 68)
    print(f"speed ratio pandas / run_check: {pandas_s / check_s:.1f}x   "
          f"(run_check runs: {', '.join(f'{t:.2f}' for t in times)} s)")
    print(f"results equal (allclose rtol 1e-9, atol 1e-6 MW): {same}; max |diff| "
          f"{maxdiff:.2e} MW")
    print(f"pandas extra memory is for one chunk ({a.chunk} feeders); process peak RSS "
          f"{rss_gb:.2f} GiB (includes the data)")
    xlsx_s = time_report_xlsx(chk)
    print(f"report.xlsx of this check ({nt} interval rows x {2 * a.blocks + 5} columns on "
          f"the intervals sheet, {nf} feeder rows): {xlsx_s:.1f} s")
    ok_t, ok_m = check_s <= TARGET_S, check_peak / gb <= TARGET_GB
    print(f"targets: run_check <= {TARGET_S:g} s: {'met' if ok_t else 'MISSED'}; "
          f"extra memory <= {TARGET_GB:g} GB: {'met' if ok_m else 'MISSED'}")
    assert same, "run_check and the pandas reference disagree"
    return 0 if (ok_t and ok_m) else 1


if __name__ == "__main__":
    sys.exit(main())
