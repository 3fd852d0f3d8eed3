"""The command line end to end: validate, plan, demo, exit codes (invented test data)."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from allocator.cli import main
from wbfactory import base_feeders, write_workbook


@pytest.fixture
def wb(tmp_path):
    fe = base_feeders(10)
    for i, f in enumerate(fe):
        f["current_block"] = "S1" if i < 3 else None
        f["pv_mw"] = 2.0 if i % 3 == 0 else 0.0
    return write_workbook(tmp_path / "small.xlsx", feeders=fe)


def test_validate_ok_prints_counts(wb, capsys):
    assert main(["validate", str(wb)]) == 0
    out = capsys.readouterr().out
    assert "10 (10 armable" in out and "S1 49 Hz" in out and "total peak" in out


def test_validate_bad_exit_2(tmp_path, capsys):
    p = tmp_path / "x.xlsx"
    p.write_text("not a workbook")
    assert main(["validate", str(p)]) == 2
    err = capsys.readouterr().err
    assert "not an xlsx workbook" in err and "Nothing was written" in err


def test_internal_error_exit_1_one_line(wb, monkeypatch, capsys):
    import allocator.workbook as wbmod

    def boom(*a, **k):
        raise RuntimeError("simulated fault\nsecond line")

    monkeypatch.setattr(wbmod, "read_study", boom)
    assert main(["validate", str(wb)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "internal error" in err[0] and "Traceback" not in err[0]


def test_plan_writes_files_and_check(wb, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["plan", str(wb), "--time-limit", "10", "--format", "none", "--quiet"]) == 0
    out = tmp_path / "outputs" / "small" / "plan"
    plan = pd.read_csv(out / "plan.csv", keep_default_na=False)
    assert list(plan.columns) == ["feeder_id", "block", "previous_block", "changed"]
    assert len(plan) == 10
    info = json.loads((out / "plan.json").read_text())
    for k in ("status", "scenarios", "objective", "relays_changed", "feeders_changed",
              "relays_changed_lower_bound", "levels", "solve_seconds", "rounds",
              "intervals_in_model", "solver", "solver_version", "combination"):
        assert k in info
    assert info["scenarios"] == ["clear_sky", "no_pv"]
    summary = json.loads((out / "summary.json").read_text())
    # the plan's reported worst violation is the check's number
    assert info["worst_violation_pp"] == pytest.approx(summary["worst_violation_pp"], abs=1e-9)
    changed = (plan["block"] != plan["previous_block"]).sum()
    assert info["feeders_changed"] == changed
    # the field files: statement with the check, work list (one row per relay changed) and
    # visit order (one row per substation visited, after the network now) beside plan.csv
    assert (out / "statement.csv").is_file()
    wl = pd.read_csv(out / "work_list.csv", keep_default_na=False)
    vo = pd.read_csv(out / "visit_order.csv", keep_default_na=False)
    assert len(wl) == info["relays_changed"]
    assert sorted(set(wl["visit"])) == list(range(1, len(vo)))
    assert set(wl["visit_substation"]) == set(vo["substation"][1:])
    # the planned assignment is accepted by `check --assignment`
    assert main(["check", str(wb), "--assignment", str(out / "plan.csv"), "--out",
                 str(tmp_path / "recheck"), "--format", "none", "--quiet"]) == 0
    again = json.loads((tmp_path / "recheck" / "summary.json").read_text())
    assert again["blocks"] == summary["blocks"]


@pytest.mark.slow
def test_demo_whole_job(tmp_path, monkeypatch, capsys):
    from agreement import assert_plan_outputs_agree, figure_spy

    monkeypatch.chdir(tmp_path)
    drawn = figure_spy(monkeypatch)
    assert main(["demo", "--time-limit", "15"]) == 0
    out = tmp_path / "outputs" / "demo"
    for name in ("report.html", "report.xlsx", "summary.json", "plan.csv", "plan.json",
                 "year_summary.csv", "armed_load.csv", "statement.csv", "work_list.csv",
                 "visit_order.csv", "figures/switched_vs_fixed.png"):
        assert (out / name).is_file(), name
    import openpyxl

    names = openpyxl.load_workbook(out / "report.xlsx", read_only=True).sheetnames
    assert {"statement", "work_list", "visit_order"} <= set(names)
    assert any((out / "figures").glob("*.png"))
    text = capsys.readouterr().out
    assert "Verdict before: NOT COMPLIANT" in text and "Visit order" in text
    # the demo's remotely switchable feeders: both plans, side by side, the chosen one named
    assert "Fixed plan and switched plan" in text and "switching operations per year" in text
    info = json.loads((out / "plan.json").read_text(encoding="utf-8"))
    arming = info["arming"]
    assert set(arming["plans"]) == {"fixed", "switched"} and arming["mode"] == "auto"
    assert "Plan put in service: the " + arming["chosen"] + " plan" in " ".join(text.split())
    chosen = arming["plans"][arming["chosen"]]
    # the counts of the chosen plan are the plan's own (the same counting for both)
    for key in ("field_relays_changed", "remote_relays_changed", "feeders_changed"):
        assert chosen[key] == info[key], key
    # a schedule's files only when a schedule is put in service
    switched = arming["chosen"] == "switched"
    assert (out / "schedule.csv").is_file() == switched == ("switching" in info)
    if switched:
        sw = info["switching"]
        n_rows = len((out / "switching.csv").read_text(encoding="utf-8").splitlines()) - 1
        assert n_rows == sw["switch_operations_per_year"]
        assert "fixed_plan" in sw and "worst" in sw["if_switching_fails"]
    # a switchable relay is set in the control system: the field rows of the work list are
    # exactly the field changes the plan counts, every switchable feeder it changes is a
    # "set remote schedule" row, and no switchable feeder needs a site visit
    wl = pd.read_csv(out / "work_list.csv", keep_default_na=False)
    field = wl[wl["action"] != "set remote schedule"]
    assert len(field) == info["field_relays_changed"]
    remote = {f for x in wl.loc[wl["action"] == "set remote schedule", "feeders"]
              for f in x.split("; ")}
    assert not remote & {f for x in field["feeders"] for f in x.split("; ")}
    plan = pd.read_csv(out / "plan.csv", keep_default_na=False)
    switchable = set(plan.loc[plan["changed_by"] == "remote schedule", "feeder_id"])
    assert remote == switchable
    assert "report.html" in text and "report.xlsx" in text
    # one result, every rendering: the CSV files, the sheets, the page and the console agree
    assert_plan_outputs_agree(out, text, drawn)


def test_review_without_dask_is_bad_input_naming_the_install(tmp_path, monkeypatch, capsys):
    """Without the optional Dask extra, review stops with exit 2, the install command and
    nothing written (the README installs the extra as it installs the tool)."""
    import sys

    from smallnet import write_small_study

    (tmp_path / "studies").mkdir()
    write_small_study(tmp_path / "studies")
    monkeypatch.setitem(sys.modules, "dask", None)
    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    out = tmp_path / "review"
    assert main(["review", str(tmp_path / "studies"), "--out", str(out)]) == 2
    err = " ".join(capsys.readouterr().err.split())
    assert "pip install '.[fleet]'" in err and "Nothing was written" in err
    assert not out.exists()
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    assert "pip install '.[fleet]'" in readme and "pip install -e '.[fleet]'" not in readme


def test_max_changes_help_counts_relays():
    """--max-changes limits relays changed in the field (the planner's change cost is per
    relay, a trip group once), and the help says so."""
    from allocator.cli import build_parser

    sub = next(a for a in build_parser()._actions if a.dest == "command")
    text = " ".join(sub.choices["plan"].format_help().split())
    assert "at most N relays may change setting in the field" in text
    assert "feeders may change block" not in text


def test_a_level_claims_its_own_time(tmp_path):
    """A level not proven says how long it ran, not how long the whole plan took."""
    from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

    from allocator.pipeline import PlanOptions, PlanRequest, Sources, plan_study

    fs = base_feeders(10)
    for i, f in enumerate(fs):
        f["current_block"] = ["S1", "S2", None][i % 3]
    wb = write_workbook(tmp_path / "t.xlsx", settings=dict(BASE_SETTINGS), feeders=fs,
                        profiles=flat_profiles())
    res = plan_study(PlanRequest(Sources(wb), PlanOptions(time_limit_s=5)))
    claims = [lv for lv in res.record["levels"] if "best found in" in lv["claim"]]
    assert claims, "the instance has no level that is not proven"
    for lv in claims:
        sec = float(lv["seconds"])
        want = f"{sec:.1f} s" if sec < 10 else f"{sec:.0f} s"
        assert f"best found in {want}" in lv["claim"], (lv["claim"], sec)


def test_piped_console_lines_have_no_trailing_spaces(tmp_path, monkeypatch, capsys):
    """Piped output (a file, a log) ends no line with a space: the padding of the tables is
    not written (common practice, no source)."""
    from smallnet import write_small_study

    monkeypatch.setenv("COLUMNS", "80")
    wb = write_small_study(tmp_path)
    assert main(["check", str(wb), "--out", str(tmp_path / "c"), "--format", "none"]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) > 10 and max(len(x) for x in lines) <= 80
    assert [x for x in lines if x != x.rstrip(" ")] == []


def test_year_lines_say_no_feeder_exports(tmp_path):
    """A year without export says so in words a person would use ("no feeder exports at any
    interval", not "no feeders export at some interval")."""
    import io

    from rich.console import Console

    from allocator.console.demo import year_lines
    from allocator.scenarios import build_years
    from allocator.workbook import read_study
    from smallnet import write_small_study

    st = read_study(write_small_study(tmp_path))
    no_pv = [y for y in build_years(st) if y.scenario == "no_pv"]
    buf = io.StringIO()
    year_lines(Console(file=buf, width=200), st, no_pv)
    text = buf.getvalue()
    assert "no feeder exports at any interval" in text and "at some interval" not in text


def test_arming_choices_are_the_pipelines():
    """The --arming choices are the pipeline's (the CLI writes them out to keep --help free of
    planner imports)."""
    from allocator.cli import build_parser
    from allocator.pipeline.plan import ARMING

    sub = next(a for a in build_parser()._actions if a.dest == "command")
    arming = next(a for a in sub.choices["plan"]._actions if a.dest == "arming")
    assert tuple(arming.choices) == ARMING
