"""The same inputs give byte-identical outputs across runs.

Each run is a fresh interpreter (``python -m allocator``) with a different
``PYTHONHASHSEED``, so an output that depended on set or dict-of-str iteration order, on
memory addresses or on the wall clock would differ.  Compared byte for byte: ``plan.csv``,
the plan's ``summary.json`` and ``armed_load.csv``, and every CSV/JSON file of
``check``.  (``plan.json`` holds solve times and ``run.json`` the run time and the command
line; they are compared without them.)

The 12-feeder study is invented test data.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

ROOT = Path(__file__).resolve().parents[1]


def _shape(p, s, d, m):
    """Invented daily shapes per unit of peak: 'res' peaks in the evening, 'com' by day."""
    h = m / 60
    if p == "res":
        v = 0.45 + (0.45 if 17 <= h < 22 else 0.1 if 7 <= h < 9 else 0.0)
    else:
        v = 0.3 + (0.6 if 8 <= h < 18 else 0.0)
    return round(v - (0.08 if d == "sunday" else 0.0), 3)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("determinism")
    fs = base_feeders(12)
    for i, f in enumerate(fs):
        f["peak_mw"] = 1.0 + (i * 7 % 10) / 2
        f["pv_mw"] = [0.0, 1.5, 0.0, 3.0][i % 4]
        f["current_block"] = ["S1", "S2", None][i % 3]
    fs[3]["relay"] = "direction_blocked"
    fs[5]["trip_group"] = fs[6]["trip_group"] = "G1"
    fs[6]["current_block"] = fs[5]["current_block"]
    fs[9]["priority"] = "water works"
    fs[9]["current_block"] = None
    fs[10]["allowed_blocks"] = "S2"
    fs[10]["current_block"] = "S2"
    write_workbook(d / "study.xlsx", settings=dict(BASE_SETTINGS), feeders=fs,
                   profiles=flat_profiles(value=_shape))
    return d


def _run(folder: Path, args: list[str], seed: str) -> None:
    env = dict(os.environ, PYTHONHASHSEED=seed, MPLBACKEND="Agg")
    r = subprocess.run([sys.executable, "-m", "allocator", *args, "--quiet"], cwd=folder,
                       env=env, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-3000:]


def _bytes(d: Path, names: list[str]) -> dict[str, bytes]:
    return {n: (d / n).read_bytes() for n in names}


def test_plan_outputs_byte_identical(study):
    for out, seed in (("plan_a", "1"), ("plan_b", "4242")):
        _run(study, ["plan", "study.xlsx", "--out", out, "--time-limit", "20",
                     "--format", "none"], seed)
    names = ["plan.csv", "summary.json", "armed_load.csv", "current/summary.json"]
    a, b = _bytes(study / "plan_a", names), _bytes(study / "plan_b", names)
    for n in names:
        assert a[n], f"{n} is empty"
        assert a[n] == b[n], f"{n} differs between two runs"
    # plan.json: everything but the timings
    ja, jb = (json.loads((study / o / "plan.json").read_text()) for o in ("plan_a", "plan_b"))

    def strip(j):
        j = {k: v for k, v in j.items() if k != "solve_seconds"}
        j["levels"] = [{k: v for k, v in lv.items() if k != "seconds"}
                       for lv in j.get("levels", [])]
        for plan in j.get("arming", {}).get("plans", {}).values():  # each plan's timing
            plan.pop("solve_seconds", None)
        return j
    assert strip(ja) == strip(jb)
    # the runs did plan something: the plan changes at least one feeder or is in band
    assert ja["relays_changed"] > 0 or ja["every_interval_in_band"]


def test_check_outputs_byte_identical(study):
    for out, seed in (("check_a", "7"), ("check_b", "99")):
        _run(study, ["check", "study.xlsx", "--out", out, "--format", "none"], seed)
    files = sorted(p.relative_to(study / "check_a").as_posix()
                   for p in (study / "check_a").rglob("*") if p.is_file())
    assert {"summary.json", "armed_load.csv"} <= set(files)
    other = sorted(p.relative_to(study / "check_b").as_posix()
                   for p in (study / "check_b").rglob("*") if p.is_file())
    assert files == other
    # run.json records the wall-clock run time and the command line (--out differs): it is
    # compared without those two fields
    assert "run.json" in files
    ra, rb = (json.loads((study / o / "run.json").read_text()) for o in ("check_a", "check_b"))
    strip = lambda r: {k: v for k, v in r.items() if k not in ("run_time", "command_line")}  # noqa: E731
    assert strip(ra) == strip(rb) and ra["inputs"]
    files = [n for n in files if n != "run.json"]
    a, b = _bytes(study / "check_a", files), _bytes(study / "check_b", files)
    differ = [n for n in files if a[n] != b[n]]
    assert not differ, f"differ between two runs: {differ}"
    # an hourly 2025 for each default scenario (clear_sky, no_pv) and a header
    assert len(a["armed_load.csv"].splitlines()) == 2 * 8760 + 1
