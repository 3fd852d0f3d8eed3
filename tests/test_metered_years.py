"""Several metered years in one run (allocator.metered.years): each calendar year its own
scenario 'metered YYYY' on its own calendar.

All data here is invented test data.  External references beside the checks:
* EU summer time (Directive 2000/84/EC, from memory): from the last Sunday of March to the
  last Sunday of October, the change at 01:00 UTC.  Hand-computed: 2024-03-31 and 2024-10-27,
  2025-03-30 and 2025-10-26 are those Sundays.
* Easter Monday, a public holiday in Germany: 2024-04-01 and 2025-04-21 (from memory).
* Interval counts: 2024 is a leap year (366 × 24 = 8,784 hours), 2025 has 8,760.
* "Each year on its own": the same tool run on a file holding only that year, with the
  study year set to it (the one-year path, not the multi-year code).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from allocator.check import run_checks, summary_set_dict
from allocator.cli import main
from allocator.errors import InputError
from allocator.metered.years import read_metered_years
from allocator.scenarios import build_years
from allocator.workbook import read_study
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

TZ = "Europe/Berlin"
N_F = 4


def _study(tmp_path: Path, year: int = 2025, name: str = "wb.xlsx"):
    feeders = base_feeders(N_F)
    for i, f in enumerate(feeders):
        f["current_block"] = ("S1", "S2", None, "S1")[i]
        f["pv_mw"] = 1.0 * i
    st = dict(BASE_SETTINGS, year=year)
    return str(write_workbook(tmp_path / name, settings=st, feeders=feeders,
                              profiles=flat_profiles(value=0.7)))


def _readings(start: str, end: str, seed: int = 1) -> pd.DataFrame:
    """Hourly long readings of every feeder from local ``start`` to ``end`` (exclusive),
    timestamps with their UTC offset; invented values with a daily swing."""
    t = pd.date_range(pd.Timestamp(start, tz=TZ).tz_convert("UTC"),
                      pd.Timestamp(end, tz=TZ).tz_convert("UTC"), freq="h", inclusive="left")
    rng = np.random.default_rng(seed)
    hour = t.tz_convert(TZ).hour.to_numpy()
    rows = []
    for i in range(N_F):
        mw = (1.0 + i) * (0.5 + 0.3 * np.sin(hour / 24 * 2 * np.pi)) + rng.normal(0, 0.05,
                                                                                   len(t))
        rows.append(pd.DataFrame({"timestamp": t.tz_convert(TZ).strftime("%Y-%m-%dT%H:%M:%S%z"),
                                  "feeder_id": f"F{i:02d}", "mw": mw.round(4)}))
    return pd.concat(rows, ignore_index=True)


def _csv(path: Path, df: pd.DataFrame) -> str:
    df.to_csv(path, index=False)
    return str(path)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("years")
    both = _readings("2024-01-01", "2026-01-01")
    y24 = both[both.timestamp < "2025"]
    y25 = both[both.timestamp >= "2025"]
    return {"dir": d, "wb": _study(d), "both": _csv(d / "both.csv", both),
            "y24": _csv(d / "y24.csv", y24), "y25": _csv(d / "y25.csv", y25)}


@pytest.fixture(scope="module")
def both_years(files):
    """The two-year file read once for the tests that only look at it: (study, years)."""
    study = read_study(files["wb"])
    return study, build_years(study, read_metered_years(files["both"], study), ["metered"])


def _summary(wb, metered) -> dict:
    study = read_study(wb)
    years = build_years(study, read_metered_years(metered, study), ["metered"])
    return summary_set_dict(run_checks(study, years, study.current_assignment))


def _blocks(d: dict) -> list:
    return [{k: b[k] for k in ("block", "min_share_pct", "mean_share_pct", "max_share_pct",
                                "min_share_local_time", "compliant", "intervals_below_min")}
            for b in d["blocks"]]


def test_one_file_over_two_years_equals_two_files(files, both_years):
    study, years = both_years
    one = summary_set_dict(run_checks(study, years, study.current_assignment))
    two = _summary(files["wb"], [files["y24"], files["y25"]])
    assert one["scenarios_judged"] == ["metered 2024", "metered 2025"]
    assert two["scenarios_judged"] == one["scenarios_judged"]
    for a, b in zip(one["scenarios"], two["scenarios"]):
        assert _blocks(a) == _blocks(b)
        assert a["intervals"] == b["intervals"]
    assert [s["intervals"] for s in one["scenarios"]] == [8784, 8760]  # leap year 2024


def test_scenario_names_select_metered_years(files):
    study = read_study(files["wb"])
    mets = read_metered_years([files["y24"], files["y25"]], study)
    assert [m.year for m in mets] == [2024, 2025]
    assert [y.scenario for y in build_years(study, mets, ["metered 2025"])] == \
        ["metered 2025"]
    assert [y.scenario for y in build_years(study, mets, ["no_pv", "metered"])] == \
        ["no_pv", "metered 2024", "metered 2025"]


def test_run_record_lists_every_metered_file(files, tmp_path):
    out = tmp_path / "o"
    assert main(["check", files["wb"], "--metered", files["y24"], "--metered", files["y25"],
                 "--scenarios", "metered", "--format", "none", "--out", str(out),
                 "--quiet"]) == 0
    run = json.loads((out / "run.json").read_text())
    assert [i["name"] for i in run["inputs"] if i["role"] == "metered data"] == \
        ["y24.csv", "y25.csv"]


def test_each_year_as_if_checked_on_its_own(files, tmp_path):
    both = files["dir"] / "out_both"
    assert main(["check", files["wb"], "--metered", files["both"], "--scenarios", "metered",
                 "--format", "none", "--out", str(both), "--quiet"]) == 0
    per = {s["scenario"]: s for s in json.loads((both / "summary.json").read_text())
           ["scenarios"]}
    for y in (2024, 2025):
        wb = _study(tmp_path, y, f"wb{y}.xlsx")
        out = tmp_path / f"out{y}"
        assert main(["check", wb, "--metered", files[f"y{y % 100}"], "--scenarios",
                     "metered", "--format", "none", "--out", str(out), "--quiet"]) == 0
        alone = json.loads((out / "summary.json").read_text())["scenarios"]
        assert [s["scenario"] for s in alone] == ["metered"]  # the one-year path
        assert _blocks(per[f"metered {y}"]) == _blocks(alone[0])
        assert per[f"metered {y}"]["compliant"] == alone[0]["compliant"]
    stm = pd.read_csv(both / "statement.csv")
    assert sorted(stm["scenario"].unique()) == ["metered 2024", "metered 2025"]


@pytest.mark.parametrize("year,spring,autumn", [
    (2024, "2024-03-31T01:00Z", "2024-10-27T01:00Z"),  # last Sundays of March/October 2024
    (2025, "2025-03-30T01:00Z", "2025-10-26T01:00Z"),  # EU rule, hand-computed
])
def test_dst_and_holidays_on_each_years_own_calendar(both_years, year, spring, autumn):
    years = {y.scenario: y for y in both_years[1]}
    y = years[f"metered {year}"]
    utc = y.timestamps_utc
    off = (y.local_times.tz_localize(None) - utc.tz_localize(None)).total_seconds() / 3600
    k_s = utc.get_loc(pd.Timestamp(spring))
    k_a = utc.get_loc(pd.Timestamp(autumn))
    assert off[k_s - 1] == 1 and off[k_s] == 2  # summer time starts at 01:00 UTC
    assert off[k_a - 1] == 2 and off[k_a] == 1  # and ends at 01:00 UTC
    assert (off[:k_s] == 1).all() and (off[k_s:k_a] == 2).all() and (off[k_a:] == 1).all()
    easter_monday = {2024: "2024-04-01", 2025: "2025-04-21"}[year]
    on_day = y.local_times.normalize().tz_localize(None) == pd.Timestamp(easter_monday)
    assert on_day.sum() == 24 and (y.day_type_index[on_day] == 2).all()  # as a Sunday


def test_overlap_between_files_is_refused_naming_both(files, tmp_path):
    extra = _readings("2025-03-01", "2025-03-02")
    extra = extra[extra.feeder_id == "F01"]
    p = _csv(tmp_path / "extra.csv", extra)
    study = read_study(files["wb"])
    with pytest.raises(InputError) as e:
        read_metered_years([files["both"], p], study)
    probs = e.value.problems
    assert len(probs) == 1
    msg = probs[0].message
    assert probs[0].file == p and probs[0].row == 2  # the first data line of extra.csv
    assert files["both"] in msg and p in msg and "F01" in msg
    assert "2025-03-01T00:00+01:00" in msg and "24 intervals" in msg
    # line in both.csv of F01 at 2025-03-01 00:00: F00's 17,544 rows, then F01's 2024
    # (8,784) and 2025 up to 1 March (59 days × 24 = 1,416), after the header line
    assert f"line {1 + 17544 + 8784 + 1416 + 1}" in msg
    assert main(["check", files["wb"], "--metered", files["both"], "--metered", p,
                 "--format", "none", "--out", str(tmp_path / "o"), "--quiet"]) == 2
    assert not (tmp_path / "o").exists()


def test_partial_year_judged_on_its_data_span(files, tmp_path):
    p = _csv(tmp_path / "part.csv", _readings("2024-07-01", "2026-01-01"))
    study = read_study(files["wb"])
    years = build_years(study, read_metered_years(p, study), ["metered"])
    y24 = years[0]
    i = y24.scenario_info
    # 1 July to 31 December 2024: 184 days × 24 h, plus the repeated hour of 27 October
    # (the day summer time ends has 25 hours), of 8,784 (hand-computed)
    n_judged = 184 * 24 + 1
    assert i["partial"] and i["judged_intervals"] == n_judged
    assert i["coverage_pct"] == pytest.approx(100 * n_judged / 8784)
    assert i["judged_from"] == "2024-07-01T00:00+02:00"
    assert i["judged_to"] == "2025-01-01T00:00+01:00"
    chk = run_checks(study, years, study.current_assignment)
    assert chk.checks[0].valid.sum() == n_judged
    assert not any(f.flag == "gaps_filled" for f in y24.flags)  # outside the span: no gap
    assert not years[1].scenario_info["partial"]
    table = chk.checks[0].armed_load_table()  # armed_load.csv: the judged span only
    assert len(table) == n_judged and table.local_time.iloc[0] == "2024-07-01T00:00+02:00"


def test_stray_reading_of_next_year_keeps_the_one_year_path(tmp_path):
    wb = _study(tmp_path)
    p = _csv(tmp_path / "y.csv", _readings("2025-01-01", "2026-01-01 01:00"))
    study = read_study(wb)
    mets = read_metered_years(p, study)
    assert len(mets) == 1 and mets[0].year is None
    years = build_years(study, mets, ["metered"])
    assert [y.scenario for y in years] == ["metered"]
    assert any("outside the study year 2025 ignored" in n for n in years[0].notes)


def test_gap_fill_error_lists_the_gaps_of_every_year(tmp_path):
    feeders = base_feeders(N_F)
    wb = write_workbook(tmp_path / "e.xlsx", settings=dict(BASE_SETTINGS, gap_fill="error"),
                        feeders=feeders, profiles=flat_profiles(value=0.7))
    df = _readings("2024-01-01", "2026-01-01")
    gone = (df.feeder_id == "F02") & df.timestamp.str.startswith(("2024-05-01", "2025-05-01"))
    p = _csv(tmp_path / "g.csv", df[~gone])
    study = read_study(wb)
    with pytest.raises(InputError) as e:
        build_years(study, read_metered_years(p, study), ["metered"])
    text = e.value.render()
    assert "2024-05-01T00:00+02:00" in text and "2025-05-01T00:00+02:00" in text


def test_plan_holds_every_metered_year(files):
    out = files["dir"] / "plan"
    assert main(["plan", files["wb"], "--metered", files["both"], "--scenarios", "metered",
                 "--time-limit", "10", "--format", "none", "--out", str(out),
                 "--quiet"]) == 0
    plan = json.loads((out / "plan.json").read_text())
    assert plan["scenarios"] == ["metered 2024", "metered 2025"]
    summ = json.loads((out / "summary.json").read_text())
    assert [s["scenario"] for s in summ["scenarios"]] == ["metered 2024", "metered 2025"]
