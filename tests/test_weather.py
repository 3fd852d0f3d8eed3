"""Checks of the weather-year PV module (allocator.weather) against outside sources.

Outside references used here, each named again beside its check:

* NREL TMY3 data files shipped in pvlib's data folder (``pvlib/data``): 723170TYA.CSV
  (Greensboro Piedmont Triad Intl, NC, 36.1 N, UTC-5) and 703165TY.csv (Sand Point, AK,
  55.3 N, UTC-9).  Their own columns (GHI, the ETR extraterrestrial horizontal radiation NREL
  computed for each hour, the date/time labels) are read here with the csv module.
* pvlib (PyPI) as the reference library for the sun only: NREL SPA solar position and
  extraterrestrial radiation, called in the test.  Planes of array are transposed here by
  hand, not with pvlib's ``get_total_irradiance`` (which the module itself calls).
* Transposition formulas, from memory: the isotropic sky of Liu & Jordan (1963), the
  Hay-Davies sky (Hay & Davies 1980, "Calculations of the solar radiation incident on an
  inclined surface"), the angle of incidence and the extraterrestrial normal irradiance
  G_on = 1367·(1 + 0.033·cos(360°·n/365)) W/m² as in Duffie & Beckman, Solar Engineering of
  Thermal Processes (eqs. 1.6.3, 1.4.1a); ground albedo 0.2 (common practice).
* The EPW format as described in the EnergyPlus "Auxiliary Programs" documentation (8 header
  lines; field 4 is the hour 1-24 ending at the stated hour; fields 14-16 are GHI, DNI, DHI):
  from memory.  pvlib ships no EPW file, so one is written here from the Greensboro TMY3.
* The IANA time-zone database through Python's ``zoneinfo`` (DST dates; the rules from
  memory: EU last Sundays of March / October, US second Sunday of March / first Sunday of
  November, New South Wales first Sunday of October / April).
"""

from __future__ import annotations

import csv
import dataclasses
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from allocator.errors import InputError
from allocator.scenarios import build_years
from allocator.weather import (GROUND_ALBEDO, MEAN_EARTH_RADIUS_KM, plane_of_array_w_per_m2,
                               read_weather, record_midpoints_utc, site_distance_km,
                               study_record_index, weather_pv_pu, zone_standard_offset)
from allocator.timegrid import study_intervals
from allocator.workbook import read_study
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

DATA = Path(pvlib.__file__).parent / "data"
GREENSBORO = DATA / "723170TYA.CSV"  # NREL TMY3, shipped in pvlib's data folder
SAND_POINT = DATA / "703165TY.csv"  # NREL TMY3, shipped in pvlib's data folder


@pytest.fixture(scope="module")
def gso():
    return read_weather(GREENSBORO)


def raw_rows(path: Path) -> list[list[str]]:
    """The TMY3 data rows as text (line 3 onwards), read without pvlib."""
    with open(path, newline="") as fh:
        return list(csv.reader(fh))[2:]


def raw_ghi(path: Path, mmdd: str, hhmm: str) -> float:
    """GHI (W/m², column 5) of the TMY3 row labelled MM/DD/yyyy and HH:MM (hour ending)."""
    hits = [float(r[4]) for r in raw_rows(path) if r[0][:5] == mmdd and r[1] == hhmm]
    assert len(hits) == 1
    return hits[0]


#: ground reflectance written here as a literal (the usual 0.2 for grass and typical
#: surroundings, e.g. Duffie & Beckman, Solar Engineering of Thermal Processes, ch. 2 - from
#: memory); deliberately not imported from the code under test
ALBEDO = 0.2


def tmy3_site(path: Path) -> tuple[float, float, float, float]:
    """(UTC offset h, latitude, longitude, elevation m) from line 1 of an NREL TMY3 file
    (USAF, name, state, TZ, latitude, longitude, elevation), read with the csv module."""
    with open(path, newline="") as fh:
        head = next(csv.reader(fh))
    return float(head[3]), float(head[4]), float(head[5]), float(head[6])


def tmy3_sun(path: Path, rows: list[list[str]]):
    """pvlib SPA (the reference library) at the middle of each row's hour: the TMY3 label
    "MM/DD/YYYY, HH:00" ends the hour (TMY3 user's manual, NREL/TP-581-43156), in the
    file's local standard time.  Returns (apparent zenith °, azimuth °, apparent elevation °,
    day of year), each ``[row]``; the instants are built here from the labels."""
    tz, lat, lon, alt = tmy3_site(path)
    date = pd.to_datetime([r[0] for r in rows], format="%m/%d/%Y")
    hour_end = np.array([int(r[1][:2]) for r in rows])
    mid = pd.DatetimeIndex(date + pd.to_timedelta(hour_end - 0.5, unit="h")
                           - pd.Timedelta(hours=tz)).tz_localize("UTC")
    pos = pvlib.solarposition.get_solarposition(mid, lat, lon, altitude=alt)
    return (pos["apparent_zenith"].to_numpy(), pos["azimuth"].to_numpy(),
            pos["apparent_elevation"].to_numpy(), mid.day_of_year.to_numpy())


def cos_incidence(zenith_deg, sun_azimuth_deg, tilt_deg, azimuth_deg):
    """cos of the angle between the sun and the plane's normal, by spherical trigonometry:
    cos θ = cos z·cos β + sin z·sin β·cos(γs − γ) (Duffie & Beckman eq. 1.6.3 in zenith
    form, from memory)."""
    z, gs = np.radians(zenith_deg), np.radians(sun_azimuth_deg)
    b, g = math.radians(tilt_deg), math.radians(azimuth_deg)
    return np.cos(z) * math.cos(b) + np.sin(z) * math.sin(b) * np.cos(gs - g)


def isotropic_poa(ghi, dni, dhi, cos_aoi, tilt_deg, albedo=ALBEDO):
    """Plane-of-array irradiance of the isotropic sky model (Liu & Jordan 1963), by hand:
    DNI·max(cos θ, 0) + DHI·(1 + cos β)/2 + GHI·ρ·(1 − cos β)/2."""
    cb = math.cos(math.radians(tilt_deg))
    return (np.asarray(dni) * np.maximum(cos_aoi, 0.0) + np.asarray(dhi) * (1 + cb) / 2
            + np.asarray(ghi) * albedo * (1 - cb) / 2)


def circumsolar_excess(dhi, cos_aoi, zenith_deg, tilt_deg):
    """DHI·(Rb − (1 + cos β)/2), Rb = max(cos θ, 0) / cos z: what the Hay-Davies sky (Hay &
    Davies 1980: sky diffuse = DHI·[A·Rb + (1 − A)·(1 + cos β)/2], A = DNI / extraterrestrial
    normal irradiance) adds to the isotropic one per unit of A.  Since 0 ≤ A ≤ 1 (no DNI
    exceeds the extraterrestrial beam), the two models differ by at most this much."""
    rb = np.maximum(cos_aoi, 0.0) / np.cos(np.radians(zenith_deg))
    return np.asarray(dhi) * (rb - (1 + math.cos(math.radians(tilt_deg))) / 2)


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("path, name, lat, lon, tz", [
    # the header line of each NREL TMY3 file shipped in pvlib's data folder
    (GREENSBORO, "GREENSBORO PIEDMONT TRIAD INT, NC", 36.1, -79.95, -5.0),
    (SAND_POINT, "SAND POINT, AK", 55.317, -160.517, -9.0),
])
def test_reads_tmy3_site_and_every_record(path, name, lat, lon, tz):
    w = read_weather(path)
    assert (w.site_name, w.latitude_deg, w.longitude_deg, w.utc_offset_h) == (name, lat, lon,
                                                                               tz)
    assert w.file_format == "tmy3" and w.n_records == 8760 and w.path == str(path)
    rows = raw_rows(path)
    # the file's own GHI / DNI / DHI columns (5, 8, 11), record by record
    np.testing.assert_array_equal(w.ghi_w_per_m2, [float(r[4]) for r in rows])
    np.testing.assert_array_equal(w.dni_w_per_m2, [float(r[7]) for r in rows])
    np.testing.assert_array_equal(w.dhi_w_per_m2, [float(r[10]) for r in rows])
    # hour-ending labels (TMY3 user's manual, NREL/TP-581-43156): "HH:00" covers HH-1..HH
    assert [int(r[1][:2]) - 1 for r in rows] == w.hour.tolist()
    assert [int(r[0][:2]) for r in rows] == w.month.tolist()
    assert [int(r[0][3:5]) for r in rows] == w.day.tolist()


def test_feb28_midnight_of_a_leap_source_year_keeps_its_date(gso):
    # NREL TMY3 723170TYA.CSV, shipped in pvlib's data folder: its February is from 1996 (a
    # leap year).  The row "02/28/1996,24:00" covers 23:00-24:00 on 28 February; pvlib's
    # index labels it 1 March 00:00, which would leave 28 Feb 23:00 without a record.
    i = next(k for k, r in enumerate(raw_rows(GREENSBORO)) if r[:2] == ["02/28/1996", "24:00"])
    assert (gso.month[i], gso.day[i], gso.hour[i]) == (2, 28, 23)
    assert gso.start_times[i] == pd.Timestamp("1996-02-28 23:00").tz_localize(
        gso.start_times.tz)
    assert gso.start_times[i].utcoffset() == pd.Timedelta(hours=-5)


def test_record_midpoints_match_nrel_extraterrestrial_column(gso):
    # NREL TMY3 723170TYA.CSV, shipped in pvlib's data folder: column 3 "ETR" is NREL's
    # extraterrestrial horizontal radiation for each hour.  pvlib's extraterrestrial normal
    # irradiance × cos(zenith) at the module's hour midpoints must agree; a label off by
    # half an hour or more would miss by ~75 W/m² on average (measured while writing this).
    mid = record_midpoints_utc(gso)
    pos = pvlib.solarposition.get_solarposition(mid, gso.latitude_deg, gso.longitude_deg)
    etr = np.asarray(pvlib.irradiance.get_extra_radiation(mid)) * np.maximum(
        np.cos(np.radians(pos["zenith"].to_numpy())), 0.0)
    nrel = np.array([float(r[2]) for r in raw_rows(GREENSBORO)])
    day = nrel > 300.0  # sun well up for the whole hour
    assert np.abs(etr[day] - nrel[day]).mean() < 3.0


def write_epw(path: Path, tmy3: Path, edit=None) -> Path:
    """An EPW file holding the TMY3 file's site and irradiance (EnergyPlus Auxiliary Programs
    layout, from memory): 8 header lines, then 35 fields per hour; field 4 = TMY3 hour."""
    with open(tmy3, newline="") as fh:
        head = next(csv.reader(fh))
    rows = raw_rows(tmy3)
    lines = [f"LOCATION,{head[1]},{head[2]},USA,TMY3,{head[0]},{head[4]},{head[5]},"
             f"{head[3]},{head[6]}",
             "DESIGN CONDITIONS,0", "TYPICAL/EXTREME PERIODS,0", "GROUND TEMPERATURES,0",
             "HOLIDAYS/DAYLIGHT SAVINGS,No,0,0,0", "COMMENTS 1,converted in a test",
             "COMMENTS 2,", "DATA PERIODS,1,1,Data,Sunday, 1/ 1,12/31"]
    for r in rows:
        m, d, y = r[0].split("/")
        f = [y, str(int(m)), str(int(d)), str(int(r[1][:2])), "60", "?", r[31], r[34],
             r[37], str(float(r[40]) * 100), r[2], r[3], "300", r[4], r[7], r[10]]
        f += ["0"] * (35 - len(f))
        lines.append(",".join(f))
    if edit:
        edit(lines)
    path.write_text("\n".join(lines) + "\n")
    return path


def test_epw_gives_the_same_year_as_the_tmy3_it_was_written_from(tmp_path, gso):
    # EPW layout from the EnergyPlus documentation (from memory): hour field 1-24 ending at
    # the stated hour, like the TMY3 labels; so both files must give the same records.
    w = read_weather(write_epw(tmp_path / "gso.epw", GREENSBORO))
    assert w.file_format == "epw" and w.n_records == 8760
    assert (w.latitude_deg, w.longitude_deg, w.utc_offset_h) == (36.1, -79.95, -5.0)
    for a in ("month", "day", "hour", "ghi_w_per_m2", "dni_w_per_m2", "dhi_w_per_m2"):
        np.testing.assert_array_equal(getattr(w, a), getattr(gso, a))
    assert (w.start_times == gso.start_times).all()
    np.testing.assert_allclose(plane_of_array_w_per_m2(w, 30.0),
                               plane_of_array_w_per_m2(gso, 30.0), rtol=0, atol=1e-9)


def test_format_recognised_by_content_when_the_name_says_nothing(tmp_path):
    other = tmp_path / "site.dat"
    other.write_bytes(GREENSBORO.read_bytes())
    assert read_weather(other).file_format == "tmy3"
    assert read_weather(write_epw(tmp_path / "site.wx", GREENSBORO)).file_format == "epw"


def test_leap_year_epw_with_feb29_is_used_in_a_leap_study_year(tmp_path, gso):
    # 24 extra records for 29 Feb 1996 (GHI 111 W/m² at noon): accepted as 8784 records
    def add_feb29(lines):
        at = next(i for i, s in enumerate(lines) if s.split(",")[1:4] == ["3", "1", "1"])
        for h in range(1, 25):
            g = "111" if h == 13 else "0"
            lines.insert(at + h - 1, ",".join(["1996", "2", "29", str(h), "60", "?"] +
                                               ["0"] * 7 + [g, "0", g] + ["0"] * 19))
    w = read_weather(write_epw(tmp_path / "leap.epw", GREENSBORO, add_feb29))
    assert w.n_records == 8784 and w.has_feb29
    ts = study_intervals(2024, "America/New_York", 60)
    pv = weather_pv_pu(w, ts, "America/New_York", 60)
    # 29 Feb 2024 12:00 EST (no DST in February) → the file's 29 Feb record 12:00-13:00
    k = ts.get_loc(pd.Timestamp("2024-02-29 12:00", tz="America/New_York").tz_convert("UTC"))
    assert pv[k] == pytest.approx(0.111)
    # and in a non-leap study year the file's 29 February is unused: every hour once
    idx = study_record_index(w, study_intervals(2023, "America/New_York", 60),
                             "America/New_York")
    assert not np.isin(np.flatnonzero(w.month * 100 + w.day == 229), idx).any()


# --------------------------------------------------------------------------------------------
# plane of array
# --------------------------------------------------------------------------------------------
def test_flat_plane_is_the_files_ghi(gso):
    # NREL TMY3 723170TYA.CSV, shipped in pvlib's data folder: annual GHI from its column 5
    poa = plane_of_array_w_per_m2(gso, 0.0)
    np.testing.assert_array_equal(poa, [float(r[4]) for r in raw_rows(GREENSBORO)])
    assert poa.sum() == sum(float(r[4]) for r in raw_rows(GREENSBORO))


@pytest.mark.parametrize("path", [GREENSBORO, SAND_POINT])
@pytest.mark.parametrize("tilt, azimuth", [(30.0, None), (30.0, 90.0), (60.0, 225.0)])
def test_tilted_plane_matches_hand_transposition(path, tilt, azimuth):
    # Inputs: the NREL TMY3 file (shipped in pvlib's data folder), its GHI / DNI / DHI
    # columns (5, 8, 11) and header read with the csv module; the sun from pvlib's NREL SPA
    # (reference library) at the middle of each labelled hour, times built here.  Reference:
    # the isotropic sky of Liu & Jordan (1963) transposed by hand, ground albedo 0.2 as a
    # literal (ALBEDO, from memory), default orientation equator-facing (180° north of the
    # equator, both files are).
    rows = raw_rows(path)
    ghi, dni, dhi = (np.array([float(r[k]) for r in rows]) for k in (4, 7, 10))
    zen, sun_az, elev, doy = tmy3_sun(path, rows)
    cos_aoi = cos_incidence(zen, sun_az, tilt, 180.0 if azimuth is None else azimuth)
    iso = isotropic_poa(ghi, dni, dhi, cos_aoi, tilt)
    got = plane_of_array_w_per_m2(read_weather(path), tilt, azimuth)
    assert got.shape == (8760,)

    # 1. Hours without beam in the file (DNI = 0: nights and overcast hours).  Hay-Davies
    # (Hay & Davies 1980) weights its circumsolar part by A = DNI / G_on = 0,
    # so it *is* the isotropic sky of Liu & Jordan (1963) there: sky DHI·(1 + cos β)/2 plus
    # ground GHI·0.2·(1 − cos β)/2, to rounding.  This pins the albedo and the diffuse and
    # ground view factors; 500+ such hours have daylight in each file.
    no_beam = dni == 0
    assert (no_beam & (ghi > 0)).sum() > 500
    np.testing.assert_allclose(got[no_beam], iso[no_beam], rtol=0, atol=1e-9)

    # 2. Hours with beam and the sun at least 5° up at the hour's middle (pvlib SPA; lower
    # suns are left out: near the horizon Rb = cos θ / cos z is ill-conditioned, and below
    # it the module drops the beam by its own rule, see test_sun_below_horizon_gives_no_beam).
    # The Hay-Davies sky differs from the isotropic one only by DHI·A·(Rb − (1 + cos β)/2)
    # with 0 ≤ A ≤ 1 (Hay & Davies 1980): the package must lie between the isotropic value
    # and the isotropic value plus that whole excess.
    beam = (dni > 0) & (elev >= 5.0)
    excess = circumsolar_excess(dhi, cos_aoi, zen, tilt)[beam]
    lift = got[beam] - iso[beam]
    assert (lift >= np.minimum(excess, 0.0) - 1e-6).all()
    assert (lift <= np.maximum(excess, 0.0) + 1e-6).all()
    # the excess must be the Hay-Davies one, A = DNI / extraterrestrial normal irradiance,
    # with G_on = 1367·(1 + 0.033·cos(360°·n/365)) W/m² (Duffie & Beckman eq. 1.4.1a, from
    # memory).  Tolerance 1 % of the excess: pvlib's Spencer (1971) series with a solar
    # constant of 1366.1 W/m² differs from that formula by under 0.5 % (0.33 % at most over
    # these files, measured while writing this test); a sky model without circumsolar
    # brightening (lift 0) misses by 100 %.
    g_on = 1367.0 * (1.0 + 0.033 * np.cos(2.0 * np.pi * doy[beam] / 365.0))
    miss = np.abs(lift - dni[beam] / g_on * excess) - (0.01 * np.abs(excess) + 1e-6)
    assert beam.sum() > 2000 and miss.max() <= 0, f"worst miss {miss.max():.3g} W/m²"

    # the two checks cover nearly the whole year's light (NREL TMY3 GHI column)
    assert ghi[no_beam | beam].sum() > 0.98 * ghi.sum()
    assert got.sum() > 0.5 * ghi.sum()


def test_latitude_tilt_collects_more_than_flat_and_than_east(gso):
    # Common practice (an equator-facing plane tilted near the latitude maximises annual
    # irradiation at mid latitudes; e.g. Duffie & Beckman, Solar Engineering of Thermal
    # Processes, ch. 2 - from memory).  NREL TMY3 723170TYA.CSV (Greensboro, 36.1 N),
    # shipped in pvlib's data folder.
    flat = plane_of_array_w_per_m2(gso, 0.0).sum()
    south = plane_of_array_w_per_m2(gso, 36.0).sum()
    east = plane_of_array_w_per_m2(gso, 36.0, 90.0).sum()
    north = plane_of_array_w_per_m2(gso, 36.0, 0.0).sum()
    assert south > 1.05 * flat
    assert north < flat and east < flat < south


def test_sun_below_horizon_gives_no_beam(gso):
    # Records whose midpoint sun is below the horizon (pvlib SPA, called here): a tilted
    # plane gets only the file's diffuse and reflected light, never more than a full sky
    # of diffuse plus reflected GHI, and nothing where the file has no light.
    mid = record_midpoints_utc(gso)
    el = pvlib.solarposition.get_solarposition(mid, gso.latitude_deg,
                                               gso.longitude_deg)["apparent_elevation"]
    down = el.to_numpy() <= 0
    poa = plane_of_array_w_per_m2(gso, 45.0, 90.0)
    assert down.sum() > 4000
    assert (poa[down] <= gso.dhi_w_per_m2[down] + GROUND_ALBEDO * gso.ghi_w_per_m2[down]
            + 1e-9).all()
    assert (poa[down & (gso.ghi_w_per_m2 == 0) & (gso.dhi_w_per_m2 == 0)] == 0).all()
    assert (poa >= 0).all()


def test_southern_site_faces_north_by_default(gso):
    # the default orientation rule: equator-facing, so 0° (north) south of the equator
    south_site = dataclasses.replace(gso, latitude_deg=-gso.latitude_deg)
    np.testing.assert_array_equal(plane_of_array_w_per_m2(south_site, 30.0),
                                  plane_of_array_w_per_m2(south_site, 30.0, 0.0))
    assert not np.array_equal(plane_of_array_w_per_m2(south_site, 30.0),
                              plane_of_array_w_per_m2(south_site, 30.0, 180.0))


# --------------------------------------------------------------------------------------------
# study calendar
# --------------------------------------------------------------------------------------------
def at(ts: pd.DatetimeIndex, local: str, tz: str) -> int:
    return ts.get_loc(pd.Timestamp(local, tz=tz).tz_convert("UTC"))


@pytest.mark.parametrize("tz, year, minutes, local, mmdd, label", [
    # hand-computed; summer time (tz database, zoneinfo) is standard time + 1 h
    ("Europe/Berlin", 2023, 15, "2023-06-21 13:15", "06/21", "13:00"),  # CEST → CET 12:15
    ("Europe/Berlin", 2023, 15, "2023-01-10 13:15", "01/10", "14:00"),  # CET, no shift
    ("Europe/Berlin", 2023, 5, "2023-03-26 03:05", "03/26", "03:00"),  # CEST → CET 02:05
    ("America/Chicago", 2023, 60, "2023-07-04 13:00", "07/04", "13:00"),  # CDT → CST 12:00
    ("America/Chicago", 2023, 60, "2023-12-31 23:00", "12/31", "24:00"),  # last interval
    ("Australia/Sydney", 2024, 30, "2024-01-15 13:30", "01/15", "13:00"),  # AEDT → AEST
    ("Australia/Sydney", 2024, 30, "2024-01-01 00:00", "12/31", "24:00"),  # 31 Dec 2023 23:00
    ("Australia/Sydney", 2024, 30, "2024-02-29 13:00", "02/28", "13:00"),  # leap day → 28th
    ("Australia/Sydney", 2024, 30, "2024-07-01 12:30", "07/01", "13:00"),  # AEST, no DST
])
def test_interval_takes_the_record_of_local_standard_time(gso, tz, year, minutes, local, mmdd,
                                                          label):
    # NREL TMY3 723170TYA.CSV, shipped in pvlib's data folder: the GHI of the row labelled
    # mmdd / label (hour ending), read with the csv module
    ts = study_intervals(year, tz, minutes)
    pv = weather_pv_pu(gso, ts, tz, minutes)
    assert len(pv) == len(ts)
    assert pv[at(ts, local, tz)] * 1000.0 == pytest.approx(raw_ghi(GREENSBORO, mmdd, label))


def test_repeated_autumn_hour_takes_two_different_records(gso):
    # Europe/Berlin 2023-10-29: 02:30 CEST = 01:30 CET and 02:30 CET; the tz database
    # (zoneinfo) gives both instants; records "10/29 02:00" and "10/29 03:00" (hour ending)
    tz = "Europe/Berlin"
    ts = study_intervals(2023, tz, 30)
    idx = study_record_index(gso, ts, tz)
    first = pd.Timestamp("2023-10-29 00:30", tz="UTC")  # 02:30 CEST
    second = pd.Timestamp("2023-10-29 01:30", tz="UTC")  # 02:30 CET
    rows = raw_rows(GREENSBORO)
    assert rows[idx[ts.get_loc(first)]][:2][1] == "02:00"
    assert rows[idx[ts.get_loc(second)]][:2][1] == "03:00"
    assert rows[idx[ts.get_loc(second)]][0][:5] == "10/29"


def test_feb29_of_a_leap_study_year_repeats_feb28(gso):
    tz = "Europe/Berlin"  # no DST in February: local time = standard time
    ts = study_intervals(2024, tz, 15)
    pv = weather_pv_pu(gso, ts, tz, 15, 30.0)
    local = ts.tz_convert(tz)
    d28 = pv[(local.month == 2) & (local.day == 28)]
    d29 = pv[(local.month == 2) & (local.day == 29)]
    assert len(d29) == 96 and d29.max() > 0
    np.testing.assert_array_equal(d29, d28)


def test_five_minute_values_hold_the_hourly_record(gso):
    tz = "Europe/Berlin"
    pv5 = weather_pv_pu(gso, study_intervals(2023, tz, 5), tz, 5, 30.0)
    pv60 = weather_pv_pu(gso, study_intervals(2023, tz, 60), tz, 60, 30.0)
    # a non-leap local year has 8760 h (the DST days' 23 and 25 h cancel): 8760 × 12 values
    assert len(pv5) == 8760 * 12 and len(pv60) == 8760
    np.testing.assert_array_equal(pv5, np.repeat(pv60, 12))


@pytest.mark.parametrize("tz", ["Europe/Berlin", "America/Chicago", "Australia/Sydney"])
@pytest.mark.parametrize("year", [2023, 2024])
@pytest.mark.parametrize("minutes", [10, 60])
def test_annual_energy_is_the_files_annual_irradiation(gso, tz, year, minutes):
    # A local calendar year spans 8760 h of absolute time (8784 in a leap year): the DST
    # days' lost and repeated hours cancel.  Local *standard* time is a constant shift of
    # UTC, so those hours are 8760 consecutive standard-time hours, each month/day/hour
    # once - in Sydney starting at 31 Dec 23:00 of the year before, which takes the file's
    # 31 Dec 23:00 record by month/day.  So in a non-leap year every record is used exactly
    # once and Σ pv_pu × h = Σ POA / 1000 exactly; in a leap year 29 Feb repeats 28 Feb and
    # the sum gains 28 Feb's day.  Reference sums: the file's own GHI column (NREL TMY3
    # 723170TYA.CSV, shipped in pvlib's data folder) for the flat plane.
    ghi = np.array([float(r[4]) for r in raw_rows(GREENSBORO)])
    feb28 = sum(float(r[4]) for r in raw_rows(GREENSBORO) if r[0][:5] == "02/28")
    ts = study_intervals(year, tz, minutes)
    pv = weather_pv_pu(gso, ts, tz, minutes)
    expect_kwh = ghi.sum() + (feb28 if year == 2024 else 0.0)
    assert pv.sum() * minutes / 60.0 == pytest.approx(expect_kwh / 1000.0, rel=1e-12)
    counts = np.bincount(study_record_index(gso, ts, tz), minlength=8760)
    is_feb28 = gso.month * 100 + gso.day == 228
    assert (counts[~is_feb28] == 60 // minutes).all()
    assert (counts[is_feb28] == (2 if year == 2024 else 1) * 60 // minutes).all()


#: clear winter hours of NREL TMY3 723170TYA.CSV (Greensboro, shipped in pvlib's data
#: folder), labels MM/DD and HH:00 ending the hour; the file says DNI 836-977 W/m² and DHI
#: 48-60 W/m² there (checked in the test): a high beam fraction, so the sky model matters
#: little, and a low sun (elevation 22-36°), so a steep plane gets far more than the ground
CLEAR_WINTER_HOURS = [("01/29", f"{h}:00") for h in range(11, 16)] + [
    ("12/18", f"{h}:00") for h in range(11, 16)]


def test_workbook_tilt_and_azimuth_reach_the_weather_scenario(tmp_path):
    # A study on the Greensboro site whose settings sheet asks for a steep SSW plane
    # (pv_tilt_deg 60, pv_azimuth_deg 210) and a weather scenario from the NREL TMY3 file
    # shipped in pvlib's data folder, built from the workbook like any study; 30-minute
    # intervals, America/New_York (EST = the file's UTC-5 standard time in Dec / Jan).
    tilt, azimuth = 60.0, 210.0
    settings = dict(BASE_SETTINGS, timezone="America/New_York", interval_minutes=30,
                    latitude=36.1, longitude=-79.95, pv_tilt_deg=tilt,
                    pv_azimuth_deg=azimuth, pv_derate=0.8)
    feeders = base_feeders(4)
    feeders[1]["pv_mw"] = 2.0
    wb = write_workbook(tmp_path / "study.xlsx", settings=settings, feeders=feeders,
                        profiles=flat_profiles(value=0.5), extra_sheets={"scenarios": [
                            {"scenario": "tmy", "pv": f"weather:{GREENSBORO}"},
                            {"scenario": "dark", "pv": "none"}]})
    tmy, dark = build_years(read_study(wb))
    tz = "America/New_York"
    assert tmy.scenario == "tmy" and tmy.interval_minutes == 30

    # Reference, independent of the package: the hour's GHI / DNI / DHI from the file's own
    # columns 5, 8, 11 (csv module), the sun at the middle of the hour from pvlib's NREL SPA
    # (reference library, times built here from the labels), and the isotropic sky of
    # Liu & Jordan (1963) transposed by hand with ground albedo 0.2 (literal, from memory).
    rows = [r for r in raw_rows(GREENSBORO) if (r[0][:5], r[1]) in CLEAR_WINTER_HOURS]
    assert len(rows) == len(CLEAR_WINTER_HOURS)
    ghi, dni, dhi = (np.array([float(r[k]) for r in rows]) for k in (4, 7, 10))
    assert (dni >= 830).all() and (dhi <= 0.15 * ghi).all()  # clear, beam-dominated hours
    zen, sun_az, elev, _ = tmy3_sun(GREENSBORO, rows)
    assert (elev > 15).all()
    cos_aoi = cos_incidence(zen, sun_az, tilt, azimuth)
    ref = isotropic_poa(ghi, dni, dhi, cos_aoi, tilt)
    # Tolerance: the package's Hay-Davies sky (Hay & Davies 1980) differs from the isotropic
    # one only by DHI·A·(Rb − (1 + cos β)/2) with 0 ≤ A ≤ 1, so by at most that excess
    # taken whole (22-91 W/m² here, small because these hours have little diffuse), plus
    # 0.5 W/m² for rounding.
    tol = np.abs(circumsolar_excess(dhi, cos_aoi, zen, tilt)) + 0.5
    # ... while the horizontal plane (what PV gets when the tilt is lost: the file's GHI) is
    # 106-511 W/m² away, 4.7 to 7.9 times the tolerance (asserted: more than twice)
    assert (np.abs(ghi - ref) > 2 * tol).all()
    # ... and on 4 of these hours (mornings and noons) so is the default equator-facing
    # plane (180°, what PV gets when only the azimuth is lost)
    cos_south = cos_incidence(zen, sun_az, tilt, 180.0)
    tol_south = np.abs(circumsolar_excess(dhi, cos_south, zen, tilt)) + 0.5
    south = isotropic_poa(ghi, dni, dhi, cos_south, tilt)
    assert (np.abs(south - ref) > tol + tol_south).sum() >= 4

    pv_mw, derate = 2.0, 0.8  # feeder F01 and the settings above
    for r, expect, slack in zip(rows, ref, tol):
        m, d = int(r[0][:2]), int(r[0][3:5])
        start = int(r[1][:2]) - 1  # "HH:00" covers HH-1..HH, local standard time (EST)
        for minute in (0, 30):  # both half-hour intervals of that hour hold the record
            k = at(tmy.timestamps_utc, f"2025-{m:02d}-{d:02d} {start:02d}:{minute:02d}", tz)
            # per unit of installed PV = POA / 1000 W/m² (STC irradiance, IEC 60904-3,
            # from memory), before the derate
            assert abs(tmy.pv_pu[k] * 1000.0 - expect) <= slack, (r[:2], tmy.pv_pu[k])
            # and the feeder's net load drops by pv_mw · pv_derate · that per-unit value
            drop = dark.net_mw[1, k] - tmy.net_mw[1, k]
            assert abs(drop - pv_mw * derate * expect / 1000.0) <= pv_mw * derate * slack \
                / 1000.0


def test_standard_offset_is_the_winter_offset():
    # tz database (zoneinfo): Berlin CET +1, Sydney AEST +10, Dublin GMT 0 (the database
    # marks Irish winter time as a negative DST; the winter offset is still 0)
    for tz, hours in (("Europe/Berlin", 1), ("Australia/Sydney", 10), ("Europe/Dublin", 0),
                      ("America/Chicago", -6)):
        ts = study_intervals(2023, tz, 60)
        assert zone_standard_offset(ts, tz) == pd.Timedelta(hours=hours)


def test_bad_interval_arguments_are_refused(gso):
    ts = study_intervals(2023, "Europe/Berlin", 15)
    with pytest.raises(ValueError, match="divide 60"):
        weather_pv_pu(gso, ts, "Europe/Berlin", 7)
    with pytest.raises(ValueError, match="spaced"):
        weather_pv_pu(gso, ts, "Europe/Berlin", 30)
    with pytest.raises(ValueError, match="time-zone aware"):
        weather_pv_pu(gso, ts.tz_localize(None), "Europe/Berlin", 15)


def test_site_distance(gso):
    # spherical law of cosines (textbook spherical trigonometry), computed here, and one
    # degree of latitude = π R / 180 on the mean-radius sphere
    def cosines(lat1, lon1, lat2, lon2):
        p1, p2, dl = map(math.radians, (lat1, lat2, lon2 - lon1))
        c = math.sin(p1) * math.sin(p2) + math.cos(p1) * math.cos(p2) * math.cos(dl)
        return MEAN_EARTH_RADIUS_KM * math.acos(c)
    assert site_distance_km(gso, gso.latitude_deg + 1.0, gso.longitude_deg) == pytest.approx(
        math.pi * 6371.0088 / 180.0, rel=1e-12)  # GRS80 mean radius R1
    for lat, lon in ((55.317, -160.517), (-33.9, 151.2), (36.2, -80.1)):
        assert site_distance_km(gso, lat, lon) == pytest.approx(
            cosines(gso.latitude_deg, gso.longitude_deg, lat, lon), rel=1e-9)
    assert site_distance_km(gso, gso.latitude_deg, gso.longitude_deg) == 0.0


# --------------------------------------------------------------------------------------------
# bad files
# --------------------------------------------------------------------------------------------
def tmy3_lines() -> list[str]:
    return GREENSBORO.read_text().splitlines()


def write_lines(path: Path, lines: list[str]) -> Path:
    path.write_text("\n".join(lines) + "\n")
    return path


def set_field(line: str, k: int, value: str) -> str:
    f = line.split(",")
    f[k] = value
    return ",".join(f)


def problems(path) -> list:
    with pytest.raises(InputError) as ei:
        read_weather(path)
    return ei.value.problems


def test_missing_file(tmp_path):
    (p,) = problems(tmp_path / "nowhere.csv")
    assert p.file == str(tmp_path / "nowhere.csv") and "not found" in p.message


def test_truncated_tmy3(tmp_path):
    lines = tmy3_lines()[:5002]
    lines.append(tmy3_lines()[5002][:22])  # cut after the ETR field of line 5003
    probs = problems(write_lines(tmp_path / "cut.csv", lines))
    text = [str(p) for p in probs]
    assert any("5001 hourly records; expected 8760" in t for t in text)
    for col in ("GHI (W/m^2)", "DNI (W/m^2)", "DHI (W/m^2)"):
        assert any(p.row == 5003 and p.column == col and "found nothing" in p.message
                   for p in probs)
    # line 5003 is "07/28/1981,09:00,773,1" (cut): hours from 28 July 09:00 on are missing
    assert any("3759 hour(s) of the year have no record: 07-28 09:00-10:00, " in t
               for t in text)
    assert all(p.file == str(tmp_path / "cut.csv") for p in probs)


def test_every_bad_value_and_missing_hour_in_one_pass(tmp_path):
    lines = tmy3_lines()
    lines[100] = set_field(lines[100], 4, "-5")  # GHI, line 101
    lines[4000] = set_field(lines[4000], 4, "-1")  # GHI, line 4001
    lines[200] = set_field(lines[200], 7, "abc")  # DNI, line 201
    lines[300] = set_field(lines[300], 10, "9999")  # DHI, line 301
    gone = lines.pop(6000)  # one hour without a record
    probs = problems(write_lines(tmp_path / "bad.csv", lines))
    found = {(p.row, p.column) for p in probs}
    assert {(101, "GHI (W/m^2)"), (4001, "GHI (W/m^2)"), (201, "DNI (W/m^2)"),
            (301, "DHI (W/m^2)")} <= found
    msg = "\n".join(str(p) for p in probs)
    assert "line 101, column 'GHI (W/m^2)': irradiance must be ≥ 0 W/m², found -5" in msg
    assert "found 'abc'" in msg and "9999" in msg
    assert "8759 hourly records" in msg
    mm, dd = gone.split(",")[0][:2], gone.split(",")[0][3:5]
    hh = int(gone.split(",")[1][:2])
    assert f"{mm}-{dd} {hh - 1:02d}:00-{hh:02d}:00" in msg


def test_missing_irradiance_column(tmp_path):
    lines = tmy3_lines()
    lines[1] = lines[1].replace("DHI (W/m^2)", "DHX (W/m^2)")
    (p,) = problems(write_lines(tmp_path / "nodhi.csv", lines))
    assert p.column == "DHI (W/m^2)" and "missing" in p.message


def test_oversized_file_refused_before_parsing(tmp_path, monkeypatch):
    import allocator.weather as weather
    monkeypatch.setattr(weather, "MAX_WEATHER_FILE_MB", 1.0)  # the file is ~1.7 MB
    (p,) = problems(GREENSBORO)
    assert "over the 1 MB limit" in p.message


def test_not_a_weather_file(tmp_path):
    (p,) = problems(write_lines(tmp_path / "loads.csv", ["timestamp,feeder_id,mw",
                                                         "2023-01-01 00:00,F1,1.0"]))
    assert p.row == 2 and "TMY3" in p.message
    (p,) = problems(write_lines(tmp_path / "notes.txt", ["hello", "world"]))
    assert "not a TMY3 CSV or EPW" in p.message
    (p,) = problems(write_lines(tmp_path / "x.epw", ["hello", "world"]))
    assert p.row == 1 and "LOCATION" in p.message


def test_epw_missing_marker_and_duplicate_hour(tmp_path):
    def spoil(lines):
        lines[8 + 10] = set_field(lines[8 + 10], 14, "9999")  # DNI of the 11th record
        lines[8 + 20] = lines[8 + 19]  # the 21st record repeats the 20th hour
    probs = problems(write_epw(tmp_path / "bad.epw", GREENSBORO, spoil))
    found = {(p.row, p.column) for p in probs}
    assert (19, "field 15 (direct normal radiation)") in found
    assert any(p.row == 29 and "appears twice" in p.message for p in probs)
    assert any("have no record" in p.message and "01-01 20:00-21:00" in p.message
               for p in probs)
