"""Per-unit PV from a weather year (TMY3 or EPW irradiance file) on the study calendar.

Clear-sky PV (:mod:`allocator.solar`) tests a block's minimum only; a weather year shows
what clouds do to netted demand (they raise it, and with it the share of blocks that carry
little PV).  This module reads an hourly irradiance file,
transposes it onto a fixed plane at the *file's* site and time, and lays the hourly values
onto the study's intervals.  Everything here is a pure function; pvlib is imported inside
the functions so the command line starts quickly.

File conventions (checked against pvlib 0.16 and the files it ships):

- TMY3 (``pvlib.iotools.read_tmy3``, ``map_variables=True``): columns ``ghi``, ``dni``,
  ``dhi`` (renamed from ``GHI (W/m^2)`` etc.), hourly energy in Wh/m², which is numerically
  the mean irradiance of the hour in W/m².  The index is time-zone aware at the file's fixed
  UTC offset (metadata ``TZ``), local *standard* time, and labels the *end* of the hour:
  the record ``01/01 01:00`` covers 00:00-01:00 and ``12/31 24:00`` becomes 1 January
  00:00 of the following year.  The years differ from month to month (each month of a TMY
  comes from its own year).  The index is wrong by a day for "02/28 24:00" when February
  comes from a leap year (it becomes 1 March 00:00), so record times are built here from
  the file's own ``Date (MM/DD/YYYY)`` and ``Time (HH:MM)`` columns, which pvlib keeps.
- EPW (``pvlib.iotools.read_epw``): the file's ``hour`` field runs 1-24 and also labels
  the end of the hour, but pvlib builds its index from ``hour - 1``, so there the index
  labels the *start* of the hour.  Same column names, fixed UTC offset from ``TZ``.
- ``coerce_year`` is not used: the sun is computed in each record's own year (the year the
  irradiance was observed), and the study calendar is matched by month, day and hour only.

A file must hold one record for every hour of one year: 8760 records (a TMY3 or a typical
EPW year has no 29 February), or 8784 when all 24 hours of 29 February are there too (files
of an actual leap year).  Month, day and hour come from the file's own date and time fields
(pvlib's TMY3 index puts some records a day late, see ``_load_tmy3``).

Calendar mapping (:func:`study_record_index`):

1. Each study interval start is converted to the study zone's local *standard* time: the
   zone's smallest UTC offset during the study intervals (its winter offset), used all year,
   so DST does not shift the sun by an hour.  The minimum rather than "offset minus DST"
   because some zones (Europe/Dublin) carry a negative DST in winter in the tz database.
2. The interval starting at local standard time h:mm takes the record covering h..h+1 of
   the same month and day; hourly values are held over finer intervals.  (In a zone whose
   DST is not a whole hour, e.g. Australia/Lord_Howe, an hourly interval then starts at
   h:30 standard time in summer and takes record h whole.)
3. Month and day are matched regardless of year (a TMY is a typical year): the first and
   last intervals of a local year may fall on 31 December / 1 January of the neighbouring
   years in local standard time (southern-hemisphere zones in DST on 1 January).
4. 29 February of a leap study year takes the file's 29 February if it has one, else the
   records of 28 February.  A file's 29 February is unused in a non-leap study year.

The file's site should be near the study site: :func:`site_distance_km` lets the caller warn
when it is far (e.g. over 200 km), and ``WeatherYear.utc_offset_h`` can be compared with
:func:`zone_standard_offset` to warn when the file keeps another standard time.  The results are POA / 1000 W/m² *before* the study's
``pv_derate`` and any PV scale: the caller applies those, as for clear sky.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import Collector
from .solar import STC_IRRADIANCE_W_PER_M2

#: records in a non-leap / leap year of hourly data
HOURS_PER_YEAR = 8760
HOURS_PER_LEAP_YEAR = 8784
#: at most this many rows are listed one by one per column and kind of problem
MAX_LISTED = 50
#: an hourly mean above this cannot be real: the extraterrestrial normal irradiance is at
#: most about 1412 W/m² (solar constant 1361 W/m², Kopp & Lean, GRL 38, 2011, × 1.034 at
#: perihelion; from memory); EPW files write 9999 for a missing value
MAX_IRRADIANCE_W_PER_M2 = 1500.0
#: weather files are refused above this size before parsing (a TMY3 or EPW year is ~1.7 MB)
MAX_WEATHER_FILE_MB = 50.0
#: ground reflectance for the ground-reflected part of a tilted plane (common practice,
#: no source: 0.2 for grass and typical surroundings)
GROUND_ALBEDO = 0.2
#: mean Earth radius R1 = (2a + b) / 3 of GRS80, km (Moritz, Geodetic Reference System
#: 1980, Journal of Geodesy 74, 2000)
MEAN_EARTH_RADIUS_KM = 6371.0088

#: (file format) → how its columns are named in messages, and the line of its first record
_COLUMNS = {
    "tmy3": {"ghi": "GHI (W/m^2)", "dni": "DNI (W/m^2)", "dhi": "DHI (W/m^2)"},
    "epw": {"ghi": "field 14 (global horizontal radiation)",
            "dni": "field 15 (direct normal radiation)",
            "dhi": "field 16 (diffuse horizontal radiation)"},
}
_FIRST_LINE = {"tmy3": 3, "epw": 9}  # TMY3: 2 header lines; EPW: 8 header lines
_TMY3_HEADER = "Date (MM/DD/YYYY),Time (HH:MM)"
_TIME_COLUMN = {"tmy3": "Time (HH:MM)", "epw": "field 4 (hour)"}


@dataclass(frozen=True, eq=False)
class WeatherYear:
    """One hourly weather year as read from a file.  Arrays are ``[record]`` in file order.

    ``month``, ``day`` and ``hour`` (0-23) are the local-standard-time date and start hour of
    the hour each record covers; ``start_times`` are those starts as instants at the file's
    fixed UTC offset, in the year each record was observed.  Irradiance values are the mean
    of the hour, W/m² (numerically the file's Wh/m²).
    """

    path: str
    file_format: str  # "tmy3" | "epw"
    site_name: str
    latitude_deg: float
    longitude_deg: float
    altitude_m: float
    utc_offset_h: float  # offset of the file's standard time from UTC, hours (east positive)
    n_records: int
    month: np.ndarray  # [record] 1-12
    day: np.ndarray  # [record] 1-31
    hour: np.ndarray  # [record] 0-23, start of the covered hour
    start_times: pd.DatetimeIndex  # [record] start of the covered hour
    ghi_w_per_m2: np.ndarray  # [record] global horizontal
    dni_w_per_m2: np.ndarray  # [record] direct normal
    dhi_w_per_m2: np.ndarray  # [record] diffuse horizontal

    @property
    def has_feb29(self) -> bool:
        return bool(np.any((self.month == 2) & (self.day == 29)))


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------
def read_weather(path) -> WeatherYear:
    """Read a TMY3 CSV or EPW irradiance file into a :class:`WeatherYear`.

    ``.epw`` files are read as EPW and ``.csv`` files as TMY3; any other name is recognised
    by its content (EPW line 1 starts with ``LOCATION``; TMY3 line 2 with
    ``Date (MM/DD/YYYY)``).  Raises :class:`~allocator.errors.InputError` listing every
    problem found (file, line, column, what was expected): file not found or unreadable, over
    :data:`MAX_WEATHER_FILE_MB`, not a TMY3/EPW file, irradiance columns missing, values that
    are not finite numbers in 0-1500 W/m², records that are not one per hour of a whole year
    (8760, or 8784 with all of 29 February).  Only local files are read (pvlib's EPW reader
    would fetch a URL; a URL here is "file not found").
    """
    path_s = str(path)
    col = Collector(path_s)
    p = Path(path)
    if not p.is_file():
        col.add("file not found" if not p.exists() else "is not a file (expected a TMY3 "
                "CSV or EPW weather file)")
        col.raise_if_any()
    size_mb = p.stat().st_size / 1048576
    if size_mb > MAX_WEATHER_FILE_MB:
        col.add(f"file is {size_mb:.3g} MB, over the {MAX_WEATHER_FILE_MB:g} MB limit for a "
                "weather file (one hourly year is about 1.7 MB); refused before parsing")
        col.raise_if_any()
    fmt = _detect_format(p, col)
    col.raise_if_any()
    loaded = _load_tmy3(p, col) if fmt == "tmy3" else _load_epw(p, col)
    col.raise_if_any()
    df, meta, start = loaded
    arrays = {k: _irradiance(df, k, fmt, col) for k in ("ghi", "dni", "dhi")}
    _check_site(meta, col)
    _check_records(start, fmt, col)
    col.raise_if_any()
    month = start.month.to_numpy(dtype=np.int64)
    day = start.day.to_numpy(dtype=np.int64)
    hour = start.hour.to_numpy(dtype=np.int64)
    for a in (month, day, hour, *arrays.values()):
        a.setflags(write=False)
    return WeatherYear(
        path_s, fmt, _site_name(meta, fmt), float(meta["latitude"]),
        float(meta["longitude"]), float(meta["altitude"]), float(meta["TZ"]), len(start),
        month, day, hour, start, arrays["ghi"], arrays["dni"], arrays["dhi"])


def _detect_format(p: Path, col: Collector) -> str | None:
    """"tmy3" or "epw" from the extension, else the first two lines; a problem if neither."""
    try:
        with p.open("r", encoding="utf-8", errors="replace") as fh:
            first, second = fh.readline(), fh.readline()
    except OSError as exc:
        col.add(f"could not be read: {exc.strerror or exc}")
        return None
    ext = p.suffix.lower()
    fmt = {".epw": "epw", ".csv": "tmy3"}.get(ext)
    if fmt is None:
        fmt = ("epw" if first.upper().startswith("LOCATION") else
               "tmy3" if second.startswith(_TMY3_HEADER) else None)
    if fmt is None:
        col.add("not a TMY3 CSV or EPW weather file (expected a .csv file whose line 2 starts "
                f"'{_TMY3_HEADER}', or a .epw file whose line 1 starts 'LOCATION')")
    elif fmt == "tmy3" and not second.startswith(_TMY3_HEADER):
        col.add(f"not readable as TMY3: expected the column header '{_TMY3_HEADER},...' "
                "on line 2 (line 1 holds the site: USAF, name, state, TZ, latitude, "
                "longitude, elevation)", row=2)
    elif fmt == "epw" and not first.upper().startswith("LOCATION"):
        col.add("not readable as EPW: expected line 1 to start with 'LOCATION'", row=1)
    return fmt


def _load_tmy3(p: Path, col: Collector):
    """pvlib's TMY3 reader; returns (data, metadata, start of each record's hour).

    The starts come from the file's own date and time columns, not from pvlib's index: the
    reader moves dates that land on 29 February to 1 March *after* turning 24:00 into the
    next day, so in a February taken from a leap year the record "02/28 24:00" is labelled
    1 March 00:00, a day late (pvlib 0.16), and a real 29 February would collide with 1 March.
    """
    import pvlib

    try:
        with warnings.catch_warnings():  # text in a number column: reported below, per line
            warnings.simplefilter("ignore", pd.errors.DtypeWarning)
            df, meta = pvlib.iotools.read_tmy3(p, map_variables=True)
        if len(df) == 0:
            col.add("holds no hourly records (expected 8760 after the two header lines)")
            return None
        date = pd.to_datetime(df["Date (MM/DD/YYYY)"], format="%m/%d/%Y")
        hh_mm = df["Time (HH:MM)"].astype(str).str.split(":", n=1, expand=True).astype(int)
        # the time labels the end of the hour (01:00 covers 00:00-01:00; 24:00 the last one)
        start = date + pd.to_timedelta(hh_mm[0] - 1, unit="h") \
            + pd.to_timedelta(hh_mm[1], unit="min")
    except (ValueError, KeyError, IndexError, TypeError, UnicodeDecodeError,
            pd.errors.ParserError) as exc:
        col.add(f"not readable as TMY3 (pvlib: {_short(exc)})")
        return None
    return df, meta, pd.DatetimeIndex(start).tz_localize(df.index.tz)


def _load_epw(p: Path, col: Collector):
    """pvlib's EPW reader; returns (data, metadata, start of each record's hour)."""
    import pvlib

    try:
        df, meta = pvlib.iotools.read_epw(p)
    except (ValueError, KeyError, IndexError, TypeError, UnicodeDecodeError,
            pd.errors.ParserError) as exc:
        col.add(f"not readable as EPW (pvlib: {_short(exc)})")
        return None
    if len(df) == 0:
        col.add("holds no hourly records (expected 8760 after the eight header lines)")
        return None
    return df, meta, df.index  # pvlib builds the index from hour - 1: the start of the hour


def _short(exc: Exception) -> str:
    text = str(exc).strip().splitlines()
    return (text[0] if text else type(exc).__name__)[:200]


def _irradiance(df: pd.DataFrame, key: str, fmt: str, col: Collector) -> np.ndarray:
    """One irradiance column as float W/m²; problems for a missing column and for each row
    whose value is not a finite number in 0..MAX_IRRADIANCE_W_PER_M2."""
    name = _COLUMNS[fmt][key]
    if key not in df.columns:
        col.add(f"irradiance column '{name}' is missing", column=name)
        return np.zeros(0)
    raw = df[key]
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    lines = np.arange(len(values)) + _FIRST_LINE[fmt]
    bad_num = ~np.isfinite(values)
    _list(col, np.flatnonzero(bad_num), lines, name, "no finite number",
          lambda i: f"expected irradiance in W/m² (a number ≥ 0), found "
                    f"{'nothing' if pd.isna(raw.iloc[i]) else repr(str(raw.iloc[i]))}")
    with np.errstate(invalid="ignore"):
        neg = values < 0
        high = values > MAX_IRRADIANCE_W_PER_M2
    _list(col, np.flatnonzero(neg), lines, name, "negative irradiance",
          lambda i: f"irradiance must be ≥ 0 W/m², found {values[i]:g}")
    _list(col, np.flatnonzero(high), lines, name, "irradiance above the limit",
          lambda i: f"irradiance {values[i]:g} W/m² is above {MAX_IRRADIANCE_W_PER_M2:g} "
                    "(no hourly mean can exceed the extraterrestrial value; EPW writes "
                    "9999 for missing)")
    return values


def _list(col: Collector, pos: np.ndarray, lines: np.ndarray, column: str, what: str,
          message) -> None:
    """One problem per listed line (at most MAX_LISTED), then a count of the rest."""
    for i in pos[:MAX_LISTED]:
        col.add(message(int(i)), row=int(lines[i]), column=column)
    if len(pos) > MAX_LISTED:
        col.add(f"... and {len(pos) - MAX_LISTED} more lines with {what}", column=column)


def _check_site(meta: dict, col: Collector) -> None:
    """Latitude, longitude and UTC offset of the file's header within their ranges."""
    for key, lo, hi, what in (("latitude", -90, 90, "degrees north, -90..90"),
                              ("longitude", -180, 180, "degrees east, -180..180"),
                              ("TZ", -12, 14, "hours from UTC, -12..14")):
        v = meta.get(key)
        if not (isinstance(v, (int, float)) and math.isfinite(v) and lo <= v <= hi):
            col.add(f"site {key} in the header is {v!r}; expected {what}", row=1)


def _check_records(start: pd.DatetimeIndex, fmt: str, col: Collector) -> None:
    """One record per hour of one year: 8760, or 8784 with a whole 29 February; on the
    hour; each month/day/hour once."""
    n = len(start)
    if n not in (HOURS_PER_YEAR, HOURS_PER_LEAP_YEAR):
        col.add(f"{n} hourly records; expected {HOURS_PER_YEAR} (one per hour of a year), "
                f"or {HOURS_PER_LEAP_YEAR} for a leap year with 29 February")
    lines = np.arange(n) + _FIRST_LINE[fmt]
    tcol = _TIME_COLUMN[fmt]
    off_hour = start.minute.to_numpy() != 0
    _list(col, np.flatnonzero(off_hour), lines, tcol, "records not on the hour",
          lambda i: "expected hourly records on the hour (HH:00)")
    key = _key(start.month.to_numpy(), start.day.to_numpy(), start.hour.to_numpy())
    first = pd.Index(key).duplicated(keep="first")
    _list(col, np.flatnonzero(first), lines, tcol, "repeated hours",
          lambda i: f"hour {_key_text(key[i])} appears twice")
    expect = _expected_keys(include_feb29=n == HOURS_PER_LEAP_YEAR)
    missing = np.setdiff1d(expect, key)
    if len(missing):
        shown = ", ".join(_key_text(k) for k in missing[:10])
        more = f" and {len(missing) - 10} more" if len(missing) > 10 else ""
        col.add(f"{len(missing)} hour(s) of the year have no record: {shown}{more}",
                column=tcol)


def _key(month, day, hour) -> np.ndarray:
    """Integer key of a local-standard-time hour: ((month × 31) + day − 1) × 24 + hour."""
    return (np.asarray(month, dtype=np.int64) * 31 + np.asarray(day, dtype=np.int64) - 1) \
        * 24 + np.asarray(hour, dtype=np.int64)


def _key_text(k: int) -> str:
    m, rest = divmod(int(k), 744)
    d, h = divmod(rest, 24)
    return f"{m:02d}-{d + 1:02d} {h:02d}:00-{h + 1:02d}:00"


def _expected_keys(include_feb29: bool) -> np.ndarray:
    days = pd.date_range("2024-01-01", "2024-12-31", freq="D")  # a leap year
    if not include_feb29:
        days = days[~((days.month == 2) & (days.day == 29))]
    k = _key(np.repeat(days.month, 24), np.repeat(days.day, 24), np.tile(np.arange(24),
                                                                          len(days)))
    return np.sort(k)


def _site_name(meta: dict, fmt: str) -> str:
    keys = ("Name", "State") if fmt == "tmy3" else ("city", "state-prov", "country")
    parts = [str(meta.get(k, "")).strip().strip('"').strip() for k in keys]
    return ", ".join(x for x in parts if x and x != "-")


# --------------------------------------------------------------------------------------------
# plane of array
# --------------------------------------------------------------------------------------------
def equator_facing_azimuth_deg(latitude_deg: float) -> float:
    """Azimuth of an equator-facing plane, degrees clockwise from north: 180 (south) for a
    site at or north of the equator, 0 (north) for a southern-hemisphere site."""
    return 180.0 if latitude_deg >= 0 else 0.0


def record_midpoints_utc(weather: WeatherYear) -> pd.DatetimeIndex:
    """``[record]`` the middle of the hour each record covers, UTC (file's own years)."""
    return (weather.start_times + pd.Timedelta(minutes=30)).tz_convert("UTC")


def plane_of_array_w_per_m2(weather: WeatherYear, tilt_deg: float = 0.0,
                            azimuth_deg: float | None = None, *,
                            albedo: float = GROUND_ALBEDO) -> np.ndarray:
    """``[record]`` mean global irradiance on a fixed plane over each record's hour, W/m².

    ``tilt_deg`` from horizontal (0-90), ``azimuth_deg`` clockwise from north (None =
    equator-facing, :func:`equator_facing_azimuth_deg`).  A flat plane (tilt 0) returns the
    file's GHI itself, so no transposition artefact (the file's DNI·cos z + DHI rarely
    closes on its GHI exactly) can change the annual sum.

    A tilted plane uses the Hay-Davies model (Hay & Davies, "Calculations of the solar
    radiation incident on an inclined surface", Proc. First Canadian Solar Radiation Data
    Workshop, 1980) through :func:`pvlib.irradiance.get_total_irradiance`: beam
    DNI·cos(AOI), sky diffuse split by the anisotropy index DNI/DNI_extra into a circumsolar
    part that follows the beam and an isotropic part, and ground reflection
    GHI·albedo·(1 − cos β)/2.  Chosen over the isotropic sky (Liu & Jordan 1963), which
    ignores circumsolar brightening and so under-rates a sun-facing plane on clear days, and
    over Perez (1990), which needs air mass and empirical coefficient tables for a small
    further gain; Loutzenhiser et al. (Solar Energy 81, 2007) found Hay-Davies among the
    better simple models (from memory).  DNI_extra from
    :func:`pvlib.irradiance.get_extra_radiation` (Spencer 1971).

    The sun is computed with pvlib's NREL SPA at the file's site and altitude for the middle
    of each record's hour.  When the sun is below the horizon there, the record's DNI is
    taken as 0 (no beam, no circumsolar part); the diffuse and reflected parts of the
    file's light in that hour remain.  Negative results are clipped to 0.
    """
    if not 0.0 <= tilt_deg <= 90.0:
        raise ValueError(f"tilt_deg must be 0..90, got {tilt_deg!r}")
    if tilt_deg == 0.0:
        return np.asarray(weather.ghi_w_per_m2, dtype=float).copy()
    import pvlib

    az = equator_facing_azimuth_deg(weather.latitude_deg) if azimuth_deg is None \
        else float(azimuth_deg)
    mid = record_midpoints_utc(weather)
    pos = pvlib.solarposition.get_solarposition(mid, weather.latitude_deg,
                                                weather.longitude_deg,
                                                altitude=weather.altitude_m,
                                                method="nrel_numpy")
    zenith = pos["apparent_zenith"].to_numpy(dtype=float)
    up = pos["apparent_elevation"].to_numpy(dtype=float) > 0.0
    # day of year rather than the instants: the same Spencer value without pvlib's call of
    # the deprecated DatetimeIndex.dayofyear (a warning under pandas 3)
    dni_extra = np.asarray(pvlib.irradiance.get_extra_radiation(
        mid.day_of_year.to_numpy()), dtype=float)
    total = pvlib.irradiance.get_total_irradiance(
        tilt_deg, az, zenith, pos["azimuth"].to_numpy(dtype=float),
        np.where(up, weather.dni_w_per_m2, 0.0), weather.ghi_w_per_m2, weather.dhi_w_per_m2,
        dni_extra=dni_extra, albedo=albedo, model="haydavies")
    poa = np.nan_to_num(np.asarray(total["poa_global"], dtype=float))
    return np.maximum(poa, 0.0)


# --------------------------------------------------------------------------------------------
# study calendar
# --------------------------------------------------------------------------------------------
def zone_standard_offset(timestamps_utc: pd.DatetimeIndex, timezone: str) -> pd.Timedelta:
    """The zone's local standard time offset from UTC: its smallest UTC offset during the
    given instants (the winter offset; see the module docstring)."""
    utc = timestamps_utc.tz_convert("UTC")
    wall = utc.tz_convert(timezone).tz_localize(None)
    return (wall - utc.tz_localize(None)).min()


def study_record_index(weather: WeatherYear, timestamps_utc: pd.DatetimeIndex,
                       timezone: str) -> np.ndarray:
    """``[interval]`` index of the file record each study interval takes.

    Interval starts are put in the zone's local standard time
    (:func:`zone_standard_offset`); the start h:mm on month/day takes the record covering
    h..h+1 of that month/day, any year; 29 February falls back on 28 February when the file
    has none.  Vectorized lookup through a (month, day, hour) table.
    """
    utc = timestamps_utc.tz_convert("UTC")
    if len(utc) == 0:
        return np.zeros(0, dtype=np.intp)
    lst = utc.tz_localize(None) + zone_standard_offset(utc, timezone)
    table = np.full(13 * 31 * 24, -1, dtype=np.intp)
    table[_key(weather.month, weather.day, weather.hour)] = np.arange(weather.n_records)
    feb29 = _key(2, 29, np.arange(24))
    if not weather.has_feb29:
        table[feb29] = table[_key(2, 28, np.arange(24))]
    idx = table[_key(lst.month.to_numpy(), lst.day.to_numpy(), lst.hour.to_numpy())]
    if np.any(idx < 0):  # a WeatherYear from read_weather covers every hour
        raise ValueError("the weather year has no record for some study hours")
    return idx


def weather_pv_pu(weather: WeatherYear, timestamps_utc: pd.DatetimeIndex, timezone: str,
                  interval_minutes: int, tilt_deg: float = 0.0,
                  azimuth_deg: float | None = None) -> np.ndarray:
    """``[interval]`` per-unit PV from the weather year on the study calendar.

    Per unit of installed capacity: plane-of-array irradiance
    (:func:`plane_of_array_w_per_m2`) / 1000 W/m² (STC), the record's hourly mean held over
    each interval of that hour (:func:`study_record_index` gives the mapping).
    ``timestamps_utc`` are the study's interval starts (as
    :func:`allocator.year.study_intervals` makes them), ``interval_minutes`` a divisor of 60.
    The study's ``pv_derate`` and any PV scale are *not* applied: the caller applies them,
    as for clear-sky PV.
    """
    if timestamps_utc.tz is None:
        raise ValueError("timestamps_utc must be time-zone aware (UTC)")
    if interval_minutes <= 0 or 60 % interval_minutes:
        raise ValueError(f"interval_minutes must divide 60, got {interval_minutes!r}")
    step = np.diff(timestamps_utc.as_unit("ns").asi8)
    if np.any(step != interval_minutes * 60_000_000_000):
        raise ValueError(f"timestamps_utc are not spaced {interval_minutes} minutes apart")
    idx = study_record_index(weather, timestamps_utc, timezone)
    poa = plane_of_array_w_per_m2(weather, tilt_deg, azimuth_deg)
    return poa[idx] / STC_IRRADIANCE_W_PER_M2


def site_distance_km(weather: WeatherYear, latitude_deg: float, longitude_deg: float) -> float:
    """Great-circle distance from the weather file's site to a point, km.

    Haversine formula (Sinnott, "Virtues of the haversine", Sky and Telescope 68(2), 1984)
    on a sphere of the mean Earth radius :data:`MEAN_EARTH_RADIUS_KM`:
    d = 2R·asin(√(sin²(Δφ/2) + cos φ1·cos φ2·sin²(Δλ/2))).
    """
    p1, p2 = math.radians(weather.latitude_deg), math.radians(latitude_deg)
    dp = p2 - p1
    dl = math.radians(longitude_deg - weather.longitude_deg)
    h = math.sin(dp / 2) ** 2 + math.cos(p1) * math.cos(p2) * math.sin(dl / 2) ** 2
    return 2.0 * MEAN_EARTH_RADIUS_KM * math.asin(min(1.0, math.sqrt(h)))


__all__ = ["WeatherYear", "read_weather", "plane_of_array_w_per_m2", "weather_pv_pu",
           "study_record_index", "zone_standard_offset", "record_midpoints_utc",
           "equator_facing_azimuth_deg", "site_distance_km", "HOURS_PER_YEAR",
           "HOURS_PER_LEAP_YEAR", "GROUND_ALBEDO", "MEAN_EARTH_RADIUS_KM"]
