"""Tests for allocator.metered: reading, aligning and merging metered feeder data.

All data here is invented test data.  External references used by the checks:
* Europe/Berlin 2025 DST: summer time from 30 March 01:00 UTC (local 02:00 → 03:00) to
  26 October 01:00 UTC (local 03:00 → 02:00), the EU rule "last Sunday of March / October at
  01:00 UTC" (EU Directive 2000/84/EC; from memory).  The tests state the UTC instants
  directly rather than deriving them with the code under test.
* Linear interpolation is checked against numpy's independent ``np.interp``.
* Averaging finer readings into an interval by their mean, holding coarser ones: common
  practice, no source.
"""

from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import settings as hyp_settings
from hypothesis import strategies as hst

from allocator.errors import InputError
from allocator.metered import (MeteredData, interpolate_rows, merge_metered, read_metered)
from allocator.workbook import read_study
from allocator.timegrid import study_intervals
from allocator.year import build_year
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

TZ = "Europe/Berlin"


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def _shape(p, s, d, m):
    """An invented daily shape: higher in the day, a little different per profile/day."""
    h = m // 60
    base = 0.55 + (0.35 if 8 <= h < 20 else 0.0) + (0.05 if p == "com" else 0.0)
    return base - (0.1 if d == "sunday" else 0.0)


def make_study(tmp_path: Path, name="wb.xlsx", pv=True, **settings):
    feeders = base_feeders(6)
    if pv:
        for i, f in enumerate(feeders):
            f["pv_mw"] = 2.5 * i  # most feeders export at summer midday
    st = dict(BASE_SETTINGS)
    st.update(settings)
    path = write_workbook(tmp_path / name, settings=st, feeders=feeders,
                          profiles=flat_profiles(value=_shape))
    return read_study(path)


def intervals(study):
    s = study.settings
    return study_intervals(s.year, s.timezone, s.interval_minutes)


def offset_text(ts_utc: pd.DatetimeIndex, tz=TZ) -> np.ndarray:
    """ISO 8601 local time with a +HH:MM offset."""
    t = pd.Series(ts_utc.tz_convert(tz).strftime("%Y-%m-%dT%H:%M:%S%z"))
    return (t.str[:-2] + ":" + t.str[-2:]).to_numpy()


def naive_text(ts_utc: pd.DatetimeIndex, tz=TZ) -> np.ndarray:
    return np.asarray(ts_utc.tz_convert(tz).strftime("%Y-%m-%d %H:%M"))


def long_frame(ts_text, feeder_ids, values) -> pd.DataFrame:
    """Long format, time-major (all feeders at one time, then the next), like a SCADA export."""
    values = np.asarray(values, dtype=float)  # [feeder, time]
    nf, nt = values.shape
    return pd.DataFrame({"timestamp": np.repeat(np.asarray(ts_text), nf),
                         "feeder_id": np.tile(np.asarray(feeder_ids, dtype=object), nt),
                         "mw": values.T.ravel()})


def write_csv(path: Path, df: pd.DataFrame) -> Path:
    df.to_csv(path, index=False)
    return path


def write_text(path: Path, lines: list[str]) -> Path:
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def problems(exc: InputError):
    return [(p.row, p.column, p.message) for p in exc.problems]


def has_problem(exc, row, column, text):
    return any(r == row and c == column and text in m for r, c, m in problems(exc))


def flags_of(flags, fid):
    return {f.flag: f.detail for f in flags if f.feeder_id == fid}


# --------------------------------------------------------------------------------------------
# timestamps and alignment
# --------------------------------------------------------------------------------------------
def test_offset_naive_and_utc_forms_give_the_same_array(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    rng = np.random.default_rng(1)
    vals = rng.normal(3.0, 1.0, size=(3, len(ts)))
    ids = study.feeder_ids[:3]
    a = read_metered(write_csv(tmp_path / "off.csv", long_frame(offset_text(ts), ids, vals)),
                     study, ts)
    b = read_metered(write_csv(tmp_path / "naive.csv", long_frame(naive_text(ts), ids, vals)),
                     study, ts)
    z = np.asarray(ts.strftime("%Y-%m-%dT%H:%M:%SZ"))
    c = read_metered(write_csv(tmp_path / "z.csv", long_frame(z, ids, vals)), study, ts)
    for m in (a, b, c):
        np.testing.assert_allclose(m.values_mw[:3], vals, rtol=0, atol=1e-12)
        assert np.isnan(m.values_mw[3:]).all()
        assert m.has_data.tolist() == [True] * 3 + [False] * 3
        assert m.total_mw is None
    # the naive file really has the repeated hour twice and no 02:xx on 30 March
    nt = naive_text(ts)
    assert (nt == "2025-10-26 02:00").sum() == 2  # summer time, then standard time
    assert not any(x.startswith("2025-03-30 02:") for x in nt)


def test_spring_transition_naive_local_without_skipped_hour(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    # 29-31 March local hours, written by hand; 02:00 on the 30th does not exist
    local = [f"2025-03-{d:02d} {h:02d}:00" for d in (29, 30, 31) for h in range(24)
             if not (d == 30 and h == 2)]
    vals = np.arange(len(local), dtype=float)
    path = write_text(tmp_path / "spring.csv", ["timestamp,feeder_id,mw"] +
                      [f"{t},F01,{v}" for t, v in zip(local, vals)])
    m = read_metered(path, study, ts)
    row = m.values_mw[1]
    i01 = ts.get_loc(pd.Timestamp("2025-03-30T00:00Z"))  # local 01:00 CET
    i03 = ts.get_loc(pd.Timestamp("2025-03-30T01:00Z"))  # local 03:00 CEST (external: EU rule)
    assert i03 == i01 + 1
    assert row[i01] == local.index("2025-03-30 01:00")
    assert row[i03] == local.index("2025-03-30 03:00")
    start = i01 - 25  # local midnight 29 March (CET)
    assert np.isfinite(row[start:start + 24 + 23 + 24]).all()  # no hole at the skipped hour
    assert np.count_nonzero(np.isfinite(row)) == len(local) == 24 + 23 + 24


def test_autumn_repeated_hour_resolved_by_order_and_averaged(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    quarter = [f"{h:02d}:{q:02d}" for h in (0, 1) for q in (0, 15, 30, 45)]
    rep = [f"02:{q:02d}" for q in (0, 15, 30, 45)]
    after = [f"{h:02d}:{q:02d}" for h in (3, 4) for q in (0, 15, 30, 45)]
    times = quarter + rep + rep + after  # the repeated hour twice, summer time first
    vals = np.arange(len(times), dtype=float)
    path = write_text(tmp_path / "autumn.csv", ["timestamp,feeder_id,mw"] +
                      [f"2025-10-26 {t},F02,{v}" for t, v in zip(times, vals)])
    m = read_metered(path, study, ts)
    row = m.values_mw[2]
    # external (EU rule): local 02:00 CEST = 00:00 UTC, local 02:00 CET = 01:00 UTC
    first = ts.get_loc(pd.Timestamp("2025-10-26T00:00Z"))
    second = ts.get_loc(pd.Timestamp("2025-10-26T01:00Z"))
    assert row[first] == pytest.approx(np.mean(vals[8:12]))
    assert row[second] == pytest.approx(np.mean(vals[12:16]))
    assert row[second + 1] == pytest.approx(np.mean(vals[16:20]))  # 03:00 CET
    assert row[first - 2] == pytest.approx(np.mean(vals[0:4]))  # 00:00 CEST
    assert any("averaged" in n and "15 min" in n for n in m.notes)


def test_autumn_repeated_hour_that_cannot_be_ordered_is_an_error(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    lines = ["timestamp,feeder_id,mw",
             "2025-10-26 01:30,F01,1",   # 2
             "2025-10-26 02:00,F01,1",   # 3 summer time
             "2025-10-26 02:00,F01,1",   # 4 standard time
             "2025-10-26 02:30,F01,1",   # 5 → summer time, earlier than line 4: out of order
             "2025-10-26 02:00,F03,1",   # 6
             "2025-10-26 02:00,F03,1",   # 7
             "2025-10-26 02:00,F03,1"]   # 8 a third time
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "bad_autumn.csv", lines), study, ts)
    e = ei.value
    assert has_problem(e, 5, "timestamp", "time order")
    assert has_problem(e, 5, "timestamp", "repeated autumn hour")
    assert has_problem(e, 8, "timestamp", "third time")
    assert len(e.problems) == 2


def test_finer_readings_averaged_mean_of_present(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    q = pd.date_range("2025-06-02T00:00Z", periods=4 * 24, freq="15min")
    vals = np.sin(np.arange(len(q)))
    keep = np.ones(len(q), dtype=bool)
    keep[5] = False  # the 01:00Z hour has three readings present
    df = long_frame(offset_text(q[keep]), ["F04"], vals[keep][None, :])
    m = read_metered(write_csv(tmp_path / "q.csv", df), study, ts)
    i = ts.get_loc(q[0])
    got = m.values_mw[4, i:i + 24]
    want = vals.reshape(24, 4).mean(axis=1)
    want[1] = vals[[4, 6, 7]].mean()
    np.testing.assert_allclose(got, want, atol=1e-12)


def test_coarser_daily_readings_held_over_local_days(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    days = [f"2025-10-{d:02d}" for d in range(24, 29)]
    lines = ["timestamp,feeder_id,mw"] + [f"{d} 00:00,F05,{k + 1}" for k, d in enumerate(days)]
    m = read_metered(write_text(tmp_path / "daily.csv", lines), study, ts)
    row = m.values_mw[5]
    a = ts.get_loc(pd.Timestamp("2025-10-25T22:00Z"))  # local midnight 26 Oct (CEST)
    b = ts.get_loc(pd.Timestamp("2025-10-26T23:00Z"))  # local midnight 27 Oct (CET)
    assert b - a == 25  # the autumn day has 25 hours
    assert (row[a:b] == 3.0).all()
    assert row[b] == 4.0
    assert np.count_nonzero(np.isfinite(row)) == 24 + 24 + 25 + 24 + 24
    assert any("held over" in n and "1 day" in n for n in m.notes)


def test_readings_outside_the_year_are_ignored_with_a_note(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    lines = ["timestamp,feeder_id,mw",
             "2024-12-31T22:00:00Z,F01,5", "2024-12-31T23:00:00Z,F01,6",  # local 23:00, 00:00
             "2025-12-31T22:00:00Z,F01,7", "2025-12-31T23:00:00Z,F01,8"]  # local 23:00, 00:00
    m = read_metered(write_text(tmp_path / "edge.csv", lines), study, ts)
    assert m.values_mw[1, 0] == 6 and m.values_mw[1, -1] == 7
    assert any("2 readings outside the study year 2025 ignored" in n for n in m.notes)


# --------------------------------------------------------------------------------------------
# bad input: every problem in one pass
# --------------------------------------------------------------------------------------------
def test_bad_input_all_problems_in_one_pass(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    lines = ["timestamp,feeder_id,mw",
             "2025-01-01 00:00,F01,1.0",      # 2 ok (file form: naive local)
             "2025-01-01 01:00,F01,abc",      # 3 non-numeric mw
             "2025-01-01 02:00,F01,inf",      # 4 non-finite mw
             "2025-01-01 03:00,F01,",         # 5 blank mw
             "yesterday,F01,1",               # 6 unparseable timestamp
             "2025-02-30 00:00,F01,1",        # 7 no such date
             "2025-01-01 04:00,X9,1",         # 8 unknown id (first)
             "2025-01-01 05:00,X9,1",         # 9 unknown id again: listed once
             "2025-01-01 04:00,f01,1",        # 10 unknown id (case), with a hint
             "2025-01-01 05:00,F02,1",        # 11
             "2025-01-01 05:00,F02,2",        # 12 duplicate of line 11
             "2025-01-01 03:00,F02,1",        # 13 out of order
             "2025-01-01T06:00:00+01:00,F02,1",  # 14 offset form in a naive file
             "2025-03-30 02:30,F03,1",        # 15 skipped spring hour
             "2025-01-01 06:00,,1"]           # 16 blank feeder id
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "bad.csv", lines), study, ts)
    e = ei.value
    assert has_problem(e, 3, "mw", "'abc' is not a finite number")
    assert has_problem(e, 4, "mw", "'inf' is not a finite number")
    assert has_problem(e, 5, "mw", "blank")
    assert has_problem(e, 6, "timestamp", "'yesterday' is not a date")
    assert has_problem(e, 7, "timestamp", "'2025-02-30 00:00' is not a date")
    assert has_problem(e, 8, "feeder_id", "'X9' is not a feeder")
    assert not any(r == 9 for r, _, _ in problems(e))
    assert has_problem(e, 10, "feeder_id", "did you mean 'F01'")
    assert has_problem(e, 12, "timestamp", "first is on line 11")
    assert has_problem(e, 13, "timestamp", "time order")
    assert has_problem(e, 14, "timestamp", "carries a UTC offset")
    assert has_problem(e, 15, "timestamp", "does not exist")
    assert has_problem(e, 16, "feeder_id", "blank")
    assert len(e.problems) == 12
    assert all(p.file.endswith("bad.csv") for p in e.problems)
    assert "line 12, column 'timestamp'" in str(e)


def test_mixed_forms_when_the_file_starts_with_offsets(tmp_path):
    study = make_study(tmp_path)
    lines = ["timestamp,feeder_id,mw", "2025-01-01T00:00:00+01:00,F01,1",
             "2025-01-01 01:00,F01,1", "2025-01-01T02:00:00+01:00,F01,1"]
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "mixed.csv", lines), study, intervals(study))
    assert problems(ei.value)[0][:2] == (3, "timestamp")
    assert "without a UTC offset" in problems(ei.value)[0][2]
    assert len(ei.value.problems) == 1


def test_missing_columns_and_other_columns_checked_together(tmp_path):
    study = make_study(tmp_path)
    lines = ["Timestamp,feeder,mw", "2025-01-01 00:00,F01,x"]
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "cols.csv", lines), study, intervals(study))
    e = ei.value
    assert has_problem(e, 1, "feeder_id", "missing column 'feeder_id'")
    assert has_problem(e, 2, "mw", "'x' is not a finite number")
    assert len(e.problems) == 2


def test_off_grid_timestamps_at_interval_resolution_are_an_error(tmp_path):
    study = make_study(tmp_path)
    lines = ["timestamp,feeder_id,mw"] + [f"2025-01-01T{h:02d}:30:00Z,F01,1" for h in range(4)]
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "grid.csv", lines), study, intervals(study))
    e = ei.value
    assert [p.row for p in e.problems] == [2, 3, 4, 5]
    assert "not on a 60-minute interval boundary" in e.problems[0].message


def test_listing_is_capped_with_a_count(tmp_path):
    study = make_study(tmp_path)
    lines = ["timestamp,feeder_id,mw"] + [f"2025-01-01T00:00:00Z,F{i:02d},bad" for i in range(6)]
    lines += [f"2025-01-02T{h:02d}:00:00Z,F00,bad" for h in range(24)]
    lines += [f"2025-01-03T{h:02d}:00:00Z,F01,bad" for h in range(24)]
    lines += [f"2025-01-04T{h:02d}:00:00Z,F02,bad" for h in range(24)]
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "many.csv", lines), study, intervals(study))
    e = ei.value
    assert len(e.problems) == 51
    assert e.problems[-1].message == "... and 28 more lines with a non-numeric or non-finite mw"


def test_missing_file_and_unknown_type(tmp_path):
    study = make_study(tmp_path)
    with pytest.raises(InputError, match="not found"):
        read_metered(tmp_path / "nope.csv", study, intervals(study))
    with pytest.raises(InputError, match="unknown file type"):
        read_metered(write_text(tmp_path / "m.txt", ["a"]), study, intervals(study))


# --------------------------------------------------------------------------------------------
# merge: gap filling
# --------------------------------------------------------------------------------------------
def _gappy(tmp_path, study, ts):
    """F00 and F01 metered at 1 + feeder index with a 5-hour gap in F01; others unmetered."""
    vals = np.vstack([np.full(len(ts), 1.0), np.linspace(0.0, 10.0, len(ts))])
    df = long_frame(offset_text(ts), study.feeder_ids[:2], vals)
    gap = (df["feeder_id"] == "F01") & df.index.isin(range(2 * 100 + 1, 2 * 105 + 1, 2))
    return write_csv(tmp_path / "gappy.csv", df.loc[~gap]), vals


def test_gap_fill_profile(tmp_path):
    study = make_study(tmp_path, gap_fill="profile")
    ts = intervals(study)
    path, vals = _gappy(tmp_path, study, ts)
    base = build_year(study)
    y = build_year(study, read_metered(path, study, ts))
    want = base.net_mw.copy()
    want[:2] = vals
    want[1, 100:105] = base.net_mw[1, 100:105]
    np.testing.assert_allclose(y.net_mw, want, atol=1e-12)
    f = flags_of(y.flags, "F01")
    assert "5 of 8760 intervals (5 h)" in f["gaps_filled"]
    # ISO 8601 local time with its offset; Berlin is UTC+01:00 in January (from memory)
    assert "longest gap 5 h from 2025-01-05T04:00+01:00" in f["gaps_filled"]
    assert "profile-built" in f["gaps_filled"]
    assert set(flags_of(y.flags, "F03")) == {"no_metered_data"}
    assert y.source == "metered"


def test_gap_fill_interpolate_matches_np_interp(tmp_path):
    study = make_study(tmp_path, gap_fill="interpolate")
    ts = intervals(study)
    path, vals = _gappy(tmp_path, study, ts)
    y = build_year(study, read_metered(path, study, ts))
    x = np.arange(len(ts))
    keep = np.ones(len(ts), dtype=bool)
    keep[100:105] = False
    np.testing.assert_allclose(y.net_mw[1], np.interp(x, x[keep], vals[1][keep]), atol=1e-9)
    assert "interpolation" in flags_of(y.flags, "F01")["gaps_filled"]


def test_interpolate_rows_holds_edges():
    v = np.array([[np.nan, 2.0, np.nan, 4.0, np.nan, np.nan],
                  [1.0, np.nan, np.nan, np.nan, np.nan, 6.0]])
    out = interpolate_rows(v)
    x = np.arange(6)
    for r in range(2):
        ok = ~np.isnan(v[r])
        np.testing.assert_allclose(out[r], np.interp(x, x[ok], v[r][ok]))  # np.interp holds ends


@hyp_settings(max_examples=60, deadline=None)
@given(hst.lists(hst.one_of(hst.none(), hst.floats(-50, 50)), min_size=1, max_size=40)
       .filter(lambda xs: any(x is not None for x in xs)))
def test_interpolate_rows_agrees_with_np_interp(xs):
    v = np.array([[np.nan if x is None else x for x in xs]])
    x = np.arange(v.shape[1])
    ok = ~np.isnan(v[0])
    np.testing.assert_allclose(interpolate_rows(v)[0], np.interp(x, x[ok], v[0][ok]),
                               rtol=1e-12, atol=1e-9)


def test_gap_fill_error_lists_windows(tmp_path):
    study = make_study(tmp_path, gap_fill="error")
    ts = intervals(study)
    path, _ = _gappy(tmp_path, study, ts)
    m = read_metered(path, study, ts)
    with pytest.raises(InputError) as ei:
        build_year(study, m)
    e = ei.value
    assert e.problems[0].sheet == "settings" and "gap_fill is 'error'" in e.problems[0].message
    msg = [p for p in e.problems if p.message.startswith("F01:")]
    assert len(msg) == 1 and msg[0].column == "mw"
    assert "1 gap (5 intervals, 5 h)" in msg[0].message
    # ISO 8601 local time with its offset (Berlin UTC+01:00 in January, from memory)
    assert "2025-01-05T04:00+01:00 to 2025-01-05T09:00+01:00" in msg[0].message
    assert not any(p.message.startswith("F03") for p in e.problems)  # no data ≠ gaps


# --------------------------------------------------------------------------------------------
# flags
# --------------------------------------------------------------------------------------------
def test_quality_flags(tmp_path):
    study = make_study(tmp_path)  # peak_mw = 1 + i, pv_mw = 2.5 i
    ts = intervals(study)
    n = len(ts)
    rng = np.random.default_rng(7)
    vals = rng.uniform(0.2, 0.9, size=(6, n))
    vals[0] = 0.0                                  # F00 all zero
    vals[1, 200:224] = 1.234                       # F01 flat for exactly 24 h → flagged
    vals[2, 200:223] = 1.234                       # F02 flat for 23 h → not flagged
    vals[3, 50] = 1.5 * 4.0 + 0.2                  # F03 above 1.5 × peak + 0.1
    vals[4, 60] = -(1.5 * 10.0 + 0.2)               # F04 export beyond 1.5 × pv + 0.1
    vals[4, 61] = -(1.5 * 10.0)                    # inside the margin: not counted
    ids = study.feeder_ids[:5]
    m = read_metered(write_csv(tmp_path / "fl.csv", long_frame(offset_text(ts), ids, vals[:5])),
                     study, ts)
    y = build_year(study, m)
    assert set(flags_of(y.flags, "F00")) == {"all_zero"}
    f1 = flags_of(y.flags, "F01")
    assert set(f1) == {"flat_lined"}
    assert "1.234 MW for 24 h" in f1["flat_lined"]
    assert flags_of(y.flags, "F02") == {}
    f3 = flags_of(y.flags, "F03")
    assert set(f3) == {"out_of_range"} and "1 above, 0 below" in f3["out_of_range"]
    f4 = flags_of(y.flags, "F04")
    assert set(f4) == {"out_of_range"} and "0 above, 1 below" in f4["out_of_range"]
    assert set(flags_of(y.flags, "F05")) == {"no_metered_data"}
    assert [f.feeder_id for f in y.flags] == sorted(f.feeder_id for f in y.flags)


def test_out_of_range_uses_raw_readings_not_interval_means(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    q = pd.date_range("2025-01-01T00:00Z", periods=8, freq="15min")
    vals = np.full((1, 8), 0.5)
    vals[0, 3] = 4.0  # F01 peak 2 MW: one spike above 3.1 MW, the hour's mean 1.375 is not
    m = read_metered(write_csv(tmp_path / "sp.csv", long_frame(offset_text(q), ["F01"], vals)),
                     study, ts)
    y = build_year(study, m)
    assert "out_of_range" in flags_of(y.flags, "F01")


# --------------------------------------------------------------------------------------------
# equivalence with the profile-built year, demand basis
# --------------------------------------------------------------------------------------------
def test_metered_copy_of_profile_year_reproduces_it(tmp_path):
    study = make_study(tmp_path)
    base = build_year(study)
    assert (base.net_mw < 0).any()  # the check covers exporting intervals too
    path = write_csv(tmp_path / "copy.csv",
                     long_frame(offset_text(base.timestamps_utc), study.feeder_ids,
                                base.net_mw))
    y = build_year(study, read_metered(path, study, base.timestamps_utc))
    np.testing.assert_allclose(y.net_mw, base.net_mw, rtol=0, atol=1e-9)
    np.testing.assert_allclose(y.demand_mw, base.demand_mw, rtol=0, atol=1e-9)
    assert not any(f.flag in ("gaps_filled", "no_metered_data") for f in y.flags)


def test_metered_copy_with_gaps_and_profile_fill_reproduces_it(tmp_path):
    study = make_study(tmp_path, gap_fill="profile")
    base = build_year(study)
    df = long_frame(offset_text(base.timestamps_utc), study.feeder_ids, base.net_mw)
    drop = np.random.default_rng(3).random(len(df)) < 0.2
    drop[df["feeder_id"].to_numpy() == "F05"] = True  # one feeder with no data at all
    path = write_csv(tmp_path / "copy_gaps.csv", df.loc[~drop])
    y = build_year(study, read_metered(path, study, base.timestamps_utc))
    np.testing.assert_allclose(y.net_mw, base.net_mw, rtol=0, atol=1e-9)
    assert "gaps_filled" in flags_of(y.flags, "F00")
    assert set(flags_of(y.flags, "F05")) == {"no_metered_data"}


def test_demand_basis_metered_total_uses_total_rows(tmp_path):
    study = make_study(tmp_path, demand_basis="metered_total")
    ts = intervals(study)
    total = 40.0 + 5.0 * np.sin(np.arange(len(ts)) / 24.0)
    df = long_frame(offset_text(ts), ["F00", "TOTAL"],
                    np.vstack([np.full(len(ts), 1.0), total]))
    df = df.drop(index=df.index[(df["feeder_id"] == "TOTAL") & df.index.isin([21, 23])])
    m = read_metered(write_csv(tmp_path / "tot.csv", df), study, ts)
    assert m.total_mw is not None and np.isnan(m.total_mw).sum() == 2
    y = build_year(study, m)
    want = total.copy()
    want[10:12] = np.interp([10, 11], [9, 12], total[[9, 12]])
    np.testing.assert_allclose(y.demand_mw, want, atol=1e-12)
    assert any(n.startswith("TOTAL: 2 intervals") for n in y.notes)
    with pytest.raises(InputError, match="metered_total"):
        build_year(study)


def test_total_gaps_with_gap_fill_error(tmp_path):
    study = make_study(tmp_path, gap_fill="error", demand_basis="metered_total")
    ts = intervals(study)
    df = long_frame(offset_text(ts[:-1]), ["TOTAL"], np.ones((1, len(ts) - 1)))
    path = write_csv(tmp_path / "tot_err.csv", df)
    with pytest.raises(InputError) as ei:
        build_year(study, read_metered(path, study, ts))
    assert any(p.message.startswith("TOTAL: 1 gap") for p in ei.value.problems)
    # where TOTAL is not the demand its gaps are interpolated, not an error
    other = make_study(tmp_path, name="wb2.xlsx", gap_fill="error")
    y = build_year(other, read_metered(path, other, ts))
    assert any(n.startswith("TOTAL: 1 interval (1 h)") for n in y.notes)


def test_merge_returns_new_float_array_and_leaves_input_alone(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    prof = build_year(study).net_mw.copy()
    before = prof.copy()
    vals = np.full((len(study.feeder_ids), len(ts)), np.nan)
    vals[0, :10] = 7.0
    md = MeteredData("x.csv", study.feeder_ids, vals, None, np.isfinite(vals).any(axis=1))
    net, total, flags, notes = merge_metered(study, md, ts, prof)
    assert net is not prof and net.dtype == np.float64
    np.testing.assert_array_equal(prof, before)
    assert (net[0, :10] == 7.0).all() and (net[0, 10:] == before[0, 10:]).all()
    assert total is None and "gaps_filled" in flags_of(flags, "F00")


# --------------------------------------------------------------------------------------------
# file formats
# --------------------------------------------------------------------------------------------
def test_csv_gz_and_semicolon_decimal_comma(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    lines = ["timestamp;feeder_id;mw", "2025-01-01 00:00;F01;1,5", "2025-01-01 01:00;F01;-0,25"]
    m = read_metered(write_text(tmp_path / "semi.csv", lines), study, ts)
    assert m.values_mw[1, :2].tolist() == [1.5, -0.25]
    gz = tmp_path / "m.csv.gz"
    with gzip.open(gz, "wt") as fh:
        fh.write("timestamp,feeder_id,mw\n2025-01-01T00:00:00Z,F02,2.5\n")
    assert read_metered(gz, study, ts).values_mw[2, 1] == 2.5  # 00:00Z = local 01:00


def test_parquet(tmp_path):
    pytest.importorskip("pyarrow", reason="pyarrow not installed: Parquet input not testable")
    study = make_study(tmp_path)
    base = build_year(study)
    ts = base.timestamps_utc
    df = long_frame(offset_text(ts), study.feeder_ids, base.net_mw)
    df.to_parquet(tmp_path / "s.parquet")  # timestamps as text
    d2 = df.assign(timestamp=pd.to_datetime(df["timestamp"], utc=True))
    d2.to_parquet(tmp_path / "t.parquet")  # timestamps as a tz-aware column
    for name in ("s.parquet", "t.parquet"):
        y = build_year(study, read_metered(tmp_path / name, study, ts))
        np.testing.assert_allclose(y.net_mw, base.net_mw, rtol=0, atol=1e-9)
    bad = df.iloc[:3].assign(feeder_id=["F00", "ZZ", "F00"])
    bad.to_parquet(tmp_path / "bad.parquet")
    with pytest.raises(InputError) as ei:
        read_metered(tmp_path / "bad.parquet", study, ts)
    assert has_problem(ei.value, 3, "feeder_id", "'ZZ'")


# --------------------------------------------------------------------------------------------
# streaming: results do not depend on where the batches end
# --------------------------------------------------------------------------------------------
@pytest.fixture()
def tiny_batches(monkeypatch):
    """Batches of a few rows, so every state that is carried from batch to batch is used."""
    import allocator.metered.sources as sources

    monkeypatch.setattr(sources, "CSV_BLOCK_BYTES", 1024)
    monkeypatch.setattr(sources, "BATCH_CELLS", 16)


def assert_same_metered(a: MeteredData, b: MeteredData) -> None:
    # NaN positions must agree; means of readings split over two batches are summed in
    # another order, hence the rounding tolerance
    np.testing.assert_allclose(a.values_mw, b.values_mw, rtol=0, atol=1e-12)
    assert (a.total_mw is None) == (b.total_mw is None)
    if a.total_mw is not None:
        np.testing.assert_allclose(a.total_mw, b.total_mw, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(a.has_data, b.has_data)
    assert a.notes == b.notes
    pd.testing.assert_frame_equal(a.reading_stats, b.reading_stats)


def _mixed_resolution_file(tmp_path, ts):
    """F00 hourly with a 3-hour gap, F01 every 15 min (averaged), F02 daily at local
    midnight (held), TOTAL hourly; offsets written, time-major like a SCADA export."""
    q = pd.date_range(ts[0], periods=4 * len(ts), freq="15min")
    rng = np.random.default_rng(5)
    f00 = rng.uniform(0.5, 1.5, len(ts))
    f01 = rng.uniform(1.0, 2.0, len(q))
    days = pd.date_range("2025-01-01", "2025-12-31", freq="D", tz=TZ)
    f02 = np.arange(len(days), dtype=float) % 7 + 1.0
    total = rng.uniform(20, 30, len(ts))
    parts = [pd.DataFrame({"t": ts, "feeder_id": "F00", "mw": f00}).drop(index=range(50, 53)),
             pd.DataFrame({"t": q, "feeder_id": "F01", "mw": f01}),
             pd.DataFrame({"t": days.tz_convert("UTC"), "feeder_id": "F02", "mw": f02}),
             pd.DataFrame({"t": ts, "feeder_id": "TOTAL", "mw": total})]
    df = pd.concat(parts).sort_values("t", kind="stable")
    df.insert(0, "timestamp", offset_text(pd.DatetimeIndex(df.pop("t"))))
    path = write_csv(tmp_path / "mixed.csv", df)
    return path, f00, f01, f02, total


def test_small_batches_give_the_same_aligned_data(tmp_path, monkeypatch):
    study = make_study(tmp_path)
    ts = intervals(study)
    path, f00, f01, f02, total = _mixed_resolution_file(tmp_path, ts)
    whole = read_metered(path, study, ts)
    import allocator.metered.sources as sources

    monkeypatch.setattr(sources, "CSV_BLOCK_BYTES", 1024)
    pieces = read_metered(path, study, ts)
    assert_same_metered(whole, pieces)
    # and against the readings themselves
    want00 = f00.copy()
    want00[50:53] = np.nan
    np.testing.assert_array_equal(whole.values_mw[0], want00)
    np.testing.assert_allclose(whole.values_mw[1], f01.reshape(-1, 4).mean(axis=1),
                               rtol=0, atol=1e-12)
    local = ts.tz_convert(TZ)
    day = (local.normalize().tz_localize(None) - pd.Timestamp("2025-01-01")).days
    np.testing.assert_array_equal(whole.values_mw[2], f02[day])  # DST days: 23 / 25 h
    np.testing.assert_array_equal(whole.total_mw, total)


def test_small_batches_naive_local_times_with_both_dst_changes(tmp_path, monkeypatch):
    study = make_study(tmp_path)
    ts = intervals(study)
    vals = np.random.default_rng(2).normal(2.0, 0.3, size=(3, len(ts)))
    path = write_csv(tmp_path / "naive.csv",
                     long_frame(naive_text(ts), study.feeder_ids[:3], vals))
    whole = read_metered(path, study, ts)
    import allocator.metered.sources as sources

    monkeypatch.setattr(sources, "CSV_BLOCK_BYTES", 512)
    assert_same_metered(whole, read_metered(path, study, ts))
    np.testing.assert_array_equal(whole.values_mw[:3], vals)


def test_problems_across_batches_keep_their_lines(tmp_path, tiny_batches):
    """Duplicates whose first reading is many batches back, a stretch of readings exported
    twice (they go back in time: found by the second read), an out-of-order reading."""
    study = make_study(tmp_path)
    ts = intervals(study)
    hours = [f"2025-01-{1 + h // 24:02d}T{h % 24:02d}:00:00Z" for h in range(72)]
    lines = ["timestamp,feeder_id,mw"] + [f"{t},F01,1.5" for t in hours]  # lines 2..73
    lines += [f"{t},F01,1.5" for t in hours[10:13]]  # lines 74..76 repeat lines 12..14
    lines += ["2025-01-04T05:00:00Z,F01,1", "2025-01-04T03:00:00Z,F01,1"]  # 77, 78
    lines += ["2025-01-04T05:00:00Z,F01,2"]  # 79 duplicates line 77
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "twice.csv", lines), study, ts)
    got = problems(ei.value)
    assert got == [
        (74, "timestamp", "second reading for feeder 'F01' at 2025-01-01T11:00+01:00 (local); the "
                          "first is on line 12"),
        (75, "timestamp", "second reading for feeder 'F01' at 2025-01-01T12:00+01:00 (local); the "
                          "first is on line 13"),
        (76, "timestamp", "second reading for feeder 'F01' at 2025-01-01T13:00+01:00 (local); the "
                          "first is on line 14"),
        (79, "timestamp", "second reading for feeder 'F01' at 2025-01-04T06:00+01:00 (local); the "
                          "first is on line 77"),
        (78, "timestamp", "timestamp 2025-01-04T04:00+01:00 (local) of feeder 'F01' comes after a "
                          "reading for 2025-01-04T06:00+01:00; each feeder's readings must be in "
                          "time order")]


def test_third_autumn_reading_counted_across_batches(tmp_path, tiny_batches):
    study = make_study(tmp_path)
    lines = ["timestamp,feeder_id,mw"] + [f"2025-10-26 0{h}:00,F0{f},1"
                                          for h in (0, 1, 2, 2) for f in range(6)]
    lines += ["2025-10-26 02:00,F04,1"]  # line 26: a third 02:00 for F04
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "third.csv", lines), study, intervals(study))
    assert problems(ei.value) == [(26, "timestamp", third_for("F04"))]


def third_for(fid):
    return (f"local time '2025-10-26 02:00' occurs a third time for feeder '{fid}': in the "
            "repeated autumn hour each local time can appear twice (first summer time, then "
            "standard time); use UTC offsets to be unambiguous")


def test_lines_stay_right_after_blank_lines_and_a_line_with_wrong_fields(tmp_path):
    study = make_study(tmp_path)
    lines = ["timestamp,feeder_id,mw",
             "2025-01-01T00:00:00Z,F01,1",   # 2
             "",                             # 3 blank: a line, no problem
             ",,",                           # 4 only separators: blank too
             "2025-01-01T01:00:00Z,F01",     # 5 two fields
             "2025-01-01T02:00:00Z,F01,1,7",  # 6 four fields
             "2025-01-01T03:00:00Z,F01,x"]   # 7 still checked: text mw
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "fields.csv", lines), study, intervals(study))
    assert [(r, c) for r, c, _ in problems(ei.value)] == [(5, None), (6, None), (7, "mw")]
    assert "2 fields on this line, the header has 3" in problems(ei.value)[0][2]


# --------------------------------------------------------------------------------------------
# wide layout
# --------------------------------------------------------------------------------------------
def _wide_and_long(tmp_path, study, ts):
    """The same readings as a long and a wide file; F01 has a 10-hour hole, TOTAL too."""
    vals = np.random.default_rng(11).normal(3.0, 1.0, size=(4, len(ts)))
    vals[1, 100:110] = np.nan
    vals[3, 7] = np.nan
    ids = ["F00", "F01", "F03", "TOTAL"]
    lf = long_frame(offset_text(ts), ids, vals)
    lf = lf[np.isfinite(lf["mw"].to_numpy())]
    wf = pd.DataFrame({"timestamp": offset_text(ts), **{f: vals[i] for i, f in enumerate(ids)}})
    return lf, wf, vals


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_wide_and_long_files_give_equal_data_and_years(tmp_path, fmt):
    study = make_study(tmp_path, demand_basis="metered_total")
    ts = intervals(study)
    lf, wf, vals = _wide_and_long(tmp_path, study, ts)
    (tmp_path / "long").mkdir()
    (tmp_path / "wide").mkdir()
    lp, wp = tmp_path / "long" / f"m.{fmt}", tmp_path / "wide" / f"m.{fmt}"
    if fmt == "csv":
        write_csv(lp, lf)
        write_csv(wp, wf)
    else:
        lf.to_parquet(lp)
        wf.to_parquet(wp)  # NaN cells: no reading
    a, b = read_metered(lp, study, ts), read_metered(wp, study, ts)
    assert (a.layout, b.layout) == ("long", "wide")
    assert_same_metered(a, b)
    np.testing.assert_array_equal(a.values_mw[[0, 1, 3]], vals[:3])
    ya, yb = build_year(study, a), build_year(study, b)
    np.testing.assert_array_equal(ya.net_mw, yb.net_mw)
    np.testing.assert_array_equal(ya.demand_mw, yb.demand_mw)
    assert ya.flags == yb.flags
    assert [n.replace("wide", "long") for n in yb.notes] == list(ya.notes)
    assert "gaps_filled" in flags_of(ya.flags, "F01")


def test_wide_problems_name_row_and_feeder_column(tmp_path):
    study = make_study(tmp_path)
    lines = ["timestamp,F00,F01,f02,F01, ",
             "2025-01-01T00:00:00Z,1,2,,,",
             "2025-01-01T01:00:00Z,1,abc,,,",   # 3: text in F01
             "2025-01-01T01:00:00Z,1,2,,,",     # 4: the row for 01:00 again
             "2025-01-01T00:30:00Z,inf,,,,"]    # 5: out of order, inf in F00
    with pytest.raises(InputError) as ei:
        read_metered(write_text(tmp_path / "wide.csv", lines), study, intervals(study))
    assert problems(ei.value) == [
        (1, "f02", "feeder_id 'f02' is not a feeder of the study and not TOTAL; did you "
                   "mean 'F02'?"),
        (1, "F01", "column 'F01' appears twice in the header (also column 3)"),
        (1, None, "column 6 has no name in the header; name it after its feeder"),
        (3, "F01", "mw 'abc' is not a finite number"),
        (5, "F00", "mw 'inf' is not a finite number"),
        (4, "timestamp", "second row for 2025-01-01T02:00+01:00 (local); the first is on line 3"),
        (5, "timestamp", "timestamp 2025-01-01T01:30+01:00 (local) comes after a row for "
                         "2025-01-01T02:00+01:00; rows must be in time order")]


def test_wide_blank_cells_are_gaps_not_errors(tmp_path):
    study = make_study(tmp_path)
    ts = intervals(study)
    lines = ["timestamp,F02,TOTAL"] + [f"2025-01-01T{h:02d}:00:00Z,{'' if h == 5 else h},40"
                                       for h in range(24)]
    m = read_metered(write_text(tmp_path / "w.csv", lines), study, ts)
    row = m.values_mw[2, 1:25]  # 00:00Z = local 01:00 = interval 1
    assert np.isnan(row[5]) and row[6] == 6.0 and m.has_data.tolist()[2]
    assert (m.total_mw[1:25] == 40).all()
    assert m.gap_runs[0].tolist()[:1] == [2]


# --------------------------------------------------------------------------------------------
# the metered array becomes the year
# --------------------------------------------------------------------------------------------
def test_build_year_fills_the_read_array_in_place_and_can_be_repeated(tmp_path):
    study = make_study(tmp_path, gap_fill="interpolate")
    ts = intervals(study)
    path, _ = _gappy(tmp_path, study, ts)
    m = read_metered(path, study, ts)
    raw = m.values_mw.copy()
    y1 = build_year(study, m)
    assert np.shares_memory(y1.net_mw, m.values_mw) and not y1.net_mw.flags.writeable
    y2 = build_year(study, m)  # the gaps are known from gap_runs
    assert not np.shares_memory(y2.net_mw, m.values_mw)
    np.testing.assert_array_equal(y1.net_mw, y2.net_mw)
    assert y1.flags == y2.flags
    kept = np.isfinite(raw)
    np.testing.assert_array_equal(y1.net_mw[kept], raw[kept])


# --------------------------------------------------------------------------------------------
# 5- and 10-minute studies
# --------------------------------------------------------------------------------------------
def test_five_minute_study_averages_minutes_and_holds_quarter_hours(tmp_path):
    study = make_study(tmp_path, interval_minutes=5)
    ts = intervals(study)
    assert len(ts) == 105_120  # 365 days × 288
    m1 = pd.date_range("2025-05-05T08:00Z", periods=60, freq="1min")
    q = pd.date_range("2025-05-05T08:00Z", periods=4, freq="15min")
    v1 = np.arange(60, dtype=float)
    df = pd.concat([long_frame(offset_text(m1), ["F00"], v1[None, :]),
                    long_frame(offset_text(q), ["F01"], np.array([[1.0, 2.0, 3.0, 4.0]]))])
    m = read_metered(write_csv(tmp_path / "five.csv", df), study, ts)
    i = ts.get_loc(pd.Timestamp("2025-05-05T08:00Z"))
    np.testing.assert_allclose(m.values_mw[0, i:i + 12], v1.reshape(12, 5).mean(axis=1))
    np.testing.assert_array_equal(m.values_mw[1, i:i + 12], np.repeat([1.0, 2, 3, 4], 3))
    assert np.isnan(m.values_mw[1, i + 12])  # the last reading covers one step only
    assert any("readings every 1 min" in n and "averaged into the 5-minute" in n
               for n in m.notes)
    assert any("readings every 15 min" in n and "held over" in n for n in m.notes)


def test_ten_minute_study_five_minute_readings_off_the_ten_minute_grid_are_fine(tmp_path):
    study = make_study(tmp_path, interval_minutes=10)
    ts = intervals(study)
    five = pd.date_range("2025-02-01T00:05Z", periods=12, freq="5min")  # starts off-grid
    m = read_metered(write_csv(tmp_path / "ten.csv", long_frame(
        offset_text(five), ["F02"], np.arange(12.0)[None, :])), study, ts)
    i = ts.get_loc(pd.Timestamp("2025-02-01T00:00Z"))
    np.testing.assert_array_equal(m.values_mw[2, i:i + 7],
                                  [0.0, 1.5, 3.5, 5.5, 7.5, 9.5, 11.0])


@hyp_settings(max_examples=80, deadline=None)
@given(hst.one_of(
    hst.lists(hst.integers(0, 6), min_size=1, max_size=60),
    hst.tuples(hst.permutations(list(range(7))), hst.integers(1, 9), hst.integers(0, 6))
    .map(lambda x: (list(x[0]) * x[1])[x[2]:]).filter(len)))
def test_grouping_of_a_batch_is_a_stable_partition_by_series(codes):
    """Whatever shortcut groups the rows (already grouped, time-step order, sort), every
    series' rows end up together and in file order; checked against a plain Python count."""
    from allocator.metered.reader import _grouped

    code = np.array(codes, dtype=np.int64)
    g = _grouped(code)
    order = list(range(len(code))) if g is None else g.tolist()
    assert sorted(order) == list(range(len(code)))
    seen = []
    for i in order:
        if not seen or seen[-1] != codes[i]:
            assert codes[i] not in seen  # one block per series
            seen.append(codes[i])
    for k in set(codes):
        mine = [i for i in order if codes[i] == k]
        assert mine == sorted(mine)


def test_malformed_line_with_bytes_that_are_not_utf8(tmp_path):
    """pyarrow cannot even quote such a line; the file is reported as not UTF-8, at the byte
    offset counted here by hand (header 23 bytes, line 2 27 bytes, 22 more)."""
    study = make_study(tmp_path)
    p = tmp_path / "latin.csv"
    p.write_bytes(b"timestamp,feeder_id,mw\n2025-01-01T00:00:00Z,F01,1\n"
                  b"2025-01-01T01:00:00Z,F\xdc1,1,4\n")
    with pytest.raises(InputError) as ei:
        read_metered(p, study, intervals(study))
    assert problems(ei.value) == [(None, None, "cannot read the file as CSV: 'utf-8' codec "
                                   "can't decode byte 0xdc in position 72: invalid "
                                   "continuation byte")]


def test_prefetching_hands_on_errors_and_stops_when_left_early():
    import threading
    import time

    from allocator.metered.sources import prefetched

    def gen(n, fail_at=None):
        for i in range(n):
            if i == fail_at:
                raise ValueError("bad batch")
            yield i

    assert list(prefetched(gen(5))) == [0, 1, 2, 3, 4]
    with pytest.raises(ValueError, match="bad batch"):
        list(prefetched(gen(5, fail_at=3)))
    before = threading.active_count()
    it = prefetched(gen(10**9))
    assert next(it) == 0
    it.close()  # the consumer stops early (e.g. an input error in a batch)
    time.sleep(0.3)
    assert threading.active_count() <= before


def test_reader_leaves_the_unraisable_hook_as_it_was(tmp_path):
    import sys

    study = make_study(tmp_path)
    hook = sys.unraisablehook
    p = write_text(tmp_path / "f.csv", ["timestamp,feeder_id,mw", "2025-01-01T00:00:00Z,F01,1,2"])
    with pytest.raises(InputError):
        read_metered(p, study, intervals(study))
    assert sys.unraisablehook is hook
