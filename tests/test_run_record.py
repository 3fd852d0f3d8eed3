"""Plan information for people and the run record.

* Every output folder has a ``run.json`` beside its summary.json (or frequency.json): tool
  version, run time (ISO 8601 with the offset), the command line, each input file's name and
  SHA-256 (workbook, metered file, assignment CSV, the weather file of a scenario), and blank
  "prepared by" / "checked by" fields; report.xlsx and report.html show the same record with
  the sign-off fields left to fill in.
* The reports show the plan's facts with labels and units, numbers as number cells with a
  number format, and no raw plan.json key (``intervals_in_model.band_rows``, ``levels[2]``).

Outside references: SHA-256 (FIPS 180-4) through Python's ``hashlib``; ISO 8601 through
``datetime.fromisoformat``; ECMA-376 number cells (openpyxl reads an int or float, with the
cell's number format); NREL's TMY3 file 723170TYA.CSV shipped in pvlib's data folder as the
weather year.  The study is invented test data (tests/smallnet.py).
"""

from __future__ import annotations

import datetime
import hashlib
import json
import re
import shutil
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pvlib
import pytest

import allocator
from allocator.cli import main
from smallnet import write_small_study

TMY3 = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"  # NREL TMY3 (pvlib's data)
#: what a raw plan.json key looks like in a label: snake_case, a dotted path or an index
RAW_KEY = re.compile(r"[a-z]+_[a-z_]+|\w\.\w|\[\d+\]")


def _sha(p: Path) -> str:
    return hashlib.sha256(Path(p).read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("runrec")
    shutil.copy(TMY3, d / "tmy.csv")
    wb = write_small_study(d, extra_sheets={"scenarios": [
        {"scenario": "sunny", "pv": "clear_sky"},
        {"scenario": "measured", "pv": "weather:tmy.csv"}]})
    t = pd.date_range("2024-12-31T23:00Z", periods=8760, freq="h")
    pd.DataFrame({"timestamp": t.strftime("%Y-%m-%dT%H:%M:%SZ"), "feeder_id": "F01",
                  "mw": 1.2}).to_csv(d / "m.csv", index=False)
    (d / "a.csv").write_text("feeder_id,block\nF00,S1\nF19,S1\nF01,S2\nF17,S2\n",
                             encoding="utf-8")
    argv = {"check": ["check", str(wb), "--metered", str(d / "m.csv"), "--assignment",
                      str(d / "a.csv"), "--out", str(d / "check"), "--format", "xlsx,html"],
            "plan": ["plan", str(wb), "--out", str(d / "plan"), "--format", "xlsx",
                     "--time-limit", "3"],
            "frequency": ["frequency", str(wb), "--out", str(d / "freq"), "--format", "none"]}
    t0 = datetime.datetime.now().astimezone()
    for a in argv.values():
        assert main(a + ["--quiet"]) == 0, a
    return d, wb, argv, t0


def test_run_json_beside_every_summary(runs):
    d, wb, argv, t0 = runs
    folders = [p.parent for p in d.rglob("summary.json")] + [d / "freq"]
    assert {f.relative_to(d).as_posix() for f in folders} == {"check", "plan", "plan/current",
                                                              "freq"}
    for f in folders:
        rec = json.loads((f / "run.json").read_text(encoding="utf-8"))
        assert rec["tool"] == "ufls-allocator" and rec["version"] == allocator.__version__
        t = datetime.datetime.fromisoformat(rec["run_time"])  # ISO 8601 with the offset
        assert t.utcoffset() is not None and re.fullmatch(
            r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}[+-]\d{2}:\d{2}", rec["run_time"])
        assert abs((t - t0).total_seconds()) < 900
        assert rec["prepared_by"] == "" and rec["checked_by"] == ""
        cmd = argv["plan" if f.name == "current" else
                   {"check": "check", "plan": "plan", "freq": "frequency"}[f.name]]
        assert rec["command_line"].startswith("ufls-allocator " + cmd[0] + " ")
        assert all(str(x) in rec["command_line"] for x in cmd)
    check = json.loads((d / "check" / "run.json").read_text(encoding="utf-8"))
    got = {(i["role"], i["name"]): i["sha256"] for i in check["inputs"]}
    assert got == {("workbook", "small.xlsx"): _sha(wb),
                   ("metered data", "m.csv"): _sha(d / "m.csv"),
                   ("assignment", "a.csv"): _sha(d / "a.csv"),
                   ("weather year (scenario measured)", "tmy.csv"): _sha(TMY3)}
    plan = json.loads((d / "plan" / "run.json").read_text(encoding="utf-8"))
    assert [i["name"] for i in plan["inputs"]] == ["small.xlsx", "tmy.csv"]


def test_reports_carry_the_run_record_and_blank_sign_off(runs):
    d, wb, _, _ = runs
    rec = json.loads((d / "check" / "run.json").read_text(encoding="utf-8"))
    ws = openpyxl.load_workbook(d / "check" / "report.xlsx")["summary"]
    rows = {r[0].value: r for r in ws.iter_rows() if r[0].value is not None}
    assert rows["tool and version"][1].value == f"ufls-allocator {allocator.__version__}"
    run_t = datetime.datetime.fromisoformat(rec["run_time"])
    assert rows["run time (local)"][1].value == run_t.replace(tzinfo=None)  # a date cell
    assert rows["run time UTC offset"][1].value == run_t.utcoffset().total_seconds() / 3600
    assert rows["command line"][1].value == rec["command_line"]
    cells = [c.value for r in ws.iter_rows() for c in r]
    assert _sha(wb) in cells and _sha(d / "m.csv") in cells and _sha(TMY3) in cells
    for who in ("prepared by", "checked by"):  # blank cells to fill in, underlined
        r = rows[who]
        assert all(c.value is None and c.border.bottom.style == "thin" for c in r[1:4])
    page = (d / "check" / "report.html").read_text(encoding="utf-8")
    start = page.index('<div class="run-record">')
    box = page[start:page.index("</table></div>", page.index('class="sign"', start))]
    assert _sha(wb) in box and _sha(TMY3) in box and rec["run_time"] in box
    assert "prepared by" in box and "checked by" in box and 'class="blank"' in box


def test_plan_facts_have_labels_units_and_number_cells(runs):
    d, _, _, _ = runs
    info = json.loads((d / "plan" / "plan.json").read_text(encoding="utf-8"))
    ws = openpyxl.load_workbook(d / "plan" / "report.xlsx")["summary"]
    rows = [r for r in ws.iter_rows()]
    i = next(k for k, r in enumerate(rows) if r[0].value == "Plan")
    j = next(k for k, r in enumerate(rows) if r[0].value and
             str(r[0].value).startswith("Verdict per block"))
    section = {r[0].value: r for r in rows[i + 1:j] if r[0].value is not None}
    labels = [k for k in section if k not in ("why", "planner notes")]
    lines = set(info["explanation"]) | set(info["events"])
    for k in labels:
        if k in lines:
            continue
        assert not RAW_KEY.search(str(k)), k
    # numbers are number cells with a number format, the unit beside them
    r = section["relays changed in the field"]
    assert r[1].value == info["relays_changed"] and r[1].data_type == "n"
    r = section["planning time"]
    assert r[1].value == pytest.approx(info["solve_seconds"]) and r[1].number_format == "0.0"
    assert r[2].value == "s"
    r = section["mean deviation from target"]
    assert r[1].value == pytest.approx(info["mean_abs_deviation_pp"]) and r[2].value == "pp"
    r = section["intervals held as band rows in the last model"]
    assert r[1].value == info["intervals_in_model"]["band_rows"] and r[1].data_type == "n"
    assert section["level 2: relays changed"][1].value == info["levels"][1]["claim"]
    text = " ".join(str(c.value) for row in rows for c in row if c.value is not None)
    for raw in ("intervals_in_model", "band_rows", "levels[", "heuristic_start",
                "plan.json"):
        assert raw not in text, raw


def test_html_plan_facts_are_labelled(tmp_path):
    from allocator.report.html import render_html
    from allocator.check import run_checks
    from allocator.scenarios import build_years
    from allocator.workbook import read_study

    wb = write_small_study(tmp_path)
    study = read_study(wb)
    cs = run_checks(study, build_years(study), study.current_assignment)
    info = {"status": "out_of_band", "relays_changed": 2, "feeders_changed": 3,
            "levels": [{"level": "worst violation", "claim": "optimal (proven)",
                        "method": "MILP", "seconds": 1.3}],
            "intervals_in_model": {"band_rows": 77, "deviation_sample": 5,
                                   "all_scenarios": 17520},
            "heuristic_start": {"worst_violation_rel": 0.5, "mad_pp": 1.0, "changes": 4.0},
            "solve_seconds": 2.5, "time_limit_s": 10, "max_changes": None}
    from allocator.field.plan import field_plan

    page = render_html(cs, [], field=field_plan(cs, np.asarray(study.current_assignment)),
                       plan_info=info)
    plan = page[page.index("<h3>Plan</h3>"):page.index("<h3>Per block</h3>")]
    labels = re.findall(r"<dt>(.*?)</dt>", plan)
    assert labels and not [x for x in labels if RAW_KEY.search(x)], labels
    values = dict(zip(labels, re.findall(r"<dd>(.*?)</dd>", plan)))
    assert values["intervals held as band rows in the last model"] == "77"
    assert values["heuristic start: worst violation"] == "50.00 % of target"
    assert values["planning time"] == "2.5 s" and values["level 1: time"] == "1.3 s"
    assert values["most relay changes allowed"] == "no limit"
