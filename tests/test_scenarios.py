"""The scenarios sheet, the years it builds, and how checks and the CLI name them.

Outside references, each named beside its check:

* the NREL TMY3 file 723170TYA.CSV (Greensboro) shipped in pvlib's data folder, read here
  with the csv module, not through the tool;
* ``dateutil.easter`` (a general-purpose date library) for the Easter-dependent holidays of
  a later calendar year;
* the Gregorian calendar (2028 is a leap year: 8784 hours) — common practice, no source.

Everything else (feeders, loads, schemes) is invented test data.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from allocator.check import run_checks
from allocator.cli import main
from allocator.errors import InputError
from allocator.scenarios import build_years
from allocator.workbook import read_study
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

GREENSBORO = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"  # NREL TMY3, in pvlib
ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "inputs_demo" / "lindmark.xlsx"


def _shape(p, s, d, m):
    h = m / 60
    return (0.5 + 0.4 * (17 <= h < 22)) if p == "res" else (0.35 + 0.55 * (8 <= h < 18))


def _feeders():
    fs = base_feeders(10)
    for i, f in enumerate(fs):
        f["pv_mw"] = [0.0, 0.5, 2.0][i % 3]
        f["current_block"] = ["S1", "S2", None][i % 3]
    return fs


def _wb(tmp_path: Path, scenarios=None, name="study.xlsx", settings=None) -> Path:
    s = dict(BASE_SETTINGS, **(settings or {}))
    extra = {"scenarios": scenarios} if scenarios is not None else None
    return write_workbook(tmp_path / name, settings=s, feeders=_feeders(),
                          profiles=flat_profiles(value=_shape), extra_sheets=extra)


def test_default_scenarios_are_clear_sky_and_no_pv(tmp_path):
    study = read_study(_wb(tmp_path))
    assert [(s.name, s.pv, s.year) for s in study.scenarios] == [
        ("clear_sky", "clear_sky", 2025), ("no_pv", "none", 2025)]
    years = build_years(study)
    assert [y.scenario for y in years] == ["clear_sky", "no_pv"]
    assert years[1].pv_pu.max() == 0.0 and years[0].pv_pu.max() > 0.5
    # without PV output the net load is the gross load: never below the clear-sky one
    assert np.all(years[1].net_mw >= years[0].net_mw - 1e-12)


def test_scenarios_sheet_read(tmp_path):
    rows = [{"scenario": "sunny", "pv": "clear_sky"},
            {"scenario": "grey", "pv": "none", "load_scale": 1.1},
            {"scenario": "tmy", "pv": f"weather:{GREENSBORO}"},
            {"scenario": "sunny 2028", "pv": "clear_sky", "pv_scale": 1.5, "load_scale": 1.05,
             "year": 2028}]
    study = read_study(_wb(tmp_path, rows))
    got = [(s.name, s.pv, s.pv_scale, s.load_scale, s.year) for s in study.scenarios]
    assert got == [("sunny", "clear_sky", 1.0, 1.0, 2025), ("grey", "none", 1.0, 1.1, 2025),
                   ("tmy", "weather", 1.0, 1.0, 2025),
                   ("sunny 2028", "clear_sky", 1.5, 1.05, 2028)]
    assert study.scenarios[2].weather_file == str(GREENSBORO)


def test_weather_file_relative_to_the_workbook(tmp_path):
    (tmp_path / "wx").mkdir()
    (tmp_path / "wx" / "site.csv").write_bytes(GREENSBORO.read_bytes())
    study = read_study(_wb(tmp_path, [{"scenario": "tmy", "pv": "weather:wx/site.csv"}]))
    assert Path(study.scenarios[0].weather_file) == (tmp_path / "wx" / "site.csv").resolve()


def test_bad_scenarios_sheet_every_problem_in_one_pass(tmp_path):
    rows = [{"scenario": "a", "pv": "cloudy"},  # row 2: unknown kind
            {"scenario": "b", "pv": "weather:nowhere.csv"},  # row 3: missing file
            {"scenario": "c", "pv": "clear_sky", "pv_scale": -1},  # row 4
            {"scenario": "d", "pv": "none", "load_scale": 0},  # row 5
            {"scenario": "a", "pv": "none"},  # row 6: duplicate name
            {"scenario": "e", "pv": "none", "year": 1800}]  # row 7
    with pytest.raises(InputError) as exc:
        read_study(_wb(tmp_path, rows))
    got = {(p.sheet, p.row, p.column) for p in exc.value.problems}
    assert got == {("scenarios", 2, "pv"), ("scenarios", 3, "pv"),
                   ("scenarios", 4, "pv_scale"), ("scenarios", 5, "load_scale"),
                   ("scenarios", 6, "scenario"), ("scenarios", 7, "year")}
    text = exc.value.render()
    assert "cloudy" in text and "not found" in text and "appears twice" in text


def test_unreadable_weather_file_reported_with_the_workbook(tmp_path):
    bad = tmp_path / "short.csv"
    bad.write_text("\n".join(GREENSBORO.read_text().splitlines()[:100]))
    with pytest.raises(InputError) as exc:
        read_study(_wb(tmp_path, [{"scenario": "w", "pv": f"weather:{bad}"},
                                  {"scenario": "x", "pv": "sunny"}]))
    files = {Path(p.file).name for p in exc.value.problems}
    assert files == {"short.csv", "study.xlsx"}  # the weather file's own and the sheet's


def test_validate_exit_2_for_a_bad_scenario(tmp_path, capsys):
    p = _wb(tmp_path, [{"scenario": "a", "pv": "overcast"}])
    assert main(["validate", str(p)]) == 2
    assert "scenarios" in capsys.readouterr().err


def test_scales_follow_their_definition(tmp_path):
    """net = load_scale · gross − pv_scale · pv_mw · pv_derate · pv_pu, per the README.  The
    gross load is written here from the workbook (peak MW × the profile value at the local
    hour, hand arithmetic on _shape); at night the sun is below the horizon at 50° N all
    year (no midnight sun south of the Arctic circle, from memory), so there the scaled year
    must equal 1.1 × that gross load exactly; by day its PV part must be twice the clear-sky
    year's, both measured against the hand-made gross load."""
    rows = [{"scenario": "sun", "pv": "clear_sky"}, {"scenario": "dark", "pv": "none"},
            {"scenario": "grown", "pv": "clear_sky", "pv_scale": 2.0, "load_scale": 1.1}]
    study = read_study(_wb(tmp_path, rows))
    sun, dark, grown = build_years(study)
    hour = np.array([t.hour for t in sun.local_times])
    profiles = [f.profile for f in study.feeders]
    peak = np.array([f.peak_mw for f in study.feeders])
    shape = np.array([[_shape(p, "all", "workday", 60 * h) for h in hour] for p in profiles])
    gross = peak[:, None] * shape
    np.testing.assert_allclose(dark.net_mw, gross, atol=1e-9)  # no PV: the gross load
    night = hour < 2
    np.testing.assert_allclose(grown.net_mw[:, night], 1.1 * gross[:, night], atol=1e-9)
    pv_sun, pv_grown = gross - sun.net_mw, 1.1 * gross - grown.net_mw
    np.testing.assert_allclose(pv_grown, 2.0 * pv_sun, atol=1e-9)
    assert pv_sun[:, ~night].max() > 1.0  # there is PV by day to scale (2 MW feeders)
    np.testing.assert_allclose(grown.demand_mw, grown.net_mw.sum(axis=0), atol=1e-9)


def test_later_calendar_year_has_its_own_days(tmp_path):
    """2028 is a leap year (8784 hours; common practice, no source); its Good Friday is
    two days before Easter Sunday, 16 April 2028 by dateutil.easter, and counts as a
    Sunday (a public holiday in every German state, from memory)."""
    from dateutil.easter import easter

    rows = [{"scenario": "now", "pv": "clear_sky"},
            {"scenario": "later", "pv": "clear_sky", "year": 2028}]
    now, later = build_years(read_study(_wb(tmp_path, rows)))
    assert now.n_intervals == 8760 and later.n_intervals == 8784
    good_friday = pd.Timestamp(easter(2028)) - pd.Timedelta(days=2)
    assert good_friday == pd.Timestamp("2028-04-14")
    day = later.local_times.tz_localize(None).normalize() == good_friday
    assert day.sum() == 24 and (later.day_type_index[day] == 2).all()
    assert later.calendar_year == 2028


def _tmy3_ghi_sum_w_h_per_m2(path: Path) -> float:
    """The file's GHI column summed, read with the csv module (line 2 is the header)."""
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    col = rows[1].index("GHI (W/m^2)")
    return float(sum(float(r[col]) for r in rows[2:]))


def test_weather_scenario_carries_the_files_irradiation(tmp_path):
    """A flat plane's PV per unit over an hourly non-leap study year uses every record of
    the weather file once, so the year's PV energy is pv_mw · derate · ΣGHI / 1000 (NREL
    TMY3 723170TYA.CSV shipped in pvlib; its GHI column read here without the tool)."""
    rows = [{"scenario": "sun", "pv": "clear_sky"}, {"scenario": "dark", "pv": "none"},
            {"scenario": "tmy", "pv": f"weather:{GREENSBORO}"}]
    study = read_study(_wb(tmp_path, rows, settings={"timezone": "America/New_York"}))
    sun, dark, tmy = build_years(study)
    ghi_sum = _tmy3_ghi_sum_w_h_per_m2(GREENSBORO)
    assert tmy.pv_pu.sum() * 1.0 == pytest.approx(ghi_sum / 1000.0, rel=1e-9)
    pv_energy = (dark.net_mw - tmy.net_mw).sum(axis=1)  # MWh per feeder, hourly
    np.testing.assert_allclose(pv_energy, study.pv_mw * 0.8 * ghi_sum / 1000.0, rtol=1e-9)
    # clouds: the weather year's PV is below clear sky over the year
    assert tmy.pv_pu.sum() < sun.pv_pu.sum()
    chk = run_checks(study, (sun, dark, tmy), study.current_assignment)
    assert chk.names == ("sun", "dark", "tmy")


def test_check_names_every_scenario_in_its_outputs(tmp_path):
    rows = [{"scenario": "sunny", "pv": "clear_sky"}, {"scenario": "grey", "pv": "none"}]
    p = _wb(tmp_path, rows)
    assert main(["check", str(p), "--out", str(tmp_path / "o"), "--quiet"]) == 0
    out = tmp_path / "o"
    summ = json.loads((out / "summary.json").read_text())
    assert summ["scenarios_judged"] == ["sunny", "grey"]
    assert "sunny (clear_sky, 2025)" in summ["verdict_covers"]
    for name in ("armed_load.csv", "by_substation.csv", "low_load.csv"):
        assert set(pd.read_csv(out / name)["scenario"]) == {"sunny", "grey"}, name
    html = (out / "report.html").read_text()
    assert "sunny" in html and "grey" in html
    import openpyxl

    wb = openpyxl.load_workbook(out / "report.xlsx", read_only=True)
    names = [r[0] for r in wb["scenarios"].iter_rows(min_row=2, values_only=True)]
    assert names == ["sunny", "grey"]
    wb.close()


def test_scenarios_option_selects_and_rejects(tmp_path, capsys):
    p = _wb(tmp_path)
    assert main(["check", str(p), "--scenarios", "no_pv", "--out", str(tmp_path / "o"),
                 "--format", "none", "--quiet"]) == 0
    summ = json.loads((tmp_path / "o" / "summary.json").read_text())
    assert summ["scenarios_judged"] == ["no_pv"]
    assert main(["check", str(p), "--scenarios", "cloudy", "--out", str(tmp_path / "x"),
                 "--format", "none"]) == 2
    assert "unknown scenario 'cloudy'" in " ".join(capsys.readouterr().err.split())
    assert not (tmp_path / "x").exists()


@pytest.mark.slow
def test_demo_plan_for_clear_sky_alone_fails_the_overcast_year(tmp_path):
    """The demo: a plan of at most 12 changes held on the clear-sky year alone is checked on
    both default scenarios and reported not compliant, naming no_pv; the default plan
    (both scenarios) holds both."""
    assert main(["plan", str(DEMO), "--scenarios", "clear_sky", "--max-changes", "12",
                 "--time-limit", "20", "--out", str(tmp_path / "p"), "--format", "none",
                 "--arming", "switched", "--quiet"]) == 0
    # the demo has remotely switchable feeders: asked for, its plan is a schedule
    assert main(["check", str(DEMO), "--assignment", str(tmp_path / "p" / "schedule.csv"),
                 "--out", str(tmp_path / "c"), "--format", "none", "--quiet"]) == 0
    summ = json.loads((tmp_path / "c" / "summary.json").read_text())
    assert summ["compliant"] is False and summ["failing_scenarios"] == ["no_pv"]
    b2 = next(b for b in summ["blocks"] if b["block"] == "B2")
    assert b2["max_share_scenario"] == "no_pv" and b2["headroom_to_max_pp"] < 0
    assert main(["plan", str(DEMO), "--time-limit", "20", "--out", str(tmp_path / "q"),
                 "--format", "none", "--quiet"]) == 0
    both = json.loads((tmp_path / "q" / "summary.json").read_text())
    assert both["compliant"] is True and both["scenarios_judged"] == ["clear_sky", "no_pv"]


def _haversine_km(lat1, lon1, lat2, lon2):
    """Great-circle distance on a sphere of radius 6371 km (the haversine formula; the mean
    Earth radius from memory)."""
    import math

    p1, p2 = math.radians(lat1), math.radians(lat2)
    a = (math.sin((p2 - p1) / 2) ** 2
         + math.cos(p1) * math.cos(p2) * math.sin(math.radians(lon2 - lon1) / 2) ** 2)
    return 2 * 6371.0 * math.asin(math.sqrt(a))


def test_weather_file_far_away_is_named(tmp_path):
    """A weather file for another site and standard time: a warning naming both sites, the
    distance and both offsets; an error with weather_strict = yes; none for a study at the
    file's own site and zone.  Greensboro's header (TMY3, pvlib data folder): 36.1° N,
    79.95° W, UTC−5."""
    import re

    rows = [{"scenario": "tmy", "pv": f"weather:{GREENSBORO}"}]
    st = read_study(_wb(tmp_path, rows))
    warns = [w for w in st.warnings if "723170TYA.CSV" in w]
    assert len(warns) == 2 and all(w.startswith("scenarios row 2:") for w in warns)
    km = float(re.search(r"\), (\d+) km from the study site", warns[0])[1])
    assert km == pytest.approx(_haversine_km(36.1, -79.95, 50.0, 10.0), abs=15)
    assert "(50.00°, 10.00°)" in warns[0] and "weather_max_distance_km = 100" in warns[0]
    assert "UTC-5 h" in warns[1] and "Europe/Berlin keeps UTC+1 h" in warns[1]
    with pytest.raises(InputError) as e:
        read_study(_wb(tmp_path, rows, name="strict.xlsx",
                       settings={"weather_strict": "yes"}))
    probs = [p for p in e.value.problems if "723170TYA.CSV" in p.message]
    assert len(probs) == 2 and {(p.sheet, p.row, p.column) for p in probs} == {
        ("scenarios", 2, "pv")}
    home = read_study(_wb(tmp_path, rows, name="home.xlsx", settings={
        "latitude": 36.1, "longitude": -79.9, "timezone": "America/New_York",
        "holiday_country": None}))
    assert not [w for w in home.warnings if "723170TYA.CSV" in w]
