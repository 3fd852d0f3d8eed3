"""One output layout for ``check``, ``plan`` and ``demo`` (outputs/README.md): every folder
holds at its top the check files of the allocation it reports; a plan adds plan.csv and
plan.json and the current allocation's check under current/; the demo is a plan folder with
year_summary.csv, its workbook under input/ and the frequency files under frequency/ (the
current allocation's under current/frequency/), which are the files ``frequency`` writes.

The folders are compared with each other and with the command that checks the same
allocation on its own (``check``, ``check --assignment plan.csv``).  Python's ``json`` reads
the summaries.  The study is invented test data (tests/smallnet.py).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import allocator.demo
from allocator.cli import main
from smallnet import write_small_study

CHECK = {"summary.json", "armed_load.csv", "shortfalls.csv", "exporting_feeders.csv",
         "by_substation.csv", "low_load.csv", "report.xlsx", "run.json", "statement.csv"}


def _ls(d: Path) -> set[str]:
    return {p.name + ("/" if p.is_dir() else "") for p in d.iterdir()}


def _blocks(d: Path):
    return json.loads((d / "summary.json").read_text(encoding="utf-8"))["blocks"]


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("layout")
    wb = write_small_study(d)
    fmt = ["--format", "xlsx", "--quiet"]
    assert main(["check", str(wb), "--out", str(d / "check")] + fmt) == 0
    assert main(["plan", str(wb), "--out", str(d / "plan"), "--time-limit", "3"] + fmt) == 0
    assert main(["check", str(wb), "--assignment", str(d / "plan" / "plan.csv"), "--out",
                 str(d / "recheck")] + fmt) == 0
    assert main(["frequency", str(wb), "--out", str(d / "freq"), "--format", "none",
                 "--quiet"]) == 0

    def small(build_dir: Path) -> Path:
        build_dir.mkdir(parents=True, exist_ok=True)
        return write_small_study(build_dir)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(allocator.demo, "demo_workbook_path", small)
        assert main(["demo", "--out", str(d / "demo"), "--time-limit", "3"] + fmt) == 0
    return d


def test_check_folder(runs):
    assert _ls(runs / "check") == CHECK


def test_plan_folder_is_a_check_folder_plus_the_plan_and_current(runs):
    plan = runs / "plan"
    assert _ls(plan) == CHECK | {"plan.csv", "plan.json", "work_list.csv",
                           "visit_order.csv", "current/"}
    assert _ls(plan / "current") == CHECK
    # the top reports the planned allocation, current/ the workbook's current one
    assert _blocks(plan) == _blocks(runs / "recheck")
    assert _blocks(plan / "current") == _blocks(runs / "check")


def test_demo_folder_is_a_plan_folder_plus_frequency_and_inputs(runs):
    demo, plan = runs / "demo", runs / "plan"
    assert _ls(demo) == _ls(plan) | {"year_summary.csv", "input/", "frequency/"}
    assert _ls(demo / "current") == _ls(plan / "current") | {"frequency/"}
    assert _ls(demo / "input") == {"small.xlsx"}
    # the frequency folders hold what the frequency command writes (no figures: xlsx only)
    assert _ls(demo / "frequency") == _ls(runs / "freq") == {"frequency.csv",
                                                              "frequency.json", "run.json"}
    assert _ls(demo / "current" / "frequency") == _ls(runs / "freq")
    assert _blocks(demo / "current") == _blocks(runs / "check")
    # the current allocation's frequency folder is the frequency command's own result
    fq = json.loads((runs / "freq" / "frequency.json").read_text(encoding="utf-8"))
    cf = json.loads((demo / "current" / "frequency" / "frequency.json").read_text(
        encoding="utf-8"))
    assert cf["intervals"] == fq["intervals"]
    head = (demo / "year_summary.csv").read_text(encoding="utf-8").splitlines()[0]
    assert head.startswith("scenario,feeder_id")
