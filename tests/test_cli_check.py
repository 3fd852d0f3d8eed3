"""The ``check`` command end to end through ``allocator.cli.main`` (returns the exit code).

Outside references used by the checks:

* Europe/Berlin is UTC+1 in January, so local midnight of 1 January 2025 is
  2024-12-31T23:00:00Z; 2025 has 365 days, and the 23-hour spring and 25-hour autumn days
  cancel, so an hourly year has 8760 intervals (from memory).
* CSV read back with Python's ``csv`` module (RFC 4180 layout) and ``json`` for summary.json.

The workbook is invented test data.
"""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest

from allocator.check import WINDOW_COLUMNS
from allocator.cli import main
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "inputs_demo" / "lindmark.xlsx"
BLOCK_KEYS = {"block", "order", "pickup_hz", "delay_s", "target_pct", "min_pct", "max_pct",
              "min_share_pct", "p5_share_pct", "mean_share_pct", "max_share_pct",
              "intervals_below_min", "intervals_above_max", "shortfall_mwh", "compliant"}


def _shape(p, s, d, m):
    """Invented daily shape (per unit of peak)."""
    h = m // 60
    return 0.5 + (0.4 if 8 <= h < 20 else 0.0) - (0.1 if d == "sunday" else 0.0)


@pytest.fixture()
def wb(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    feeders = base_feeders(10)  # peaks 1..10 MW, 55 MW in all
    for i, b in ((0, "S1"), (4, "S1"), (1, "S2"), (3, "S2")):  # ~6 MW = ~11 % each
        feeders[i]["current_block"] = b
    feeders[0]["pv_mw"] = 4.0  # exports on sunny middays
    feeders[3]["relay"] = "direction_blocked"
    feeders[3]["pv_mw"] = 6.0
    return write_workbook(tmp_path / "study.xlsx", settings=dict(BASE_SETTINGS),
                          feeders=feeders, profiles=flat_profiles(value=_shape))


def _csv(path):
    with open(path, newline="", encoding="utf-8") as fh:
        r = csv.reader(fh)
        header = next(r)
        return header, list(r)


def _tree(d: Path) -> dict[str, str]:
    return {str(p.relative_to(d)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(d.rglob("*")) if p.is_file()}


VERDICT_KEYS = {"block", "compliant", "failing_scenarios", "min_share_pct", "min_share_scenario",
                "min_share_local_time", "max_share_pct", "max_share_scenario",
                "headroom_to_min_pp", "headroom_to_max_pp", "worst_violation_pp"}


def test_check_writes_files(wb, tmp_path):
    rc = main(["check", str(wb), "--out", "out", "--format", "none", "--quiet"])
    assert rc == 0
    out = tmp_path / "out"
    for name in ("summary.json", "armed_load.csv", "shortfalls.csv", "exporting_feeders.csv",
                 "by_substation.csv"):
        assert (out / name).is_file(), name
    assert not (out / "report.xlsx").exists() and not (out / "report.html").exists()
    summ = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert {"rule", "compliant", "blocks", "scenarios", "scenarios_judged",
            "verdict_covers"} <= set(summ)
    assert summ["rule"] == "every_interval"
    # without a scenarios sheet: clear-sky PV and no PV, both in the study year
    assert summ["scenarios_judged"] == ["clear_sky", "no_pv"]
    sc = {s["scenario"]: s for s in summ["scenarios"]}
    clear = sc["clear_sky"]
    assert clear["intervals"] == 8760 and clear["demand_nonpositive_intervals"] == 0
    assert [b["block"] for b in clear["blocks"]] == ["S1", "S2"]
    for b in clear["blocks"]:
        assert BLOCK_KEYS <= set(b), BLOCK_KEYS - set(b)
    for b in summ["blocks"]:
        assert VERDICT_KEYS <= set(b), VERDICT_KEYS - set(b)
    # the overall verdict is the worst over the scenarios
    assert summ["compliant"] == all(s["compliant"] for s in summ["scenarios"])
    for j, b in enumerate(summ["blocks"]):
        assert b["min_share_pct"] == min(s["blocks"][j]["min_share_pct"] for s in sc.values())
        assert b["compliant"] == all(s["blocks"][j]["compliant"] for s in sc.values())

    header, rows = _csv(out / "armed_load.csv")
    assert header == ["scenario", "timestamp_utc", "local_time", "demand_mw", "S1_mw",
                      "S1_pct", "S1_cum_pct", "S2_mw", "S2_pct", "S2_cum_pct"]
    assert len(rows) == 2 * 8760
    rows = [r for r in rows if r[0] == "clear_sky"]
    assert len(rows) == 8760
    # ISO 8601: UTC with Z, local time with its offset
    assert rows[0][1] == "2024-12-31T23:00:00Z" and rows[0][2] == "2025-01-01T00:00+01:00"
    v = np.array([[float(x) for x in r[3:]] for r in rows])
    dem, s1mw, s1, c1, s2mw, s2, c2 = v.T
    # the CSV agrees with itself: share = 100 * MW / demand, cumulative in block order
    np.testing.assert_allclose(s1, 100 * s1mw / dem, rtol=1e-6, atol=2e-6)
    np.testing.assert_allclose(s2, 100 * s2mw / dem, rtol=1e-6, atol=2e-6)
    np.testing.assert_allclose(c1, s1, atol=2e-6)
    np.testing.assert_allclose(c2, s1 + s2, atol=3e-6)
    # and with summary.json (CSV floats have 6 decimals)
    for b, s, mw in zip(clear["blocks"], (s1, s2), (s1mw, s2mw)):
        assert b["min_share_pct"] == pytest.approx(s.min(), abs=1e-5)
        assert b["max_share_pct"] == pytest.approx(s.max(), abs=1e-5)
        assert b["mean_share_pct"] == pytest.approx(s.mean(), abs=1e-5)
        assert b["p5_share_pct"] == pytest.approx(np.percentile(s, 5), abs=1e-5)
        assert b["intervals_below_min"] == int((s < b["min_pct"] - 1e-5).sum())
        short = np.maximum(b["min_pct"] / 100 * dem - mw, 0).sum()  # 1-hour intervals
        assert b["shortfall_mwh"] == pytest.approx(short, abs=1e-3)

    header, rows = _csv(out / "shortfalls.csv")
    assert header == ["rank", "scenario"] + WINDOW_COLUMNS[1:]
    assert len(rows) > 0  # F0's PV pulls S1 below 8 % on sunny middays
    assert {r[1] for r in rows} <= {"clear_sky", "no_pv"}
    header, rows = _csv(out / "exporting_feeders.csv")
    assert header[:2] == ["scenario", "feeder_id"]
    assert {r[1] for r in rows if r[0] == "clear_sky"} == {"F00", "F03"}
    assert not [r for r in rows if r[0] == "no_pv"]  # no PV output: nothing exports
    header, rows = _csv(out / "by_substation.csv")
    assert header == ["scenario", "substation", "zone", "block", "feeders", "customers",
                      "mean_armed_mw", "armed_mw_at_block_min"]
    assert sum(int(r[4]) for r in rows if r[0] == "clear_sky") == 4  # four armed feeders


def test_default_out_folder(wb, tmp_path):
    assert main(["check", "study.xlsx", "--format", "none", "--quiet"]) == 0
    assert (tmp_path / "outputs" / "study" / "check" / "summary.json").is_file()


def test_bad_assignment_exit_2_nothing_written(wb, tmp_path, capsys):
    bad = tmp_path / "bad.csv"
    bad.write_text("feeder_id,block\nF00,S1\nNOPE,S1\nF02,S9\n", encoding="utf-8")
    rc = main(["check", str(wb), "--assignment", str(bad), "--out", "out", "--format", "none"])
    assert rc == 2
    assert not (tmp_path / "out").exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".out")] == []
    err = capsys.readouterr()
    text = " ".join((err.out + err.err).split())  # rich wraps long lines
    assert "line 3" in text and "line 4" in text and "Nothing was written" in text

    # a previous output folder stays byte-identical
    assert main(["check", str(wb), "--out", "out", "--format", "none", "--quiet"]) == 0
    (tmp_path / "out" / "note.txt").write_text("mine", encoding="utf-8")
    before = _tree(tmp_path / "out")
    rc = main(["check", str(wb), "--assignment", str(bad), "--out", "out", "--format", "none"])
    assert rc == 2
    assert _tree(tmp_path / "out") == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.csv", "out", "study.xlsx"]


def test_good_assignment_is_checked(wb, tmp_path):
    good = tmp_path / "good.csv"
    good.write_text("feeder_id,block\nF09,S1\nF07,S2\n", encoding="utf-8")  # 10 and 8 MW
    assert main(["check", str(wb), "--assignment", str(good), "--out", "o2", "--format",
                 "none", "--quiet"]) == 0
    header, rows = _csv(tmp_path / "o2" / "by_substation.csv")
    assert sorted((r[0], r[1], r[3]) for r in rows) == [
        ("clear_sky", "SUB1", "S1"), ("clear_sky", "SUB1", "S2"), ("no_pv", "SUB1", "S1"),
        ("no_pv", "SUB1", "S2")]
    summ = json.loads((tmp_path / "o2" / "summary.json").read_text(encoding="utf-8"))
    # no PV on F09 / F07 and one flat shape: S1 / S2 = 10/8 in every interval
    s1, s2 = summ["scenarios"][0]["blocks"]
    assert s1["min_share_pct"] / s2["min_share_pct"] == pytest.approx(10 / 8, rel=1e-6)
    assert any("not listed" in w for w in summ["warnings"])


def test_console_verdict_table_fits_100_columns(wb, monkeypatch, capsys):
    monkeypatch.setenv("COLUMNS", "100")
    assert main(["check", str(wb), "--out", "out", "--format", "none"]) == 0
    text = capsys.readouterr().out
    lines = text.splitlines()
    assert max(len(x) for x in lines) <= 100
    assert "Armed load per block" in text and "rule every_interval" in text
    head = next(x for x in lines if "block" in x and "status" in x)
    for col in ("Hz", "band %", "lowest %", "highest %", "room to min pp", "room to max pp"):
        assert col in head, col
    assert any(x.startswith("S1 ") for x in lines) and any(x.startswith("S2 ") for x in lines)
    assert "Overall:" in text


@pytest.fixture(scope="module")
def demo_console(tmp_path_factory):
    d = tmp_path_factory.mktemp("democonsole")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("COLUMNS", "100")
        import contextlib
        import io

        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            rc = main(["check", str(DEMO), "--out", str(d / "out"), "--format", "none"])
    return rc, buf.getvalue()


def test_demo_console_within_100_columns(demo_console):
    rc, text = demo_console
    assert rc == 0
    assert max(len(x) for x in text.splitlines()) <= 100
    assert "NOT COMPLIANT" in text and "Annual statement" in text
    # the statement's citation: Regulation (EU) 2017/2196 Art. 50(1) (from memory)
    assert "2017/2196 Art. 50(1)" in " ".join(text.split())


def test_demo_verdict_words_not_truncated(demo_console):
    _, text = demo_console
    assert "below band" in text and "not compliant: B2" in text and "…" not in text


@pytest.mark.parametrize("width", [80, 60, 40])
def test_demo_console_cuts_no_number(width, tmp_path, monkeypatch, capsys):
    """At 80 columns (and narrower, piped) no line is longer than the console and no value
    is cut: every number the summary holds for B2 appears whole."""
    monkeypatch.setenv("COLUMNS", str(width))
    assert main(["check", str(DEMO), "--out", str(tmp_path / "o"), "--format", "none"]) == 0
    text = capsys.readouterr().out
    assert max(len(x) for x in text.splitlines()) <= width
    assert "…" not in text
    summ = json.loads((tmp_path / "o" / "summary.json").read_text())
    b2 = next(b for b in summ["blocks"] if b["block"] == "B2")
    flat = " ".join(text.split())
    for v in (f"{b2['min_share_pct']:.1f}", f"{b2['headroom_to_min_pp']:+.2f}",
              f"{b2['pickup_hz']:.2f}"):
        assert v in flat, v
