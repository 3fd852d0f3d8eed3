"""Metered per-feeder net load: read a long-format file and merge it into the study year.

Input file (CSV, ``.csv.gz`` or Parquet), one reading per row::

    timestamp,feeder_id,mw
    2025-01-01T00:00:00+01:00,F01,3.42
    2025-01-01T00:00:00+01:00,TOTAL,51.7

* ``mw`` is net MW for the interval *starting* at ``timestamp`` (export negative).
* ``feeder_id`` is a feeder of the study, or ``TOTAL`` for the system demand series used when
  ``demand_basis`` is ``metered_total``.
* ``timestamp`` is ISO 8601 with a UTC offset (``+02:00``, ``+0200`` or ``Z``), or local
  wall-clock time in the study time zone without an offset; a file uses one form throughout.
  Local times in the hour skipped in spring do not exist and are an error; in the repeated
  autumn hour the first reading of a feeder at a given local time is summer time, the second
  standard time.

Alignment to the study intervals, per feeder (its resolution is the median spacing of its
readings):

* finer than the study interval: every reading counts in the interval its start falls in, and
  the interval takes the mean of the readings present;
* equal or coarser: readings must start on a study interval boundary and are held over the
  intervals they cover, up to the next reading or one resolution step, whichever comes first.
  Steps of whole days are counted in local days, so a daily reading covers 23 or 25 hours on
  the DST change days.

Readings whose intervals lie entirely outside the study year are ignored (with a note).

Out-of-range rule (a plausibility rule of this tool, not taken from a standard): a reading is
out of range when ``mw > 1.5 × peak_mw + 0.1`` or ``mw < −(1.5 × pv_mw + 0.1)``: a feeder's net
load should not exceed its peak gross load by half, nor its export its installed PV by half;
the 0.1 MW margin keeps very small feeders from being flagged for meter noise.
"""

from __future__ import annotations

import gzip
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .domain import Study
from .errors import Collector, InputError, Problem
from .timefmt import iso_local
from .year import FeederFlag

DEFAULT_MAX_METERED_MB = 500
TOTAL_ID = "TOTAL"
REQUIRED_COLUMNS = ("timestamp", "feeder_id", "mw")
#: problems of one kind listed before the rest are only counted
MAX_LISTED = 50
#: identical readings over at least this long flag a feeder as flat-lined
FLAT_LINE_MIN_H = 24.0
#: out-of-range rule, see the module docstring
RANGE_FACTOR = 1.5
RANGE_MARGIN_MW = 0.1
#: gap windows named per feeder in a gap_fill = error listing
MAX_WINDOWS_LISTED = 5

_NS_PER_MIN = 60 * 10**9
_NS_PER_H = 60 * _NS_PER_MIN
_NS_PER_DAY = 24 * _NS_PER_H
_NAT = np.iinfo(np.int64).min
# a time of day followed by a UTC offset or Z at the end of the string
_OFFSET_RE = r"\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)$"
_EXAMPLE = "e.g. 2025-03-30T03:00:00+02:00, 2025-03-30T01:00:00Z or local 2025-03-30 03:00"


@dataclass(frozen=True)
class MeteredData:
    """Metered readings aligned to the study intervals.

    ``values_mw[feeder, interval]`` in the study's feeder order, NaN where no reading;
    ``total_mw[interval]`` from the TOTAL rows (None when the file has none in the year);
    ``has_data[feeder]``: the feeder has at least one reading in the year.
    ``reading_stats`` (one row per feeder id plus TOTAL) summarises the raw readings for the
    data-quality flags: ``n_readings``, ``min_mw``, ``max_mw``, ``n_high``, ``n_low``
    (out-of-range counts), ``flat_h``, ``flat_mw``, ``flat_start_ns`` (longest run of
    identical readings).
    """

    file: str
    feeder_ids: tuple[str, ...]
    values_mw: np.ndarray
    total_mw: np.ndarray | None
    has_data: np.ndarray
    timestamps_utc: pd.DatetimeIndex | None = None
    interval_minutes: int | None = None
    notes: tuple[str, ...] = ()
    reading_stats: pd.DataFrame | None = None

    @property
    def n_feeders_with_data(self) -> int:
        return int(np.count_nonzero(self.has_data))


# --------------------------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------------------------
def max_metered_bytes() -> tuple[int, float]:
    """(limit in bytes, limit in MB): ``UFLS_MAX_METERED_MB`` or 500 MB."""
    raw = os.environ.get("UFLS_MAX_METERED_MB")
    mb = float(raw) if raw not in (None, "") else float(DEFAULT_MAX_METERED_MB)
    if not 0 < mb < float("inf"):  # also NaN; inf would overflow int()
        raise ValueError(f"UFLS_MAX_METERED_MB={raw!r} is not a positive number")
    return int(mb * 1024 * 1024), mb


def _ns(idx: pd.DatetimeIndex) -> np.ndarray:
    """int64 nanoseconds since the epoch (UTC) of a tz-aware index."""
    return idx.tz_convert("UTC").as_unit("ns").asi8


def _local_text(t_ns: np.ndarray, tz: str) -> np.ndarray:
    """ISO 8601 local time with its UTC offset of UTC nanosecond instants (the one time
    format of every output, :func:`allocator.timefmt.iso_local`)."""
    idx = pd.DatetimeIndex(np.asarray(t_ns, dtype="datetime64[ns]")).tz_localize("UTC")
    return np.asarray(iso_local(idx, tz), dtype=object)


def _fmt_minutes(ns: float) -> str:
    m = ns / _NS_PER_MIN
    if m >= 1440 and m % 1440 == 0:
        d = int(m // 1440)
        return f"{d} day{'s' if d != 1 else ''}"
    if m >= 60 and m % 60 == 0:
        return f"{int(m // 60)} h"
    return f"{m:g} min"


def _names(ids: list[str], n: int = 5) -> str:
    head = ", ".join(ids[:n])
    return head + (f" and {len(ids) - n} more" if len(ids) > n else "")


def _list_rows(col: Collector, pos: np.ndarray, line: np.ndarray, column: str, what: str,
               message) -> None:
    """One problem per listed row (at most MAX_LISTED), then a count of the rest."""
    for i in pos[:MAX_LISTED]:
        col.add(message(int(i)), row=int(line[i]), column=column)
    if len(pos) > MAX_LISTED:
        col.add(f"... and {len(pos) - MAX_LISTED} more lines with {what}", column=column)


# --------------------------------------------------------------------------------------------
# loading
# --------------------------------------------------------------------------------------------
def _kind(p: Path) -> str | None:
    name = p.name.lower()
    if name.endswith(".csv") or name.endswith(".csv.gz"):
        return "csv"
    if name.endswith(".parquet"):
        return "parquet"
    return None


def _sniff_sep(p: Path) -> str:
    opener = gzip.open if p.name.lower().endswith(".gz") else open
    with opener(p, "rt", encoding="utf-8-sig", errors="replace") as fh:
        head = fh.readline()
    return ";" if ";" in head and "," not in head else ","


def _load(p: Path, col: Collector) -> tuple[pd.DataFrame, np.ndarray, str]:
    """The file as a DataFrame (column names stripped, lower case), line numbers, separator."""
    kind = _kind(p)
    sep = ","
    try:
        if kind == "parquet":
            df = pd.read_parquet(p)
        else:
            sep = _sniff_sep(p)
            opts = dict(sep=sep, keep_default_na=False, skip_blank_lines=False,
                        encoding="utf-8-sig", low_memory=False, decimal="," if sep == ";"
                        else ".")
            head = pd.read_csv(p, nrows=0, **opts).columns
            # every column as text, except mw: the C parser reads clean numbers fastest and
            # leaves the column as text when any value is not a number
            dtype = {c: str for c in head if str(c).strip().lower() != "mw"}
            df = pd.read_csv(p, dtype=dtype, **opts)
    except ImportError:
        col.add("reading Parquet needs the pyarrow package (pip install pyarrow), or give the "
                "readings as CSV")
        col.raise_if_any()
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError, OSError,
            EOFError, ValueError) as exc:
        col.add(f"cannot read the file as {'Parquet' if kind == 'parquet' else 'CSV'}: "
                f"{str(exc).strip() or type(exc).__name__}")
        col.raise_if_any()
    df.columns = [str(c).strip().lower() for c in df.columns]
    # line number as the user sees it: header = 1 (for Parquet: record number + 1)
    line = np.arange(len(df), dtype=np.int64) + 2
    if kind == "csv" and len(df):
        blank = np.ones(len(df), dtype=bool)
        for c in df.columns:
            blank &= (df[c].fillna("").astype(str).str.strip() == "").to_numpy()
        if blank.any():
            df, line = df.loc[~blank].reset_index(drop=True), line[~blank]
    return df, line, sep


# --------------------------------------------------------------------------------------------
# timestamps
# --------------------------------------------------------------------------------------------
@dataclass
class _Times:
    text: np.ndarray  # object, as written (for messages)
    form: np.ndarray  # int8: 0 unparseable, 1 UTC offset, 2 naive local
    utc_ns: np.ndarray  # int64; _NAT where unknown
    naive_ns: np.ndarray  # int64 naive local wall clock (form 2 only), else _NAT
    dst_ns: np.ndarray  # int64 UTC if read as summer time (form 2), _NAT if nonexistent
    std_ns: np.ndarray  # int64 UTC if read as standard time (form 2)


def _in_ns_range(d) -> np.ndarray:
    """True where a parsed time fits int64 nanoseconds with a margin (years 1678..2261):
    pandas parses wider dates at a coarser unit, which cannot be converted."""
    lo, hi = pd.Timestamp("1678-01-01"), pd.Timestamp("2261-12-31")
    if getattr(d.dtype, "tz", None) is not None:
        lo, hi = lo.tz_localize("UTC"), hi.tz_localize("UTC")
    return np.asarray(d.notna() & (d >= lo) & (d <= hi), dtype=bool)


def _parse_times(s: pd.Series, tz: str) -> _Times:
    n = len(s)
    form = np.zeros(n, dtype=np.int8)
    utc = np.full(n, _NAT, dtype=np.int64)
    naive = np.full(n, _NAT, dtype=np.int64)
    if isinstance(s.dtype, pd.DatetimeTZDtype):
        text = np.asarray(s.astype(str), dtype=object)
        ok = _in_ns_range(s)
        form[ok] = 1
        utc[ok] = _ns(pd.DatetimeIndex(s[ok]))
    elif pd.api.types.is_datetime64_dtype(s.dtype):
        text = np.asarray(s.astype(str), dtype=object)
        ok = _in_ns_range(s)
        form[ok] = 2
        naive[ok] = pd.DatetimeIndex(s[ok]).as_unit("ns").asi8
    else:
        txt = s.fillna("").astype(str).str.strip()
        text = np.asarray(txt, dtype=object)
        # parse each distinct text once: files repeat every timestamp for every feeder
        codes, uniq = pd.factorize(txt)
        u = pd.Series(np.asarray(uniq, dtype=object), dtype=object)
        has_off = u.str.contains(_OFFSET_RE, regex=True).to_numpy()
        u_form = np.zeros(len(u), dtype=np.int8)
        u_utc = np.full(len(u), _NAT, dtype=np.int64)
        u_naive = np.full(len(u), _NAT, dtype=np.int64)
        if has_off.any():
            d = pd.to_datetime(u[has_off], format="ISO8601", utc=True, errors="coerce")
            good = _in_ns_range(d)
            sel = np.flatnonzero(has_off)[good]
            u_utc[sel] = _ns(pd.DatetimeIndex(d[good]))
            u_form[sel] = 1
        if (~has_off).any():
            d = pd.to_datetime(u[~has_off], format="ISO8601", errors="coerce")
            good = _in_ns_range(d)
            sel = np.flatnonzero(~has_off)[good]
            u_naive[sel] = pd.DatetimeIndex(d[good]).as_unit("ns").asi8
            u_form[sel] = 2
        form, utc, naive = u_form[codes], u_utc[codes], u_naive[codes]
    dst = np.full(n, _NAT, dtype=np.int64)
    std = np.full(n, _NAT, dtype=np.int64)
    nv = form == 2
    if nv.any():
        # localise each distinct wall-clock time twice: as summer time and as standard time
        codes, uniq = pd.factorize(naive[nv])
        loc = pd.DatetimeIndex(np.asarray(uniq, dtype="datetime64[ns]"))
        a = loc.tz_localize(tz, ambiguous=np.ones(len(loc), dtype=bool), nonexistent="NaT")
        b = loc.tz_localize(tz, ambiguous=np.zeros(len(loc), dtype=bool), nonexistent="NaT")
        a_ns = np.where(a.isna(), _NAT, a.as_unit("ns").asi8)
        b_ns = np.where(b.isna(), _NAT, b.as_unit("ns").asi8)
        dst[nv], std[nv] = a_ns[codes], b_ns[codes]
    return _Times(text, form, utc, naive, dst, std)


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------
def read_metered(path: str | os.PathLike, study: Study,
                 timestamps_utc: pd.DatetimeIndex) -> MeteredData:
    """Read, validate and align a metered file to ``timestamps_utc`` (the study intervals).

    Raises :class:`~allocator.errors.InputError` listing every problem found in the file.
    """
    p = Path(path)
    file = str(p)
    col = Collector(file)
    s = study.settings
    tz = s.timezone
    if not p.exists():
        col.add("metered file not found")
        col.raise_if_any()
    if p.is_dir():
        col.add("is a folder, expected a .csv, .csv.gz or .parquet file")
        col.raise_if_any()
    if _kind(p) is None:
        col.add("unknown file type: expected a .csv, .csv.gz or .parquet file")
        col.raise_if_any()
    try:
        limit_b, limit_mb = max_metered_bytes()
    except ValueError:
        col.add(f"UFLS_MAX_METERED_MB='{os.environ.get('UFLS_MAX_METERED_MB')}' is not a "
                "positive number of megabytes")
        col.raise_if_any()
    size = p.stat().st_size
    if size > limit_b:
        col.add(f"file is {size / 1024 / 1024:.3g} MB, above the {limit_mb:g} MB limit for "
                "metered files; set the environment variable UFLS_MAX_METERED_MB to raise it")
        col.raise_if_any()

    df, line, sep = _load(p, col)
    missing = [c for c in REQUIRED_COLUMNS if c not in df.columns]
    for c in missing:
        col.add(f"missing column '{c}' (found: {', '.join(df.columns) or 'none'})", row=1,
                column=c)
    n_rows = len(df)
    fids = study.feeder_ids
    nf = len(fids)

    # ---- feeder ids: 0..nf-1 study feeders, nf = TOTAL, -1 blank/unknown -----------------
    code = np.full(n_rows, -1, dtype=np.int64)
    fid_text = np.full(n_rows, "", dtype=object)
    if "feeder_id" in df.columns:
        f = df["feeder_id"].fillna("").astype(str).str.strip()
        fid_text = np.asarray(f, dtype=object)
        code = pd.Index(fids).get_indexer(f).astype(np.int64)
        code[(f.str.upper() == TOTAL_ID).to_numpy() & (code < 0)] = nf
        blank = (f == "").to_numpy()
        _list_rows(col, np.flatnonzero(blank), line, "feeder_id", "a blank feeder_id",
                   lambda i: "feeder_id is blank")
        unk = (code < 0) & ~blank
        if unk.any():
            g = (pd.DataFrame({"id": fid_text[unk], "line": line[unk]})
                 .groupby("id", sort=False)["line"].agg(["first", "size"])
                 .sort_values("first"))
            lower = {x.lower(): x for x in fids}
            for fid, first, cnt in list(g.itertuples())[:MAX_LISTED]:
                hint = f"; did you mean '{lower[fid.lower()]}'?" if fid.lower() in lower else ""
                more = f" (on {cnt} lines, first shown)" if cnt > 1 else ""
                col.add(f"feeder_id '{fid}' is not a feeder of the study and not "
                        f"{TOTAL_ID}{more}{hint}", row=int(first), column="feeder_id")
            if len(g) > MAX_LISTED:
                col.add(f"... and {len(g) - MAX_LISTED} more unknown feeder ids",
                        column="feeder_id")

    # ---- mw ----------------------------------------------------------------------------
    mw = np.full(n_rows, np.nan)
    mw_ok = np.zeros(n_rows, dtype=bool)
    if "mw" in df.columns:
        m = df["mw"]
        if pd.api.types.is_numeric_dtype(m.dtype) and not pd.api.types.is_bool_dtype(m.dtype):
            mw = m.to_numpy(dtype=float, na_value=np.nan)
            mtxt = None
        else:
            mtxt = m.fillna("").astype(str).str.strip()
            num = mtxt.str.replace(",", ".", regex=False) if sep == ";" else mtxt
            mw = pd.to_numeric(num, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        mw_ok = np.isfinite(mw)
        mt = None if mtxt is None else np.asarray(mtxt, dtype=object)

        def mw_msg(i: int) -> str:
            t = mt[i] if mt is not None else f"{mw[i]}"
            if t == "":
                return "mw is blank (leave the row out where there is no reading)"
            return f"mw '{t}' is not a finite number"

        _list_rows(col, np.flatnonzero(~mw_ok), line, "mw", "a non-numeric or non-finite mw",
                   mw_msg)

    # ---- timestamps --------------------------------------------------------------------
    t = np.full(n_rows, _NAT, dtype=np.int64)
    t_ok = np.zeros(n_rows, dtype=bool)
    amb = np.zeros(n_rows, dtype=bool)
    if "timestamp" in df.columns:
        tm = _parse_times(df["timestamp"], tz)
        txt = tm.text
        bad = tm.form == 0
        _list_rows(col, np.flatnonzero(bad), line, "timestamp", "an unreadable timestamp",
                   lambda i: (f"timestamp '{txt[i]}' is not a date and time in ISO 8601 form "
                              f"in the years 1678..2261 ({_EXAMPLE})") if txt[i]
                   else "timestamp is blank")
        parsed = np.flatnonzero(~bad)
        if len(parsed) and (tm.form == 1).any() and (tm.form == 2).any():
            first = parsed[0]
            main = tm.form[first]
            odd = np.flatnonzero((tm.form != main) & ~bad)
            if main == 1:
                what = "is local time without a UTC offset"
                ref = "carries a UTC offset"
            else:
                what = "carries a UTC offset"
                ref = "is local time without an offset"
            _list_rows(col, odd, line, "timestamp", "the other timestamp form",
                       lambda i: (f"timestamp '{txt[i]}' {what}, but the first timestamp "
                                  f"(line {line[first]}) {ref}; a file must use one form "
                                  "throughout"))
        t = tm.utc_ns.copy()
        nv = tm.form == 2
        skipped = nv & (tm.dst_ns == _NAT)
        _list_rows(col, np.flatnonzero(skipped), line, "timestamp",
                   "a local time in the skipped spring hour",
                   lambda i: (f"local time '{txt[i]}' does not exist in {tz}: the clocks "
                              "skip that hour when summer time starts"))
        amb = nv & ~skipped & (tm.dst_ns != tm.std_ns)
        t[nv & ~skipped & ~amb] = tm.dst_ns[nv & ~skipped & ~amb]
        if amb.any():
            # repeated autumn hour: per feeder, 1st reading at a wall-clock time = summer
            # time, 2nd = standard time, a 3rd cannot be placed
            k = (pd.DataFrame({"f": fid_text[amb], "t": tm.naive_ns[amb]})
                 .groupby(["f", "t"], sort=False).cumcount().to_numpy())
            pos = np.flatnonzero(amb)
            t[pos[k == 0]] = tm.dst_ns[pos[k == 0]]
            t[pos[k == 1]] = tm.std_ns[pos[k == 1]]
            third = pos[k >= 2]
            _list_rows(col, third, line, "timestamp", "a third reading in the repeated hour",
                       lambda i: (f"local time '{txt[i]}' occurs a third time for feeder "
                                  f"'{fid_text[i]}': in the repeated autumn hour each local "
                                  "time can appear twice (first summer time, then standard "
                                  "time); use UTC offsets to be unambiguous"))
            amb[third] = False
        t_ok = t != _NAT

    # ---- duplicates and order within a feeder --------------------------------------------
    chk = np.flatnonzero(t_ok & (code >= 0))
    if len(chk):
        d = pd.DataFrame({"c": code[chk], "t": t[chk], "line": line[chk]})
        dup = d.duplicated(["c", "t"], keep="first").to_numpy()
        first_line = d.groupby(["c", "t"], sort=False)["line"].transform("first").to_numpy()
        # latest time among the feeder's earlier lines (_NAT on its first line)
        pm = (d.groupby("c", sort=False)["t"].cummax().groupby(d["c"])
              .shift(1, fill_value=_NAT).to_numpy(dtype=np.int64))
        earlier = (d["t"].to_numpy() < pm) & ~dup
        local_t = np.full(len(chk), "", dtype=object)
        show = np.union1d(np.flatnonzero(dup)[:MAX_LISTED], np.flatnonzero(earlier)[:MAX_LISTED])
        if len(show):
            local_t[show] = _local_text(t[chk][show], tz)
        ids = np.array(list(fids) + [TOTAL_ID], dtype=object)
        _list_rows(col, np.flatnonzero(dup), line[chk], "timestamp",
                   "a duplicate reading",
                   lambda i: (f"second reading for feeder '{ids[code[chk][i]]}' at "
                              f"{local_t[i]} (local); the first is on line {first_line[i]}"))

        def order_msg(i: int) -> str:
            prev = _local_text(pm[i:i + 1], tz)[0]
            msg = (f"timestamp {local_t[i]} (local) of feeder '{ids[code[chk][i]]}' comes "
                   f"after a reading for {prev}; each feeder's readings must be in time order")
            if amb[chk][i]:
                msg += (" (in the repeated autumn hour, local times are taken in order: all "
                        "of the hour in summer time first, then again in standard time)")
            return msg

        _list_rows(col, np.flatnonzero(earlier), line[chk], "timestamp",
                   "a timestamp out of order", order_msg)

    # ---- resolution per feeder; coarse readings must start on an interval boundary --------
    iv_ns = s.interval_minutes * _NS_PER_MIN
    ts0 = int(_ns(timestamps_utc[:1])[0])
    n_iv = len(timestamps_utc)
    good = np.flatnonzero(t_ok & (code >= 0) & mw_ok)
    order = good[np.lexsort((t[good], code[good]))]
    cs, tsrt = code[order], t[order]
    same = cs[1:] == cs[:-1]
    step = np.diff(tsrt)
    res = (pd.Series(step[same]).groupby(cs[1:][same]).median()
           .reindex(range(nf + 1)).fillna(iv_ns).round().to_numpy(dtype=np.int64))
    res = np.maximum(res, 1)
    coarse_row = res[cs] >= iv_ns
    off = coarse_row & ((tsrt - ts0) % iv_ns != 0)
    if off.any():
        pos = order[off]
        pos = pos[np.argsort(line[pos], kind="stable")]
        _list_rows(col, pos, line, "timestamp", "a timestamp off the interval grid",
                   lambda i: (f"timestamp '{tm.text[i]}' is not on a "
                              f"{s.interval_minutes}-minute interval boundary of the study; "
                              f"readings every {_fmt_minutes(res[code[i]])} must start on an "
                              "interval"))
    col.raise_if_any()

    return _align(file, study, timestamps_utc, cs, tsrt, mw[order], res, n_iv, ts0, iv_ns)


def _cover_end(cs: np.ndarray, t: np.ndarray, res: np.ndarray, tz: str) -> np.ndarray:
    """End (UTC ns) of the time each reading covers: next reading of the feeder or one
    resolution step, whichever is first; whole-day steps count in local days."""
    r = res[cs]
    end = t + r
    days = (r % _NS_PER_DAY == 0)
    if days.any():
        loc = (pd.DatetimeIndex(t[days].astype("datetime64[ns]")).tz_localize("UTC")
               .tz_convert(tz).tz_localize(None)) + pd.to_timedelta(r[days], unit="ns")
        back = loc.tz_localize(tz, ambiguous="NaT", nonexistent="shift_forward")
        e = np.where(back.isna(), end[days], back.as_unit("ns").asi8)
        end[days] = e
    nxt = np.full(len(t), np.iinfo(np.int64).max, dtype=np.int64)
    same = cs[1:] == cs[:-1]
    nxt[:-1][same] = t[1:][same]
    return np.minimum(end, nxt)


def _align(file: str, study: Study, timestamps_utc: pd.DatetimeIndex, cs: np.ndarray,
           t: np.ndarray, mw: np.ndarray, res: np.ndarray, n_iv: int, ts0: int,
           iv_ns: int) -> MeteredData:
    """Readings sorted by (feeder code, time) → ``[feeder, interval]`` arrays and notes."""
    s = study.settings
    nf = len(study.feeder_ids)
    ids = list(study.feeder_ids) + [TOTAL_ID]
    notes: list[str] = []
    end = _cover_end(cs, t, res, s.timezone)
    i0 = (t - ts0) // iv_ns
    i1 = -((ts0 - end) // iv_ns)  # ceil
    coarse = res[cs] >= iv_ns
    i1 = np.where(coarse, i1, i0 + 1)
    inside = (i1 > 0) & (i0 < n_iv)
    n_out = int(np.count_nonzero(~inside))
    if n_out:
        notes.append(f"{file}: {n_out} reading{'s' if n_out != 1 else ''} outside the study "
                     f"year {s.year} ignored")
    cs, t, mw, end, i0, i1, coarse = (a[inside] for a in (cs, t, mw, end, i0, i1, coarse))

    arr = np.full((nf + 1, n_iv), np.nan)
    flat = arr.reshape(-1)
    # finer than the interval: mean of the readings present in each interval
    fine = ~coarse
    if fine.any():
        key = cs[fine] * n_iv + i0[fine]
        mean = pd.Series(mw[fine]).groupby(key).mean()
        flat[mean.index.to_numpy()] = mean.to_numpy()
    # equal or coarser: hold each reading over the intervals it covers
    if coarse.any():
        a = np.clip(i0[coarse], 0, n_iv)
        b = np.clip(i1[coarse], 0, n_iv)
        ln = np.maximum(b - a, 0)
        start_of = np.repeat(np.cumsum(ln) - ln, ln)
        cols = np.repeat(a, ln) + (np.arange(int(ln.sum())) - start_of)
        flat[np.repeat(cs[coarse], ln) * n_iv + cols] = np.repeat(mw[coarse], ln)

    counts = np.bincount(cs, minlength=nf + 1)
    has_all = counts > 0
    iv_min = s.interval_minutes
    for mask, text in (
            ((res < iv_ns) & has_all, "averaged into the {iv}-minute intervals (mean of the "
                                      "readings present in each)"),
            ((res > iv_ns) & has_all, "coarser than the {iv}-minute intervals: each reading "
                                      "is held over the intervals it covers")):
        if mask.any():
            for r in np.unique(res[mask]):
                who = [ids[i] for i in np.flatnonzero(mask & (res == r))]
                notes.append(f"{file}: readings every {_fmt_minutes(r)} for {len(who)} "
                             f"series ({_names(who)}) " + text.format(iv=iv_min))
    stats = _reading_stats(study, cs, t, end, mw)
    total = arr[nf].copy() if has_all[nf] else None
    values = arr[:nf]
    return MeteredData(file, tuple(study.feeder_ids), values, total, has_all[:nf].copy(),
                       timestamps_utc, iv_min, tuple(notes), stats)


def _reading_stats(study: Study, cs: np.ndarray, t: np.ndarray, end: np.ndarray,
                   mw: np.ndarray) -> pd.DataFrame:
    """Per-series summary of raw readings sorted by (code, time), for the flags."""
    nf = len(study.feeder_ids)
    hi = np.append(RANGE_FACTOR * study.peak_mw + RANGE_MARGIN_MW, np.inf)
    lo = np.append(-(RANGE_FACTOR * study.pv_mw + RANGE_MARGIN_MW), -np.inf)
    d = pd.DataFrame({"c": cs, "mw": mw, "high": mw > hi[cs], "low": mw < lo[cs]})
    g = d.groupby("c")
    out = pd.DataFrame({"n_readings": g.size(), "min_mw": g["mw"].min(),
                        "max_mw": g["mw"].max(), "n_high": g["high"].sum(),
                        "n_low": g["low"].sum()}).reindex(range(nf + 1))
    out["n_readings"] = out["n_readings"].fillna(0).astype(np.int64)
    out[["n_high", "n_low"]] = out[["n_high", "n_low"]].fillna(0).astype(np.int64)
    # runs of identical, contiguous readings
    cont = np.zeros(len(cs), dtype=bool)
    if len(cs) > 1:
        cont[1:] = (cs[1:] == cs[:-1]) & (mw[1:] == mw[:-1]) & (t[1:] <= end[:-1])
    run = np.cumsum(~cont)
    r = pd.DataFrame({"c": cs, "t": t, "end": end, "mw": mw}).groupby(run).agg(
        c=("c", "first"), t=("t", "first"), end=("end", "last"), mw=("mw", "first"),
        n=("c", "size"))
    r = r[(r["n"] >= 2) & (r["mw"] != 0)]
    r = r.assign(h=(r["end"] - r["t"]) / _NS_PER_H).sort_values("h", kind="stable")
    best = r.drop_duplicates("c", keep="last").set_index("c")
    out["flat_h"] = best["h"].reindex(out.index).fillna(0.0)
    out["flat_mw"] = best["mw"].reindex(out.index)
    out["flat_start_ns"] = best["t"].reindex(out.index).fillna(_NAT).astype(np.int64)
    out.index = pd.Index(list(study.feeder_ids) + [TOTAL_ID], name="series")
    return out


# --------------------------------------------------------------------------------------------
# merging
# --------------------------------------------------------------------------------------------
def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of True along axis 1 of a 2-D bool array: (row, start, end exclusive)."""
    m = np.zeros((mask.shape[0], mask.shape[1] + 2), dtype=np.int8)
    m[:, 1:-1] = mask
    d = np.diff(m, axis=1)
    r0, c0 = np.nonzero(d == 1)
    _, c1 = np.nonzero(d == -1)
    return r0, c0, c1


def interpolate_rows(v: np.ndarray) -> np.ndarray:
    """Fill NaN along axis 1 linearly between the neighbouring values; edges held.
    Rows with no value at all stay NaN."""
    v = np.asarray(v, dtype=float)
    n = v.shape[1]
    idx = np.arange(n)
    ok = ~np.isnan(v)
    prev = np.maximum.accumulate(np.where(ok, idx, -1), axis=1)
    nxt = np.minimum.accumulate(np.where(ok, idx, n)[:, ::-1], axis=1)[:, ::-1]
    pv = np.take_along_axis(v, np.clip(prev, 0, n - 1), axis=1)
    nv = np.take_along_axis(v, np.clip(nxt, 0, n - 1), axis=1)
    span = np.where(nxt > prev, nxt - prev, 1)
    out = pv + (nv - pv) * ((idx - prev) / span)
    out = np.where(prev < 0, nv, out)
    out = np.where(nxt >= n, pv, out)
    return np.where(ok, v, out)


def _study_order(study: Study, metered: MeteredData, n_iv: int
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Metered values and has_data in the study's feeder order."""
    if tuple(metered.feeder_ids) == tuple(study.feeder_ids):
        vals, has = np.asarray(metered.values_mw, dtype=float), np.asarray(metered.has_data,
                                                                           dtype=bool)
    else:
        pos = pd.Index(metered.feeder_ids).get_indexer(list(study.feeder_ids))
        vals = np.full((len(pos), n_iv), np.nan)
        has = np.zeros(len(pos), dtype=bool)
        found = pos >= 0
        vals[found] = np.asarray(metered.values_mw, dtype=float)[pos[found]]
        has[found] = np.asarray(metered.has_data, dtype=bool)[pos[found]]
    if vals.shape[1] != n_iv:
        raise ValueError(f"metered data has {vals.shape[1]} intervals, the study {n_iv}")
    return vals, has


def merge_metered(study: Study, metered: MeteredData, timestamps_utc: pd.DatetimeIndex,
                  profile_net_mw: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray | None, list[FeederFlag], list[str]]:
    """Metered values replace the profile-built ones where present; gaps per ``gap_fill``.

    Returns ``(net_mw, total_mw, flags, notes)``; ``net_mw`` is a new float64 array.
    """
    s = study.settings
    tz = s.timezone
    n_iv = len(timestamps_utc)
    iv_h = s.interval_minutes / 60.0
    fids = study.feeder_ids
    prof = np.asarray(profile_net_mw, dtype=float)
    if prof.shape != (len(fids), n_iv):
        raise ValueError(f"profile_net_mw has shape {prof.shape}, expected "
                         f"{(len(fids), n_iv)}")
    vals, has = _study_order(study, metered, n_iv)
    present = ~np.isnan(vals)
    gap = ~present
    gap[~has] = False
    r0, c0, c1 = _runs(gap)
    total = None if metered.total_mw is None else np.array(metered.total_mw, dtype=float)
    empty = (np.array([], dtype=np.int64),) * 3
    t_r = _runs(np.isnan(total)[None, :]) if total is not None else empty
    if total is not None and np.isnan(total).all():
        total, t_r = None, empty
    ts_ns = _ns(timestamps_utc)
    iv_ns = s.interval_minutes * _NS_PER_MIN

    # TOTAL gaps only matter where TOTAL is the demand; otherwise they are interpolated
    if s.demand_basis != "metered_total":
        t_err = (np.array([], dtype=np.int64),) * 3
    else:
        t_err = t_r
    if s.gap_fill == "error" and (len(r0) or len(t_err[0])):
        _raise_gaps(study, metered.file, r0, c0, c1, t_err, ts_ns, iv_ns)

    net = np.array(prof, dtype=np.float64, copy=True)
    np.copyto(net, vals, where=present)
    notes: list[str] = list(metered.notes)
    flags: list[tuple[int, int, FeederFlag]] = []

    gap_n = np.bincount(r0, weights=c1 - c0, minlength=len(fids)).astype(np.int64)
    longest = np.zeros(len(fids), dtype=np.int64)
    longest_at = np.zeros(len(fids), dtype=np.int64)
    if len(r0):
        ln = c1 - c0
        o = np.lexsort((-ln, r0))  # per row, longest first
        first = np.ones(len(o), dtype=bool)
        first[1:] = r0[o][1:] != r0[o][:-1]
        longest[r0[o][first]] = ln[o][first]
        longest_at[r0[o][first]] = c0[o][first]
    gapped = np.flatnonzero(gap_n > 0)
    if len(gapped):
        if s.gap_fill == "interpolate":
            for a in range(0, len(gapped), 256):
                rows = gapped[a:a + 256]
                net[rows] = interpolate_rows(vals[rows])
            how = "by linear interpolation between the neighbouring readings"
        else:
            how = "from the profile-built values"
        at = _local_text(ts_ns[longest_at[gapped]], tz)
        for j, i in enumerate(gapped):
            flags.append((i, 0, FeederFlag(
                fids[i], "gaps_filled",
                f"{gap_n[i]} of {n_iv} intervals ({gap_n[i] * iv_h:g} h) had no reading and "
                f"were filled {how}; longest gap {longest[i] * iv_h:g} h from {at[j]}")))
        notes.append(f"metered gaps in {len(gapped)} feeder(s), {int(gap_n.sum())} intervals "
                     f"in all, filled {how} (gap_fill = {s.gap_fill})")

    if total is not None and len(t_r[0]):
        n_tg = int((t_r[2] - t_r[1]).sum())
        lg = int((t_r[2] - t_r[1]).max())
        total = interpolate_rows(total[None, :])[0]
        notes.append(f"{TOTAL_ID}: {n_tg} interval{'s' if n_tg != 1 else ''} "
                     f"({n_tg * iv_h:g} h) without a reading "
                     f"interpolated between the neighbouring readings; longest gap "
                     f"{lg * iv_h:g} h")

    # ---- quality flags from the readings -------------------------------------------------
    st = metered.reading_stats
    if st is None:
        st = _stats_from_aligned(study, vals, has, ts_ns, iv_ns)
    st = st.reindex(list(fids))
    n_read = st["n_readings"].fillna(0).to_numpy(dtype=np.int64)
    mn = st["min_mw"].to_numpy(dtype=float)
    mx = st["max_mw"].to_numpy(dtype=float)
    all_zero = has & (n_read > 0) & (mn == 0) & (mx == 0)
    for i in np.flatnonzero(all_zero):
        flags.append((i, 2, FeederFlag(
            fids[i], "all_zero", f"every reading is exactly 0 MW ({n_read[i]} readings); "
            "check the meter and the feeder id")))
    fh = st["flat_h"].fillna(0).to_numpy(dtype=float)
    flat = has & ~all_zero & (fh >= FLAT_LINE_MIN_H)
    if flat.any():
        fs = _local_text(st["flat_start_ns"].to_numpy(dtype=np.int64)[flat], tz)
        fm = st["flat_mw"].to_numpy(dtype=float)[flat]
        for j, i in enumerate(np.flatnonzero(flat)):
            flags.append((i, 1, FeederFlag(
                fids[i], "flat_lined",
                f"the same reading {fm[j]:g} MW for {fh[i]:g} h from {fs[j]} (local); "
                "check for a stuck or estimated meter value")))
    nh = st["n_high"].fillna(0).to_numpy(dtype=np.int64)
    nl = st["n_low"].fillna(0).to_numpy(dtype=np.int64)
    oor = has & ((nh > 0) | (nl > 0))
    for i in np.flatnonzero(oor):
        f = study.feeders[i]
        hi = RANGE_FACTOR * f.peak_mw + RANGE_MARGIN_MW
        lo = -(RANGE_FACTOR * f.pv_mw + RANGE_MARGIN_MW)
        flags.append((i, 3, FeederFlag(
            fids[i], "out_of_range",
            f"{nh[i] + nl[i]} of {n_read[i]} readings outside {lo:g} to {hi:g} MW "
            f"(1.5 × pv_mw {f.pv_mw:g} export, 1.5 × peak_mw {f.peak_mw:g} load, "
            f"+0.1 MW margin): {nh[i]} above, {nl[i]} below; readings range "
            f"{mn[i]:g} to {mx[i]:g} MW")))
    none = np.flatnonzero(~has)
    for i in none:
        flags.append((i, 4, FeederFlag(
            fids[i], "no_metered_data",
            f"no readings in {Path(metered.file).name} for {s.year}; the profile-built values "
            "are used")))
    if len(none):
        notes.append(f"metered data for {int(has.sum())} of {len(fids)} feeders; "
                     f"{len(none)} without readings ({_names([fids[i] for i in none])}) keep "
                     "the profile-built values")
    flags.sort(key=lambda x: (x[0], x[1]))
    return net, total, [f for _, _, f in flags], notes


def _stats_from_aligned(study: Study, vals: np.ndarray, has: np.ndarray, ts_ns: np.ndarray,
                        iv_ns: int) -> pd.DataFrame:
    """Reading statistics when only the aligned array is known (each interval a reading)."""
    r, c = np.nonzero(~np.isnan(vals))
    t = ts_ns[c]
    st = _reading_stats(study, r.astype(np.int64), t, t + iv_ns, vals[r, c])
    return st


def _raise_gaps(study: Study, file: str, r0, c0, c1, t_r, ts_ns: np.ndarray,
                iv_ns: int) -> None:
    """gap_fill = error: one problem per series with gaps, naming its gap windows."""
    tz = study.settings.timezone
    iv_h = study.settings.interval_minutes / 60.0
    ids = list(study.feeder_ids) + [TOTAL_ID]
    rows = np.concatenate([r0, np.full(len(t_r[0]), len(ids) - 1)]).astype(np.int64)
    c0 = np.concatenate([c0, t_r[1]]).astype(np.int64)
    c1 = np.concatenate([c1, t_r[2]]).astype(np.int64)
    start = _local_text(ts_ns[c0], tz)
    end = _local_text(ts_ns[0] + c1 * iv_ns, tz)
    ln = c1 - c0
    win = pd.DataFrame({"r": rows, "w": start + " to " + end, "n": ln})
    g = win.groupby("r", sort=True)
    agg = pd.DataFrame({"k": g.size(), "n": g["n"].sum(),
                        "w": g["w"].agg(lambda x: "; ".join(x.iloc[:MAX_WINDOWS_LISTED]))})
    n_series = len(agg)
    probs = [Problem(study.path, f"gap_fill is 'error' but the metered data has gaps in "
                     f"{n_series} series ({int(ln.sum())} intervals); fill them in the file "
                     "or set gap_fill to 'profile' or 'interpolate'", "settings", None,
                     "value")]
    for r, k, n, w in list(agg.itertuples())[:MAX_LISTED]:
        more = f"; and {k - MAX_WINDOWS_LISTED} more" if k > MAX_WINDOWS_LISTED else ""
        probs.append(Problem(file, f"{ids[r]}: {k} gap{'s' if k != 1 else ''} "
                             f"({n} intervals, {n * iv_h:g} h) without a reading, local time: "
                             f"{w}{more}", None, None, "mw"))
    if n_series > MAX_LISTED:
        probs.append(Problem(file, f"... and {n_series - MAX_LISTED} more series with gaps",
                             None, None, "mw"))
    raise InputError(probs)


__all__ = ["MeteredData", "read_metered", "merge_metered", "interpolate_rows",
           "max_metered_bytes", "TOTAL_ID", "DEFAULT_MAX_METERED_MB"]
