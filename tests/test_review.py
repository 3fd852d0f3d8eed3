"""``review FOLDER`` on a Dask LocalCluster (two worker processes): each study's folder and
fleet summary row against the ``check`` command run on that study alone, a study with bad
input reported while the others complete, exit code 1 for it, the naming rule.

The reference for each study is a separate ``main(["check", ...])`` run in this process:
the fleet summary must repeat what ``check`` wrote (summary.json read with Python's json,
the shortfall MWh summed by the test from shortfalls.csv).  The studies are invented test
data (tests/smallnet.py); the metered file is an invented flat 1.5 MW per feeder in March.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

try:  # Dask is an optional extra for users; CI requires it (UFLS_REQUIRE_DASK=1 in .ci/run)
    import dask.distributed  # noqa: F401
except ImportError:
    if os.environ.get("UFLS_REQUIRE_DASK") == "1":
        raise RuntimeError("UFLS_REQUIRE_DASK=1 but dask.distributed is not installed "
                           "(pip install '.[test]')") from None
    pytest.skip("dask.distributed is not installed", allow_module_level=True)

from allocator.cli import main  # noqa: E402
from allocator.pipeline.review import find_studies  # noqa: E402
from smallnet import write_small_study  # noqa: E402

CHECKED = ("alpha", "gamma")
FMT = ["--format", "none", "--quiet"]


def _metered(path: Path) -> Path:
    """March 2025, hourly, feeders F00-F09 at 1.5 MW (ISO 8601 with offset, long form)."""
    t = pd.date_range("2025-03-01", "2025-04-01", freq="60min", tz="Europe/Berlin",
                      inclusive="left")
    txt = pd.Series(t.strftime("%Y-%m-%dT%H:%M%z"))
    txt = (txt.str[:-2] + ":" + txt.str[-2:]).to_numpy()
    ids = [f"F{i:02d}" for i in range(10)]
    pd.DataFrame({"timestamp": np.repeat(txt, len(ids)), "feeder_id": np.tile(ids, len(t)),
                  "mw": 1.5}).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    d = tmp_path_factory.mktemp("review")
    f = d / "studies"
    f.mkdir()
    write_small_study(f, "alpha.xlsx")
    write_small_study(f, "gamma.xlsx")
    _metered(f / "gamma.metered.csv")
    (f / "broken.xlsx").write_bytes(b"this is not a workbook")
    write_small_study(f, "twin.xlsx")
    _metered(f / "twin.metered.csv")  # and a second metered file for the same study
    (f / "twin.metered.parquet").write_bytes(b"")
    _metered(f / "orphan.metered.csv")
    rc = main(["review", str(f), "--out", str(d / "out"), "--workers", "2"] + FMT)
    for s in CHECKED:
        met = ["--metered", str(f / f"{s}.metered.csv")] if s == "gamma" else []
        assert main(["check", str(f / f"{s}.xlsx"), "--out", str(d / "alone" / s)]
                    + met + FMT) == 0
    return d, rc


def _summary(d: Path) -> pd.DataFrame:
    return pd.read_csv(d / "out" / "fleet_summary.csv", keep_default_na=False)


def test_exit_code_one_when_a_study_could_not_be_checked(fleet):
    assert fleet[1] == 1


def test_naming_rule(tmp_path):
    (tmp_path / "a.xlsx").write_bytes(b"")
    (tmp_path / "a.metered.parquet").write_bytes(b"")
    (tmp_path / "b.xlsx").write_bytes(b"")
    (tmp_path / "~$a.xlsx").write_bytes(b"")  # a spreadsheet program's lock file
    (tmp_path / "c.metered.csv").write_bytes(b"")
    studies, notes = find_studies(tmp_path)
    assert [(s.name, Path(s.metered).name if s.metered else None) for s in studies] == \
        [("a", "a.metered.parquet"), ("b", None)]
    assert len(notes) == 1 and "c.metered.csv" in notes[0]


def test_bad_folder_is_exit_2_and_nothing_written(tmp_path):
    assert main(["review", str(tmp_path / "missing"), "--out", str(tmp_path / "o")]
                + FMT) == 2
    assert main(["review", str(tmp_path), "--out", str(tmp_path / "o")] + FMT) == 2
    assert not (tmp_path / "o").exists()


def test_each_study_folder_equals_check_alone(fleet):
    d, _ = fleet
    for s in CHECKED:
        mine, alone = d / "out" / "studies" / s, d / "alone" / s
        assert {p.name for p in mine.iterdir()} == {p.name for p in alone.iterdir()}
        for p in alone.iterdir():
            if p.name != "run.json":  # run time and --out differ
                assert (mine / p.name).read_bytes() == p.read_bytes(), (s, p.name)


def test_summary_rows_repeat_what_check_wrote(fleet):
    d, _ = fleet
    df = _summary(d)
    for s in CHECKED:
        alone = d / "alone" / s
        blocks = json.loads((alone / "summary.json").read_text(encoding="utf-8"))["blocks"]
        rows = df[df["study"] == s]
        assert list(rows["block"]) == [b["block"] for b in blocks]
        assert list(rows["block_status"]) == [b["status"] for b in blocks]
        assert list(rows["min_share_local_time"]) == [b["min_share_local_time"]
                                                      for b in blocks]
        assert np.allclose(rows["min_share_pct"].astype(float), [b["min_share_pct"] for b in blocks],
                           atol=1e-6)
        # shortfall MWh of the worst scenario, summed here from the below-band windows
        w = pd.read_csv(alone / "shortfalls.csv")
        w = w[w["kind"] == "below_min"].groupby(["block", "scenario"])["energy_mwh"].sum()
        want = [w[b["block"]].max() if b["block"] in w.index.get_level_values(0) else 0.0
                for b in blocks]
        assert np.allclose(rows["shortfall_mwh"].astype(float), want, atol=1e-3)


def test_failing_studies_reported_and_the_others_complete(fleet):
    d, _ = fleet
    df = _summary(d)
    st = df.groupby("study")["status"].first().to_dict()
    assert st == {"alpha": "checked", "gamma": "checked",
                  "broken": "bad input", "twin": "bad input"}
    msg = df.set_index("study")["message"]
    assert "broken.xlsx" in msg["broken"] and "not an xlsx workbook" in msg["broken"]
    assert "two metered files" in msg["twin"]
    assert sorted(p.name for p in (d / "out" / "studies").iterdir()) == list(CHECKED)


def test_fleet_files_and_run_record(fleet):
    d, _ = fleet
    out = d / "out"
    assert {p.name for p in out.iterdir()} == {"fleet_summary.csv", "fleet_summary.xlsx",
                                               "fleet.html", "run.json", "studies"}
    one = json.loads((out / "studies" / "gamma" / "run.json").read_text(encoding="utf-8"))
    assert f"--out {out / 'studies' / 'gamma'} " in one["command_line"]  # not the temp folder
    rec = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert rec["command_line"].startswith("ufls-allocator review ")
    assert rec["studies_not_checked"] == ["broken", "twin"]
    assert {(e["study"], e["name"]) for e in rec["inputs"]} >= {
        ("gamma", "gamma.metered.csv"), ("alpha", "alpha.xlsx"), ("broken", "broken.xlsx")}
    page = (out / "fleet.html").read_text(encoding="utf-8")
    assert "system operator" in page and "not an xlsx workbook" in page
    import openpyxl

    ws = openpyxl.load_workbook(out / "fleet_summary.xlsx")["fleet"]
    assert ws.max_row == len(_summary(d)) + 1


def test_existing_scheduler_and_only_failing_studies(tmp_path):
    """--scheduler ADDRESS: a cluster started beforehand (here a LocalCluster of one
    process); a folder whose every study fails still writes the summary and exits 1."""
    from dask.distributed import LocalCluster

    (tmp_path / "s").mkdir()
    (tmp_path / "s" / "empty.xlsx").write_bytes(b"")
    with LocalCluster(n_workers=1, threads_per_worker=1, dashboard_address=None) as cl:
        rc = main(["review", str(tmp_path / "s"), "--out", str(tmp_path / "o"),
                   "--scheduler", cl.scheduler_address] + FMT)
    assert rc == 1
    df = pd.read_csv(tmp_path / "o" / "fleet_summary.csv", keep_default_na=False)
    assert list(df["study"]) == ["empty"] and list(df["status"]) == ["bad input"]
    rec = json.loads((tmp_path / "o" / "run.json").read_text(encoding="utf-8"))
    assert rec["cluster"] == cl.scheduler_address


def test_an_exception_in_a_check_is_a_failed_row(tmp_path, monkeypatch):
    """check_one turns an exception into a 'failed' result with its type and message."""
    import allocator.pipeline.review as R
    from allocator.pipeline.review import StudyFiles, check_one

    def boom(*a, **k):
        raise RuntimeError("disk full\nsecond line")
    monkeypatch.setattr(R, "write_check_folder", boom)
    r = check_one(StudyFiles("x", str(write_small_study(tmp_path))), str(tmp_path / "o"), None)
    assert (r.status, r.message, r.rows) == ("failed", "RuntimeError: disk full", ())
    assert [e["name"] for e in r.inputs] == ["small.xlsx"]
