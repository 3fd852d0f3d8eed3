"""Read and validate the study workbook (xlsx) into a :class:`~allocator.domain.Study`.

Every problem is collected with its file, sheet, row and column, and raised together as one
:class:`~allocator.errors.InputError`.  The file is size-checked and recognised as an xlsx
(zip) container before any parsing; openpyxl parses XML through defusedxml when it is
installed, which this package requires (guards against entity-expansion attacks).
"""

from __future__ import annotations

import math
import os
import re
import zipfile
from dataclasses import dataclass, replace
from datetime import datetime, time
from pathlib import Path
from zoneinfo import ZoneInfo, available_timezones

import numpy as np

from .domain import (
    DAY_TYPES,
    MINUTES_PER_DAY,
    RELAY_KINDS,
    Block,
    Feeder,
    Period,
    PV_KINDS,
    Profiles,
    Scenario,
    Settings,
    Study,
)
from .errors import Collector, InputError

#: refuse workbooks larger than this before parsing (bytes); override with UFLS_MAX_WORKBOOK_MB
DEFAULT_MAX_WORKBOOK_MB = 50.0
#: refuse zip members whose uncompressed total exceeds this (bytes) - zip-bomb guard
MAX_UNCOMPRESSED_MB = 500.0

REQUIRED_SHEETS = ("settings", "blocks", "feeders", "profiles", "seasons")
BLOCK_COLUMNS = ("block", "order", "pickup_hz", "delay_s", "target_pct", "min_pct", "max_pct")
BLOCK_OPTIONAL = ("rocof_hz_per_s", "rocof_arm_hz")
FEEDER_COLUMNS = ("feeder_id", "substation", "profile", "peak_mw", "pv_mw", "relay")
FEEDER_OPTIONAL = ("zone", "priority", "allowed_blocks", "trip_group", "current_block", "customers",
                   "remote_switch")
PERIOD_COLUMNS = ("period", "months")
PERIOD_OPTIONAL = ("day_types", "from", "to")
PROFILE_COLUMNS = ("profile", "season", "day_type", "time", "value")
SEASON_COLUMNS = ("season", "months")
#: longest relay delay + breaker time, s, from the frequency crossing to load disconnected,
#: before ``validate`` warns (a rule of thumb: common practice, no source)
MAX_OPERATING_TIME_S = 0.4
#: study interval lengths, minutes (each divides an hour, so DST shifts stay on the grid)
INTERVAL_MINUTES = (5.0, 10.0, 15.0, 30.0, 60.0)
SETTING_KEYS_REQUIRED = ("utility", "year", "timezone", "nominal_hz", "interval_minutes",
                         "latitude", "longitude", "demand_basis", "priority_policy",
                         "compliance_rule")
SETTING_KEYS_OPTIONAL = ("holiday_country", "holiday_subdivision", "pv_derate", "max_changes",
                         "solver_time_limit_s", "mip_gap", "gap_fill",
                         "max_substation_share_pct", "deviation_tolerance_pct",
                         "band_margin_pp", "objective", "exporting_standard_relays",
                         "pv_tilt_deg", "pv_azimuth_deg", "max_switched_feeders",
                         "max_switch_operations_per_year", "fail_safe",
                         "weather_max_distance_km", "weather_strict")
SCENARIO_COLUMNS = ("scenario", "pv")
SCENARIO_OPTIONAL = ("pv_scale", "load_scale", "year")
OBJECTIVES = ("fewest_changes", "closest_to_target")
EXPORTING_CHOICES = ("allow", "avoid")
FAIL_SAFE_CHOICES = ("report", "required")


def max_workbook_bytes() -> int:
    """The workbook size limit in bytes (``UFLS_MAX_WORKBOOK_MB`` overrides the default;
    a value that is not a positive number is ignored)."""
    try:
        mb = float(os.environ.get("UFLS_MAX_WORKBOOK_MB", DEFAULT_MAX_WORKBOOK_MB))
        if not mb > 0:
            raise ValueError
    except ValueError:
        mb = DEFAULT_MAX_WORKBOOK_MB
    return math.ceil(mb * 1024 * 1024)  # ceil: the message shows the limit as set


# --------------------------------------------------------------------------------------------
# cell helpers
# --------------------------------------------------------------------------------------------
@dataclass
class Row:
    number: int  # spreadsheet row (header = 1)
    values: dict[str, object]


def _blank(v: object) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and math.isnan(v):
        return True
    return isinstance(v, str) and v.strip() == ""


def _text(v: object) -> str:
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v).strip()


#: the message for a required cell that reads as empty; :func:`_explain_formula_blanks`
#: rewrites it where the cell holds a formula without a saved result
BLANK = "required value is blank"
NO_SAVED_VALUE = ("formula with no saved value (open and save the workbook in a spreadsheet "
                  "program, or write values)")


class _Cells:
    """Typed access to one sheet's cells that records problems instead of raising.

    ``label`` (the settings key) starts each message, so a message about the ``value``
    column says which setting it is about.
    """

    def __init__(self, col: Collector, sheet: str):
        self.col = col
        self.sheet = sheet

    def _add(self, msg: str, row: Row, name: str, label: str | None) -> None:
        self.col.add(f"{label}: {msg}" if label else msg, self.sheet, row.number, name)

    def text(self, row: Row, name: str, required: bool = True,
             label: str | None = None) -> str | None:
        v = row.values.get(name)
        if _blank(v):
            if required:
                self._add(BLANK, row, name, label)
            return None
        return _text(v)

    def number(self, row: Row, name: str, required: bool = True, minimum: float | None = None,
               maximum: float | None = None, what: str = "a number",
               label: str | None = None) -> float | None:
        v = row.values.get(name)
        if _blank(v):
            if required:
                self._add(f"{BLANK}; expected {what}", row, name, label)
            return None
        if isinstance(v, bool):
            self._add(f"expected {what}, found {v!r}", row, name, label)
            return None
        if isinstance(v, (int, float)):
            x = float(v)
        else:
            try:
                x = float(str(v).strip().replace(",", "."))
            except ValueError:
                self._add(f"expected {what}, found text {str(v)[:40]!r}", row, name, label)
                return None
        if not math.isfinite(x):
            self._add(f"expected {what}, found {x}", row, name, label)
            return None
        if minimum is not None and x < minimum:
            # `what` may already state the bound ("MW ≥ 0"): do not say it twice
            exp = what if f"≥ {minimum:g}" in what else f"{what} ≥ {minimum:g}"
            self._add(f"expected {exp}, found {x:g}", row, name, label)
            return None
        if maximum is not None and x > maximum:
            base = what.split(" ≥ ")[0]
            self._add(f"expected {base} ≤ {maximum:g}, found {x:g}", row, name, label)
            return None
        return x


def _unreadable(exc: BaseException) -> str:
    """The message for a workbook openpyxl cannot parse: the innermost cause (openpyxl
    wraps it in a generic ValueError), and plain words when defusedxml refused the XML."""
    from defusedxml import DefusedXmlException

    chain = [exc]
    while len(chain) < 10 and (chain[-1].__cause__ or chain[-1].__context__):
        chain.append(chain[-1].__cause__ or chain[-1].__context__)
    for e in chain:
        if isinstance(e, DefusedXmlException):
            return ("refused: the workbook's XML declares entities or a DTD "
                    f"({type(e).__name__}); spreadsheet programs do not write these, they mark "
                    "an entity-expansion ('billion laughs') or external-entity attack")
    root = chain[-1]
    return f"cannot read the workbook: {type(root).__name__}: {str(root)[:200]}"


def _check_container(path: Path, col: Collector) -> None:
    """Refuse, before any parsing, a file over the size limit (bytes), not a zip, expanding
    past :data:`MAX_UNCOMPRESSED_MB`, or without ``xl/workbook.xml``."""
    size = path.stat().st_size
    limit = max_workbook_bytes()
    if size > limit:
        col.add(f"file is {size / 1048576:.3g} MB, over the {limit / 1048576:.3g} MB limit for "
                "a workbook (refused before parsing; set UFLS_MAX_WORKBOOK_MB to raise it)")
        col.raise_if_any()
    if not zipfile.is_zipfile(path):
        col.add("not an xlsx workbook (an .xlsx file is a zip container; this file is not). "
                "Save it from the spreadsheet program as 'Excel Workbook (.xlsx)'")
        col.raise_if_any()
    try:
        with zipfile.ZipFile(path) as zf:
            total = sum(i.file_size for i in zf.infolist())
            names = set(zf.namelist())
    except (zipfile.BadZipFile, OSError) as exc:
        col.add(f"cannot open as an xlsx workbook: {exc}")
        col.raise_if_any()
    if total > MAX_UNCOMPRESSED_MB * 1048576:
        col.add(f"workbook expands to {total / 1048576:.0f} MB uncompressed, over the "
                f"{MAX_UNCOMPRESSED_MB:.0f} MB limit (refused before parsing)")
        col.raise_if_any()
    if "xl/workbook.xml" not in names:
        col.add("not an xlsx workbook: the zip has no xl/workbook.xml "
                "(.xlsm/.xlsb/.ods are not read; save as .xlsx)")
        col.raise_if_any()


def _sheet_table(ws, col: Collector) -> tuple[list[str], list[Row]]:
    """One worksheet as (lower-case header, non-blank rows); a header name twice is
    collected."""
    it = ws.iter_rows(values_only=True)
    try:
        header_cells = next(it)
    except StopIteration:
        return [], []
    header = ["" if _blank(h) else str(h).strip().lower() for h in header_cells]
    seen: set[str] = set()
    for j, h in enumerate(header):
        if h and h in seen:
            col.add(f"column '{h}' appears twice in the header", ws.title, 1, h)
        seen.add(h)
    rows: list[Row] = []
    for i, cells in enumerate(it, start=2):
        if cells is None or all(_blank(c) for c in cells):
            continue
        vals = {h: cells[j] if j < len(cells) else None
                for j, h in enumerate(header) if h}
        rows.append(Row(i, vals))
    return header, rows


def _read_sheets(path: Path, col: Collector) -> dict[str, tuple[list[str], list[Row]]]:
    """Open the workbook and return every sheet as (header, rows).  Raises on unreadable files."""
    _check_container(path, col)

    import openpyxl  # imported late: keeps CLI start-up fast
    from openpyxl.xml import DEFUSEDXML

    if not DEFUSEDXML:  # pragma: no cover - dependency guaranteed by pyproject
        raise RuntimeError("defusedxml is required to read workbooks safely")
    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many types for malformed files
        col.add(_unreadable(exc))
        col.raise_if_any()
    out: dict[str, tuple[list[str], list[Row]]] = {}
    try:
        for ws in wb.worksheets:
            name = ws.title.strip().lower()
            out[name] = _sheet_table(ws, col)
    except Exception as exc:
        col.add(_unreadable(exc))
        col.raise_if_any()
    finally:
        wb.close()
    return out


def _explain_formula_blanks(path: Path, col: Collector,
                            headers: dict[str, list[str]]) -> None:
    """Reword "required value is blank" where the cell holds a formula with no saved result.

    The first pass reads saved values (``data_only``), and a workbook written by a script
    has none for its formulas: openpyxl gives None, as for an empty cell.  Only when such
    problems exist, the sheets they are on are read once more as written (formulas as
    text) and those cells looked at; nothing else is read twice.
    """
    wanted: dict[str, dict[int, dict[int, int]]] = {}  # sheet → row → column → problem
    for k, pr in enumerate(col.problems):
        h = headers.get(pr.sheet or "")
        if BLANK in pr.message and pr.row and h and pr.column in h:
            wanted.setdefault(pr.sheet, {}).setdefault(pr.row, {})[h.index(pr.column)] = k
    if not wanted:
        return
    import openpyxl
    from openpyxl.worksheet.formula import ArrayFormula, DataTableFormula

    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=False)
    except Exception:  # the first pass read it; keep its messages if this one cannot
        return
    try:
        for ws in wb.worksheets:
            rows = wanted.get(ws.title.strip().lower())
            if not rows:
                continue
            for i, cells in enumerate(ws.iter_rows(max_row=max(rows), values_only=True), 1):
                for j, k in rows.get(i, {}).items():
                    v = cells[j] if cells and j < len(cells) else None
                    if (isinstance(v, str) and v.startswith("=")) or isinstance(
                            v, (ArrayFormula, DataTableFormula)):
                        pr = col.problems[k]
                        col.problems[k] = replace(pr, message=pr.message.replace(
                            BLANK, NO_SAVED_VALUE))
    except Exception:
        return
    finally:
        wb.close()


def _require_columns(col: Collector, sheet: str, header: list[str], required: tuple[str, ...]
                     ) -> bool:
    missing = [c for c in required if c not in header]
    for c in missing:
        col.add(f"missing column '{c}' (the header row must name it)", sheet, 1, c)
    return not missing


# --------------------------------------------------------------------------------------------
# sheets
# --------------------------------------------------------------------------------------------
def _settings_rows(col: Collector, rows: list[Row]) -> dict[str, Row]:
    """The settings rows by lower-case key; blank, repeated, unknown and missing required
    keys are collected."""
    sheet = "settings"
    kv: dict[str, Row] = {}
    for r in rows:
        k = r.values.get("key")
        if _blank(k):
            col.add("blank key", sheet, r.number, "key")
            continue
        key = _text(k).lower()
        if key in kv:
            col.add(f"key '{key}' appears twice (also row {kv[key].number})", sheet, r.number,
                    "key")
            continue
        if key not in SETTING_KEYS_REQUIRED + SETTING_KEYS_OPTIONAL:
            col.add(f"unknown key '{key}'; expected one of "
                    f"{', '.join(SETTING_KEYS_REQUIRED + SETTING_KEYS_OPTIONAL)}", sheet,
                    r.number, "key")
            continue
        kv[key] = Row(r.number, {"value": r.values.get("value")})
    for k in SETTING_KEYS_REQUIRED:
        if k not in kv:
            col.add(f"missing required key '{k}'", sheet, None, "key")
    return kv


class _SettingValues:
    """Typed access to the settings values by key; every message about a value starts with
    its key ("interval_minutes: expected ...")."""

    def __init__(self, col: Collector, kv: dict[str, Row]):
        self.col = col
        self.kv = kv
        self.cells = _Cells(col, "settings")

    def txt(self, k: str) -> str | None:
        """The text value of key ``k``, or None (absent, blank or bad)."""
        if k not in self.kv:
            return None
        return self.cells.text(self.kv[k], "value", required=k in SETTING_KEYS_REQUIRED,
                               label=k)

    def num(self, k: str, **kw) -> float | None:
        """The number value of key ``k`` (``kw`` as :meth:`_Cells.number`), or None."""
        if k not in self.kv:
            return None
        kw.setdefault("required", k in SETTING_KEYS_REQUIRED)
        return self.cells.number(self.kv[k], "value", label=k, **kw)

    def bad(self, k: str, msg: str) -> None:
        """Collect ``msg`` about the value of key ``k``."""
        self.col.add(f"{k}: {msg}", "settings", self.kv[k].number if k in self.kv else None,
                     "value")


def _timezone_setting(sv: _SettingValues) -> str | None:
    """``timezone``: an IANA name known to zoneinfo, else None (collected)."""
    tz = sv.txt("timezone")
    if tz is not None:
        try:
            if tz not in available_timezones():
                raise KeyError(tz)
            ZoneInfo(tz)
        except Exception:
            sv.bad("timezone", f"unknown time zone '{tz}'; expected an IANA name such as "
                   "'Europe/Vienna' or 'America/Chicago'")
            tz = None
    return tz


def _site_settings(sv: _SettingValues) -> dict[str, object]:
    """utility, year, timezone, nominal frequency (Hz), interval (minutes), latitude and
    longitude (degrees)."""
    v: dict[str, object] = {"utility": sv.txt("utility")}
    year = sv.num("year", minimum=1900, maximum=2200, what="a year such as 2025")
    if year is not None and not float(year).is_integer():
        sv.bad("year", f"expected a whole year, found {year}")
    v["year"] = year
    v["tz"] = _timezone_setting(sv)
    nominal = sv.num("nominal_hz", what="50 or 60")
    if nominal is not None and nominal not in (50.0, 60.0):
        sv.bad("nominal_hz", f"expected 50 or 60, found {nominal:g}")
    interval = sv.num("interval_minutes", what="5, 10, 15, 30 or 60")
    if interval is not None and interval not in INTERVAL_MINUTES:
        sv.bad("interval_minutes", f"expected 5, 10, 15, 30 or 60, found {interval:g}")
    v["nominal"], v["interval"] = nominal, interval
    v["lat"] = sv.num("latitude", minimum=-90, maximum=90, what="latitude in degrees")
    v["lon"] = sv.num("longitude", minimum=-180, maximum=180, what="longitude in degrees")
    return v


def _holiday_settings(sv: _SettingValues, warnings: list[str]) -> dict[str, object]:
    """holiday_country (upper case) and holiday_subdivision, checked against the
    ``holidays`` package; a warning when no country is given."""
    country = sv.txt("holiday_country")
    subdiv = sv.txt("holiday_subdivision")
    if country is not None:
        import holidays as _hol

        supported = _hol.list_supported_countries()
        if country.upper() not in supported:
            sv.bad("holiday_country", f"unknown holiday country '{country}'; expected an ISO "
                   "3166 alpha-2 code supported by the 'holidays' package, e.g. DE, FR, US")
            country = None
        else:
            country = country.upper()
            if subdiv is not None and subdiv.upper() not in {s.upper() for s in
                                                              supported[country]}:
                sv.bad("holiday_subdivision", f"unknown subdivision '{subdiv}' for {country}; "
                       f"expected one of {', '.join(supported[country][:20])}")
                subdiv = None
    else:
        warnings.append("no holiday_country: public holidays are treated as ordinary days")
    return {"country": country, "subdiv": subdiv}


def _compliance_setting(sv: _SettingValues) -> tuple[str | None, float | None]:
    """``compliance_rule`` as (rule, tail percentile % or None); (None, None) when bad."""
    rule_raw = sv.txt("compliance_rule")
    rule, pct = None, None
    if rule_raw is not None:
        m = re.fullmatch(r"percentile\s*:\s*([0-9.]+)", rule_raw)
        if rule_raw in ("every_interval", "mean"):
            rule = rule_raw
        elif m:
            p = float(m.group(1))
            if 0 < p < 50:
                rule, pct = "percentile", p
            else:
                sv.bad("compliance_rule", "percentile:P takes the tail share P allowed outside "
                       f"the band, 0 < P < 50 (e.g. percentile:5), found {p:g}")
        else:
            sv.bad("compliance_rule", "expected 'every_interval', 'percentile:P' (e.g. "
                   f"percentile:5) or 'mean', found '{rule_raw}'")
    return rule, pct


def _rule_settings(sv: _SettingValues) -> dict[str, object]:
    """demand_basis, pv_derate (factor, default 0.8), priority_policy and compliance_rule."""
    basis = sv.txt("demand_basis")
    if basis is not None and basis not in ("feeders", "metered_total"):
        sv.bad("demand_basis", f"expected 'feeders' or 'metered_total', found '{basis}'")
    derate = sv.num("pv_derate", minimum=0, maximum=1.5, what="a factor between 0 and 1.5")
    derate = 0.8 if derate is None else derate
    policy = sv.txt("priority_policy")
    if policy is not None and policy not in ("exclude", "last_block"):
        sv.bad("priority_policy", f"expected 'exclude' or 'last_block', found '{policy}'")
    rule, pct = _compliance_setting(sv)
    return {"basis": basis, "derate": derate, "policy": policy, "rule": rule, "pct": pct}


def _solver_settings(sv: _SettingValues) -> dict[str, object]:
    """max_changes, solver_time_limit_s (s), mip_gap, gap_fill, max_substation_share_pct,
    deviation_tolerance_pct and band_margin_pp (percentage points)."""
    max_changes = sv.num("max_changes", required=False, minimum=0, what="a whole number ≥ 0")
    if max_changes is not None and not float(max_changes).is_integer():
        sv.bad("max_changes", f"expected a whole number, found {max_changes}")
    v: dict[str, object] = {"max_changes": max_changes}
    v["tlim"] = sv.num("solver_time_limit_s", required=False, minimum=1, what="seconds ≥ 1")
    v["gap"] = sv.num("mip_gap", required=False, minimum=0, maximum=1, what="a fraction 0..1")
    gap_fill = sv.txt("gap_fill") or "profile"
    if gap_fill not in ("profile", "interpolate", "error"):
        sv.bad("gap_fill", f"expected 'profile', 'interpolate' or 'error', found '{gap_fill}'")
    v["gap_fill"] = gap_fill
    v["mss"] = sv.num("max_substation_share_pct", required=False, minimum=0, maximum=100,
                      what="a percentage 0..100")
    v["dev_tol"] = sv.num("deviation_tolerance_pct", required=False, minimum=0, maximum=1000,
                          what="a percentage ≥ 0")
    v["margin"] = sv.num("band_margin_pp", required=False, minimum=0, maximum=50,
                         what="percentage points ≥ 0")
    return v


def _planning_settings(sv: _SettingValues) -> dict[str, object]:
    """objective, exporting_standard_relays, PV tilt and azimuth (degrees) and the
    remote-switching caps (whole numbers)."""
    objective = sv.txt("objective") or "fewest_changes"
    if objective not in OBJECTIVES:
        sv.bad("objective", f"expected {' or '.join(OBJECTIVES)}, found '{objective}'")
    exporting = (sv.txt("exporting_standard_relays") or "allow").lower()
    if exporting not in EXPORTING_CHOICES:
        sv.bad("exporting_standard_relays",
               f"expected 'allow' or 'avoid', found '{exporting}'")
    tilt = sv.num("pv_tilt_deg", required=False, minimum=0, maximum=90,
                  what="a tilt in degrees 0..90")
    azimuth = sv.num("pv_azimuth_deg", required=False, minimum=0, maximum=360,
                     what="an azimuth in degrees 0..360 (180 = south)")
    caps = {}
    for k in ("max_switched_feeders", "max_switch_operations_per_year"):
        caps[k] = sv.num(k, required=False, minimum=0, what="a whole number ≥ 0")
        if caps[k] is not None and not float(caps[k]).is_integer():
            sv.bad(k, f"expected a whole number, found {caps[k]}")
        caps[k] = int(caps[k]) if caps[k] is not None else None
    fail_safe = (sv.txt("fail_safe") or "report").lower()
    if fail_safe not in FAIL_SAFE_CHOICES:
        sv.bad("fail_safe", f"expected 'report' or 'required', found '{fail_safe}'")
    return {"objective": objective, "exporting": exporting, "tilt": tilt,
            "azimuth": azimuth, "caps": caps, "fail_safe": fail_safe,
            **_weather_site_settings(sv)}


def _weather_site_settings(sv: _SettingValues) -> dict[str, object]:
    """weather_max_distance_km (km ≥ 0, default 100) and weather_strict (yes/no)."""
    dist = sv.num("weather_max_distance_km", required=False, minimum=0,
                  what="a distance in km ≥ 0")
    strict = (sv.txt("weather_strict") or "no").lower()
    if strict not in ("yes", "no"):
        sv.bad("weather_strict", f"expected 'yes' or 'no', found '{strict}'")
    return {"weather_km": 100.0 if dist is None else float(dist),
            "weather_strict": strict == "yes"}


#: the parsed settings without which no :class:`Settings` is built
_SETTINGS_NEEDED = ("utility", "year", "tz", "nominal", "interval", "lat", "lon", "basis",
                    "policy", "rule")


def _settings_from(v: dict[str, object]) -> Settings:
    """The :class:`Settings` of parsed values ``v``, with the defaults for optional keys."""
    subdiv, derate, max_changes = v["subdiv"], v["derate"], v["max_changes"]
    tlim, gap, dev_tol = v["tlim"], v["gap"], v["dev_tol"]
    margin, tilt = v["margin"], v["tilt"]
    return Settings(
        utility=v["utility"], year=int(v["year"]), timezone=v["tz"],
        nominal_hz=float(v["nominal"]), interval_minutes=int(v["interval"]),
        latitude_deg=v["lat"], longitude_deg=v["lon"], holiday_country=v["country"],
        holiday_subdivision=subdiv.upper() if subdiv else None,
        demand_basis=v["basis"], pv_derate=float(derate if derate is not None else 0.8),
        priority_policy=v["policy"], compliance_rule=v["rule"],
        compliance_percentile=v["pct"],
        max_changes=int(max_changes) if max_changes is not None else None,
        solver_time_limit_s=float(tlim) if tlim is not None else 120.0,
        mip_gap=float(gap) if gap is not None else 1e-4, gap_fill=v["gap_fill"],
        max_substation_share_pct=v["mss"],
        deviation_tolerance_pct=10.0 if dev_tol is None else float(dev_tol),
        band_margin_pp=0.0 if margin is None else float(margin), objective=v["objective"],
        exporting_standard_relays=v["exporting"],
        pv_tilt_deg=0.0 if tilt is None else float(tilt), pv_azimuth_deg=v["azimuth"],
        fail_safe=v["fail_safe"], weather_max_distance_km=v["weather_km"],
        weather_strict=v["weather_strict"], **v["caps"],
    )


def _parse_settings(col: Collector, rows: list[Row]) -> tuple[Settings | None, list[str]]:
    """The ``settings`` sheet (key, value): (Settings or None when any value is bad or
    missing, warnings); every problem collected."""
    kv = _settings_rows(col, rows)
    warnings: list[str] = []
    n_before = len(col.problems)
    sv = _SettingValues(col, kv)
    v = _site_settings(sv)
    v.update(_holiday_settings(sv, warnings))
    v.update(_rule_settings(sv))
    v.update(_solver_settings(sv))
    v.update(_planning_settings(sv))
    if len(col.problems) > n_before or any(v[k] is None for k in _SETTINGS_NEEDED):
        return None, warnings
    return _settings_from(v), warnings


def _parse_blocks(col: Collector, rows: list[Row]) -> list[Block]:
    sheet = "blocks"
    cells = _Cells(col, sheet)
    blocks: list[tuple[Block, int]] = []
    names: dict[str, int] = {}
    orders: dict[int, int] = {}
    for r in rows:
        n0 = len(col.problems)
        name = cells.text(r, "block")
        order = cells.number(r, "order", minimum=1, what="a whole number ≥ 1")
        pickup = cells.number(r, "pickup_hz", minimum=40, maximum=70, what="a frequency in Hz")
        delay = cells.number(r, "delay_s", minimum=0, maximum=60, what="seconds ≥ 0")
        rocof = cells.number(r, "rocof_hz_per_s", required=False, minimum=0, maximum=10,
                             what="a rate in Hz/s")
        rarm = cells.number(r, "rocof_arm_hz", required=False, minimum=40, maximum=70,
                            what="a frequency in Hz")
        tgt = cells.number(r, "target_pct", minimum=0, maximum=100, what="a percentage 0..100")
        lo = cells.number(r, "min_pct", minimum=0, maximum=100, what="a percentage 0..100")
        hi = cells.number(r, "max_pct", minimum=0, maximum=100, what="a percentage 0..100")
        if order is not None and not float(order).is_integer():
            col.add(f"expected a whole number, found {order}", sheet, r.number, "order")
        if name is not None:
            if name.lower() in ("none", ""):
                col.add("'none' is reserved and cannot name a block", sheet, r.number, "block")
            elif name in names:
                col.add(f"block '{name}' appears twice (also row {names[name]})", sheet,
                        r.number, "block")
            names.setdefault(name, r.number)
        if order is not None and float(order).is_integer():  # 1.5 is not a duplicate of 1
            if int(order) in orders:
                col.add(f"order {int(order)} appears twice (also row {orders[int(order)]})",
                        sheet, r.number, "order")
            orders.setdefault(int(order), r.number)
        if rocof is not None and _blank(r.values.get("rocof_arm_hz")):
            col.add(f"rocof_hz_per_s is {rocof:g} Hz/s but rocof_arm_hz is blank: give the "
                    "frequency below which the rate element may trip (without one it would "
                    "trip on any fast fall from nominal)", sheet, r.number, "rocof_arm_hz")
        if None not in (tgt, lo, hi) and not (lo <= tgt <= hi):
            col.add(f"expected min_pct ≤ target_pct ≤ max_pct, found {lo:g} ≤ {tgt:g} ≤ "
                    f"{hi:g}", sheet, r.number, "target_pct")
        if len(col.problems) == n0:
            blocks.append((Block(name, int(order), pickup, delay, rocof, tgt, lo, hi, rarm),
                           r.number))
    if not rows:
        col.add("no blocks defined", sheet, None, None)
    blocks.sort(key=lambda br: br[0].order)
    for (a, _), (b, rb) in zip(blocks, blocks[1:]):
        if not b.pickup_hz < a.pickup_hz:
            col.add(f"pickup_hz must fall strictly as order rises: block '{b.name}' (order "
                    f"{b.order}) has {b.pickup_hz:g} Hz, block '{a.name}' (order {a.order}) "
                    f"has {a.pickup_hz:g} Hz", sheet, rb, "pickup_hz")
    return [b for b, _ in blocks]


def _parse_time(v: object) -> int | None:
    """Minute of day from 'HH:MM', a datetime.time, or an Excel day fraction."""
    if isinstance(v, time):
        return v.hour * 60 + v.minute
    if isinstance(v, datetime):
        return v.hour * 60 + v.minute
    if isinstance(v, (int, float)) and not isinstance(v, bool) and 0 <= v < 1:
        m = round(float(v) * MINUTES_PER_DAY)
        return m if m < MINUTES_PER_DAY else None
    if isinstance(v, str):
        m = re.fullmatch(r"\s*(\d{1,2}):(\d{2})(?::00)?\s*", v)
        if m and int(m.group(1)) < 24 and int(m.group(2)) < 60:
            return int(m.group(1)) * 60 + int(m.group(2))
    return None


def _split_list(raw: str) -> list[str]:
    return [t for t in re.split(r"[,;\s]+", raw.strip()) if t]


def _period_row(col: Collector, cells: "_Cells", r: Row,
                interval: int | None) -> Period | None:
    """One row of the ``periods`` sheet, or None (its problems collected)."""
    sheet, n0 = "periods", len(col.problems)
    name = cells.text(r, "period")
    months_raw = cells.text(r, "months")
    months = []
    for tok in _split_list(months_raw or ""):
        if not tok.isdigit() or not 1 <= int(tok) <= 12:
            col.add(f"expected month numbers 1..12 separated by commas, found '{tok[:20]}'",
                    sheet, r.number, "months")
        else:
            months.append(int(tok))
    days_raw = cells.text(r, "day_types", required=False)
    days = [0, 1, 2]
    if days_raw is not None:
        toks = [t.lower() for t in _split_list(days_raw)]
        bad = [t for t in toks if t not in DAY_TYPES]
        if bad:
            col.add(f"unknown day type(s) {', '.join(b[:20] for b in bad)}; expected "
                    "workday, saturday or sunday separated by commas (blank = all)",
                    sheet, r.number, "day_types")
        days = sorted({DAY_TYPES.index(t) for t in toks if t in DAY_TYPES})
    mins = []
    for c in ("from", "to"):
        v = r.values.get(c)
        m = 0 if _blank(v) else _parse_time(v)
        if m is None:
            col.add(f"expected a local time HH:MM (00:00..23:59), found {str(v)[:20]!r}",
                    sheet, r.number, c)
        elif interval and m % interval:
            col.add(f"{_text(v)} is not on the {interval}-minute interval grid; a period "
                    "must start and end at an interval boundary", sheet, r.number, c)
        mins.append(m)
    if len(col.problems) > n0 or name is None or not months:
        return None
    return Period(name, tuple(sorted(set(months))), tuple(days), mins[0], mins[1], r.number)


def _parse_periods(col: Collector, rows: list[Row], interval: int | None) -> list[Period]:
    """The optional ``periods`` sheet: every row, then coverage (each cell of
    month × day type × minute in exactly one period)."""
    from .periods import coverage_problems

    sheet, cells = "periods", _Cells(col, "periods")
    out: list[Period] = []
    seen: dict[str, int] = {}
    ok = True
    for r in rows:
        p = _period_row(col, cells, r, interval)
        if p is None:
            ok = False
            continue
        if p.name in seen:
            col.add(f"period '{p.name}' appears twice (also row {seen[p.name]})", sheet,
                    r.number, "period")
            ok = False
            continue
        seen[p.name] = r.number
        out.append(p)
    if not rows:
        col.add("the periods sheet has no rows; delete it for one period (the whole year)",
                sheet, None, None)
    elif ok:
        for msg in coverage_problems(tuple(out)):
            col.add(msg, sheet, None, "months")
    return out


def _parse_seasons(col: Collector, rows: list[Row]) -> tuple[list[str], np.ndarray]:
    sheet = "seasons"
    cells = _Cells(col, sheet)
    names: list[str] = []
    month_owner: dict[int, tuple[str, int]] = {}
    month_season = np.full(12, -1, dtype=np.intp)
    for r in rows:
        name = cells.text(r, "season")
        months_raw = cells.text(r, "months")
        if name is None or months_raw is None:
            continue
        if name in names:
            col.add(f"season '{name}' appears twice", sheet, r.number, "season")
            continue
        names.append(name)
        for tok in re.split(r"[,;\s]+", months_raw.strip()):
            if not tok:
                continue
            try:
                m = int(float(tok))
                if not 1 <= m <= 12:
                    raise ValueError
            except ValueError:
                col.add(f"expected month numbers 1..12 separated by commas, found '{tok}'",
                        sheet, r.number, "months")
                continue
            if m in month_owner:
                col.add(f"month {m} is in two seasons: '{month_owner[m][0]}' (row "
                        f"{month_owner[m][1]}) and '{name}'", sheet, r.number, "months")
                continue
            month_owner[m] = (name, r.number)
            month_season[m - 1] = len(names) - 1
    missing = [m for m in range(1, 13) if m not in month_owner]
    if missing:
        col.add(f"month(s) {', '.join(map(str, missing))} belong to no season; every month "
                "must be in exactly one season", sheet, None, "months")
    return names, month_season


def _profile_entries(col: Collector, cells: _Cells, rows: list[Row], seasons: list[str]
                     ) -> tuple[dict[tuple[str, str, str], dict[int, tuple[float, int]]],
                                list[str]]:
    """The profile rows as (profile, season, day type) → minute of day → (value p.u., row),
    and the profile names in sheet order; every problem collected."""
    sheet = "profiles"
    entries: dict[tuple[str, str, str], dict[int, tuple[float, int]]] = {}
    names: list[str] = []
    for r in rows:
        n0 = len(col.problems)
        prof = cells.text(r, "profile")
        season = cells.text(r, "season")
        dt = cells.text(r, "day_type")
        tv = r.values.get("time")
        minute = None
        if _blank(tv):
            col.add(f"{BLANK}; expected a time HH:MM", sheet, r.number, "time")
        else:
            minute = _parse_time(tv)
            if minute is None:
                col.add(f"expected a time HH:MM (00:00..23:59), found {str(tv)[:20]!r}", sheet,
                        r.number, "time")
        val = cells.number(r, "value", minimum=-10, maximum=10, what="a per-unit value")
        if season is not None and seasons and season not in seasons:
            col.add(f"unknown season '{season}'; seasons sheet has {', '.join(seasons)}", sheet,
                    r.number, "season")
        if dt is not None and dt.lower() not in DAY_TYPES:
            col.add(f"unknown day type '{dt}'; expected workday, saturday or sunday", sheet,
                    r.number, "day_type")
        if len(col.problems) > n0:
            continue
        key = (prof, season, dt.lower())
        d = entries.setdefault(key, {})
        if minute in d:
            col.add(f"time {minute // 60:02d}:{minute % 60:02d} appears twice for {prof}/"
                    f"{season}/{dt} (also row {d[minute][1]})", sheet, r.number, "time")
            continue
        d[minute] = (val, r.number)
        if prof not in names:
            names.append(prof)
    return entries, names


def _profile_values(col: Collector, entries: dict, names: list[str], seasons: list[str]
                    ) -> tuple[np.ndarray, dict[str, int]]:
    """Per-minute values [profile, season, day type, minute] (p.u., NaN where a day is
    missing or bad) and each profile's resolution (minutes); every problem collected."""
    sheet = "profiles"
    values = np.full((len(names), len(seasons), len(DAY_TYPES), MINUTES_PER_DAY), np.nan)
    resolution: dict[str, int] = {}
    for p_i, p in enumerate(names):
        for s_i, s in enumerate(seasons):
            for d_i, d in enumerate(DAY_TYPES):
                pts = entries.get((p, s, d))
                if not pts:
                    col.add(f"profile '{p}' has no rows for season '{s}', day type '{d}'", sheet,
                            None, "day_type")
                    continue
                mins = sorted(pts)
                step = mins[1] - mins[0] if len(mins) > 1 else MINUTES_PER_DAY
                expected = list(range(0, MINUTES_PER_DAY, step)) if step > 0 else []
                if (step <= 0 or MINUTES_PER_DAY % step or mins != expected):
                    have = len(mins)
                    col.add(f"profile '{p}' / {s} / {d}: times must cover the whole day at one "
                            f"resolution that divides 24 h, starting 00:00 (found {have} "
                            f"times, first {mins[0] // 60:02d}:{mins[0] % 60:02d})", sheet,
                            pts[mins[0]][1], "time")
                    continue
                if resolution.setdefault(p, step) != step:
                    col.add(f"profile '{p}' uses {step}-minute times for {s}/{d} but "
                            f"{resolution[p]}-minute times elsewhere", sheet, pts[mins[0]][1],
                            "time")
                    continue
                vals = np.array([pts[m][0] for m in mins])
                values[p_i, s_i, d_i, :] = np.repeat(vals, step)
    return values, resolution


def _parse_profiles(col: Collector, rows: list[Row], seasons: list[str]
                    ) -> Profiles | None:
    """The ``profiles`` sheet; None when it has no usable row.  Every problem collected."""
    entries, names = _profile_entries(col, _Cells(col, "profiles"), rows, seasons)
    if not names:
        if not rows:
            col.add("no profile rows", "profiles", None, None)
        return None
    values, resolution = _profile_values(col, entries, names, seasons)
    return Profiles(tuple(names), tuple(seasons), values, np.zeros(12, dtype=np.intp),
                    resolution)


_ALLOWED_SPLIT = re.compile(r"[,;]")


def _allowed_blocks(col: Collector, r: Row, raw: str | None,
                    block_names: set[str] | None) -> tuple[str, ...] | None:
    """The ``allowed_blocks`` cell: None (blank = any block), () for 'none', else the
    block names; unknown names are collected."""
    if raw is None:
        return None
    if raw.lower() == "none":
        return ()
    toks = tuple(t.strip() for t in _ALLOWED_SPLIT.split(raw) if t.strip())
    unknown = [t for t in toks if block_names is not None
               and t not in block_names]
    if unknown:
        col.add(f"allowed_blocks names unknown block(s) {', '.join(unknown)}; "
                f"blocks are {', '.join(sorted(block_names))}", "feeders", r.number,
                "allowed_blocks")
    return toks


def _feeder_row(col: Collector, cells: _Cells, r: Row, seen: dict[str, int],
                block_names: set[str] | None, profile_names: set[str] | None
                ) -> Feeder | None:
    """One row of the ``feeders`` sheet (MW values), or None (its problems collected);
    ``seen`` maps feeder_id → first row and is updated."""
    sheet = "feeders"
    n0 = len(col.problems)
    fid = cells.text(r, "feeder_id")
    sub = cells.text(r, "substation")
    zone = cells.text(r, "zone", required=False)
    prof = cells.text(r, "profile")
    peak = cells.number(r, "peak_mw", minimum=0, maximum=1000, what="MW ≥ 0")
    pv = cells.number(r, "pv_mw", required=False, minimum=0, maximum=1000, what="MW ≥ 0")
    relay = cells.text(r, "relay")
    prio = cells.text(r, "priority", required=False)
    allowed_raw = cells.text(r, "allowed_blocks", required=False)
    tg = cells.text(r, "trip_group", required=False)
    cur = cells.text(r, "current_block", required=False)
    cust = cells.number(r, "customers", required=False, minimum=0, what="a count ≥ 0")
    remote = cells.text(r, "remote_switch", required=False)
    if remote is not None and remote.lower() not in ("yes", "no"):
        col.add(f"expected 'yes' or blank, found '{remote[:40]}'", sheet, r.number,
                "remote_switch")
    if fid is not None:
        if fid in seen:
            col.add(f"duplicate feeder_id '{fid}' (also row {seen[fid]})", sheet, r.number,
                    "feeder_id")
        seen.setdefault(fid, r.number)
    if prof is not None and profile_names is not None and prof not in profile_names:
        col.add(f"unknown profile '{prof}'; the profiles sheet defines "
                f"{', '.join(sorted(profile_names)) or 'none'}", sheet, r.number, "profile")
    if relay is not None:
        relay = relay.lower()
        if relay not in RELAY_KINDS:
            col.add(f"unknown relay '{relay}'; expected standard, direction_blocked or "
                    "none", sheet, r.number, "relay")
    if prio is not None and prio.lower() in ("no", "none", "false", "0"):
        prio = None
    allowed = _allowed_blocks(col, r, allowed_raw, block_names)
    if cur is not None and block_names is not None and cur not in block_names:
        col.add(f"current_block '{cur}' is not a block; blocks are "
                f"{', '.join(sorted(block_names))}", sheet, r.number, "current_block")
    if cust is not None and not float(cust).is_integer():
        col.add(f"expected a whole number of customers, found {cust}", sheet, r.number,
                "customers")
    if len(col.problems) > n0:
        return None
    return Feeder(fid, sub, zone, prof, peak, pv or 0.0, relay, prio, allowed, tg,
                  cur, int(cust) if cust is not None else None, r.number,
                  remote_switch=remote is not None and remote.lower() == "yes")


def _parse_feeders(col: Collector, rows: list[Row], block_names: set[str] | None,
                   profile_names: set[str] | None) -> list[Feeder]:
    """The ``feeders`` sheet: the feeders of the rows without problems (every problem
    collected)."""
    cells = _Cells(col, "feeders")
    feeders: list[Feeder] = []
    seen: dict[str, int] = {}
    for r in rows:
        f = _feeder_row(col, cells, r, seen, block_names, profile_names)
        if f is not None:
            feeders.append(f)
    if not rows:
        col.add("no feeders", "feeders", None, None)
    return feeders


def _cross_checks(col: Collector, settings: Settings | None, blocks: list[Block],
                  feeders: list[Feeder]) -> list[str]:
    sheet = "feeders"
    warnings: list[str] = []
    last = blocks[-1].name if blocks else None
    groups: dict[str, list[Feeder]] = {}
    for f in feeders:
        if f.trip_group:
            groups.setdefault(f.trip_group, []).append(f)
        if f.pv_mw > f.peak_mw > 0:
            warnings.append(f"feeder {f.feeder_id} (row {f.row}): PV {f.pv_mw:g} MW is larger "
                            f"than its peak load {f.peak_mw:g} MW; it will export at sunny "
                            "middays")
        if f.current_block:
            if f.relay == "none":
                col.add(f"feeder '{f.feeder_id}' has relay 'none' (cannot be armed) but "
                        f"current_block '{f.current_block}'", sheet, f.row, "current_block")
            if f.allowed_blocks is not None and f.current_block not in f.allowed_blocks:
                warnings.append(f"feeder {f.feeder_id} (row {f.row}): current_block "
                                f"{f.current_block} is outside its allowed_blocks")
            if f.priority and settings is not None:
                if settings.priority_policy == "exclude" or f.current_block != last:
                    warnings.append(f"feeder {f.feeder_id} (row {f.row}) is a priority site "
                                    f"({f.priority}) but armed in {f.current_block} against "
                                    f"priority_policy '{settings.priority_policy}'")
    for g, members in groups.items():
        kinds = {m.relay == "none" for m in members}
        if len(kinds) > 1:
            rows = ", ".join(str(m.row) for m in members)
            col.add(f"trip group '{g}' mixes armable feeders and relay 'none' feeders (rows "
                    f"{rows}); one relay trips them all, so all must be armable or none",
                    sheet, members[0].row, "trip_group")
        if len({m.current_block for m in members}) > 1:
            where = ", ".join(f"row {m.row}: {m.current_block or 'unarmed'}" for m in members)
            col.add(f"trip group '{g}' is split across blocks in current_block ({where}); one "
                    "relay trips them all, so they sit in one block or are all unarmed",
                    sheet, members[0].row, "current_block")
        if len({m.remote_switch for m in members}) > 1:
            rows = ", ".join(str(m.row) for m in members)
            col.add(f"trip group '{g}' mixes remote_switch yes and blank (rows {rows}); one "
                    "relay trips them all, so it is switched by schedule for all or none",
                    sheet, members[0].row, "remote_switch")
        if len({m.substation for m in members}) > 1:
            warnings.append(f"trip group {g} spans several substations")
    return warnings


_SCENARIO_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9 ._+-]{0,39}")


def _parse_pv(col: Collector, cells: "_Cells", r: Row, base: Path) -> tuple[str, str | None]:
    """The ``pv`` cell: ``clear_sky``, ``none`` or ``weather:FILE`` (FILE relative to the
    workbook's folder unless absolute).  Returns (kind, weather file path or None)."""
    raw = cells.text(r, "pv")
    if raw is None:
        return "", None
    kind, _, rest = raw.partition(":")
    kind = kind.strip().lower()
    if kind in ("clear_sky", "none") and not rest:
        return kind, None
    if kind == "weather" and rest.strip():
        f = Path(rest.strip())
        f = f if f.is_absolute() else base / f
        if not f.is_file():
            col.add(f"weather file not found: {f}", "scenarios", r.number, "pv")
            return "", None
        return "weather", str(f)
    col.add(f"expected clear_sky, none or weather:FILE (a TMY3 .csv or an .epw irradiance "
            f"file), found '{raw[:60]}'", "scenarios", r.number, "pv")
    return "", None


def _parse_scenarios(col: Collector, rows: list[Row], study_year: int | None,
                     base: Path) -> list[Scenario]:
    """The optional ``scenarios`` sheet; every problem collected."""
    sheet = "scenarios"
    cells = _Cells(col, sheet)
    out: list[Scenario] = []
    seen: dict[str, int] = {}
    for r in rows:
        n0 = len(col.problems)
        name = cells.text(r, "scenario")
        if name is not None:
            if not _SCENARIO_NAME.fullmatch(name):
                col.add(f"expected a name of 1-40 letters, digits, spaces or ._+- starting "
                        f"with a letter or digit, found '{name[:60]}'", sheet, r.number,
                        "scenario")
            elif name.lower() in seen:
                col.add(f"scenario '{name}' appears twice (also row {seen[name.lower()]})",
                        sheet, r.number, "scenario")
            seen.setdefault((name or "").lower(), r.number)
        kind, wfile = _parse_pv(col, cells, r, base)
        pv_scale = cells.number(r, "pv_scale", required=False, minimum=0, maximum=100,
                                what="a multiplier ≥ 0")
        load_scale = cells.number(r, "load_scale", required=False, maximum=100,
                                  what="a multiplier")
        if load_scale is not None and load_scale <= 0:
            col.add(f"expected a multiplier > 0, found {load_scale:g}", sheet, r.number,
                    "load_scale")
        year = cells.number(r, "year", required=False, minimum=1900, maximum=2200,
                            what="a year such as 2026")
        if year is not None and not float(year).is_integer():
            col.add(f"expected a whole year, found {year}", sheet, r.number, "year")
        if len(col.problems) > n0 or study_year is None and year is None:
            continue
        out.append(Scenario(name, kind, int(year) if year is not None else int(study_year),
                            1.0 if pv_scale is None else pv_scale,
                            1.0 if load_scale is None else load_scale, wfile, r.number))
    if not rows:
        col.add("the scenarios sheet has no rows; delete it to use the default scenarios "
                "(clear_sky and no_pv)", sheet, None, None)
    return out


def _weather_problems(col: Collector, scenarios: list[Scenario], settings: Settings | None,
                      warnings: list[str]) -> None:
    """Read every weather file once so a bad one is reported with the workbook's problems,
    and compare its site with the study's (:func:`_weather_site`)."""
    from .weather import read_weather

    for sc in {s.weather_file: s for s in scenarios if s.pv == "weather"}.values():
        try:
            w = read_weather(sc.weather_file)
        except InputError as exc:
            col.extend(exc.problems)
            continue
        if settings is not None:
            for msg in _weather_site(w, settings):
                if settings.weather_strict:
                    col.add(msg, "scenarios", sc.row, "pv")
                else:
                    warnings.append(f"scenarios row {sc.row}: {msg}")


def _weather_site(w, settings: Settings) -> list[str]:
    """A weather file farther than ``weather_max_distance_km`` from the study site, or one
    that keeps another standard time than the study's zone, named with both."""
    import pandas as pd

    from .weather import site_distance_km, zone_standard_offset

    out = []
    name = Path(w.path).name
    km = site_distance_km(w, settings.latitude_deg, settings.longitude_deg)
    if km > settings.weather_max_distance_km:
        out.append(f"weather file {name} is for {w.site_name} ({w.latitude_deg:.2f}°, "
                   f"{w.longitude_deg:.2f}°), {km:.0f} km from the study site "
                   f"({settings.latitude_deg:.2f}°, {settings.longitude_deg:.2f}°); more than "
                   f"weather_max_distance_km = {settings.weather_max_distance_km:g}")
    year = pd.date_range(f"{settings.year}-01-01", f"{settings.year + 1}-01-01", freq="D",
                         tz="UTC")
    std = zone_standard_offset(year, settings.timezone).total_seconds() / 3600.0
    if abs(std - w.utc_offset_h) > 1e-9:
        out.append(f"weather file {name} keeps standard time UTC{w.utc_offset_h:+g} h; the "
                   f"study zone {settings.timezone} keeps UTC{std:+g} h")
    return out


def _open_sheets(p: Path, col: Collector) -> dict[str, tuple[list[str], list[Row]]]:
    """Every sheet of the workbook at ``p``; raises when the file is missing, a folder, not
    readable or lacks a required sheet."""
    if not p.exists():
        col.add("file not found")
        col.raise_if_any()
    if p.is_dir():
        col.add("is a folder, expected an .xlsx workbook")
        col.raise_if_any()
    sheets = _read_sheets(p, col)
    for s in REQUIRED_SHEETS:
        if s not in sheets:
            col.add(f"missing sheet '{s}' (found: {', '.join(sheets) or 'none'})", s)
    col.raise_if_any()
    return sheets


def _parse_required(col: Collector, sheets: dict[str, tuple[list[str], list[Row]]]
                    ) -> tuple[Settings | None, list[str], list[Block], np.ndarray,
                               Profiles | None, list[Feeder]]:
    """The required sheets: (settings, warnings, blocks, season index per month, profiles,
    feeders), each sheet read only when its header has the required columns."""
    h, rows = sheets["settings"]
    settings, warnings = (None, [])
    if _require_columns(col, "settings", h, ("key", "value")):
        settings, warnings = _parse_settings(col, rows)
    h, rows = sheets["blocks"]
    blocks: list[Block] = []
    declared_blocks: set[str] | None = None  # None: the blocks sheet cannot be read
    if _require_columns(col, "blocks", h, BLOCK_COLUMNS):
        blocks = _parse_blocks(col, rows)
        # every name on the sheet, also of blocks with a bad cell: a feeder naming one is
        # not itself wrong
        declared_blocks = {_text(r.values["block"]) for r in rows
                           if not _blank(r.values.get("block"))}
    h, rows = sheets["seasons"]
    seasons, month_season = [], np.zeros(12, dtype=np.intp)
    if _require_columns(col, "seasons", h, SEASON_COLUMNS):
        seasons, month_season = _parse_seasons(col, rows)
    h, rows = sheets["profiles"]
    profiles = None
    profiles_ok = _require_columns(col, "profiles", h, PROFILE_COLUMNS)
    if profiles_ok:
        profiles = _parse_profiles(col, rows, seasons)
    h, rows = sheets["feeders"]
    feeders: list[Feeder] = []
    if _require_columns(col, "feeders", h, FEEDER_COLUMNS):
        pnames = set(profiles.names) if profiles is not None else (
            None if not profiles_ok else set())
        feeders = _parse_feeders(col, rows, declared_blocks, pnames)
    return settings, warnings, blocks, month_season, profiles, feeders


def _parse_system_sheet(col: Collector, sheets: dict[str, tuple[list[str], list[Row]]]
                        ) -> tuple[dict[str, object], dict[str, int]]:
    """The optional ``system`` sheet as (key → raw value, key → row)."""
    system: dict[str, object] = {}
    system_rows: dict[str, int] = {}
    if "system" in sheets:
        h, rows = sheets["system"]
        if _require_columns(col, "system", h, ("key", "value")):
            for r in rows:
                k = r.values.get("key")
                if _blank(k):
                    col.add("blank key", "system", r.number, "key")
                    continue
                system[_text(k).lower()] = r.values.get("value")
                system_rows[_text(k).lower()] = r.number
    return system, system_rows


def _parse_optional(col: Collector, sheets: dict[str, tuple[list[str], list[Row]]],
                    settings: Settings | None, p: Path, warnings: list[str]
                    ) -> tuple[list[Scenario], list[Period]]:
    """The optional ``scenarios`` (with their weather files) and ``periods`` sheets."""
    scenarios: list[Scenario] = []
    if "scenarios" in sheets:
        h, rows = sheets["scenarios"]
        if _require_columns(col, "scenarios", h, SCENARIO_COLUMNS):
            scenarios = _parse_scenarios(col, rows, settings.year if settings else None,
                                         p.resolve().parent)
            _weather_problems(col, scenarios, settings, warnings)
    periods: list[Period] = []
    if "periods" in sheets:
        h, rows = sheets["periods"]
        if _require_columns(col, "periods", h, PERIOD_COLUMNS):
            periods = _parse_periods(col, rows, settings.interval_minutes if settings else None)
    return scenarios, periods


def read_study(path: str | os.PathLike) -> Study:
    """Read, validate and type the workbook at ``path``.

    Raises :class:`~allocator.errors.InputError` listing every problem found.
    """
    p = Path(path)
    col = Collector(str(p))
    sheets = _open_sheets(p, col)
    settings, warnings, blocks, month_season, profiles, feeders = _parse_required(col, sheets)
    warnings += _cross_checks(col, settings, blocks, feeders)
    system, system_rows = _parse_system_sheet(col, sheets)
    scenarios, periods = _parse_optional(col, sheets, settings, p, warnings)
    _explain_formula_blanks(p, col, {name: h for name, (h, _) in sheets.items()})
    col.raise_if_any()
    assert settings is not None and profiles is not None
    profiles = Profiles(profiles.names, profiles.seasons, profiles.values_pu, month_season,
                        profiles.resolution_minutes)
    study = Study(str(p), settings, tuple(blocks), tuple(feeders), profiles,
                  system={"values": system, "rows": system_rows}, warnings=(),
                  scenario_list=tuple(scenarios), period_list=tuple(periods))
    warnings += _scheme_warnings(study)
    if any(f.remote_switch for f in feeders) and not periods:
        warnings.append("feeders have remote_switch yes but there is no periods sheet: with "
                        "one period they keep one block all year")
    return Study(study.path, settings, study.blocks, study.feeders, profiles,
                 system=study.system, warnings=tuple(warnings),
                 scenario_list=study.scenario_list, period_list=study.period_list)


def _scheme_warnings(study: Study) -> list[str]:
    """Non-fatal warnings about the scheme as a whole, at the feeders' nominal peaks."""
    out: list[str] = []
    allowed = study.allowed_matrix()
    armable = allowed.any(axis=1)
    total = float(study.peak_mw.sum())
    if total <= 0:
        return ["total feeder peak is 0 MW"]
    armable_pct = 100.0 * float(study.peak_mw[armable].sum()) / total
    need = sum(b.target_pct for b in study.blocks)
    need_min = sum(b.min_pct for b in study.blocks)
    if need > armable_pct:
        out.append(f"block targets add to {need:g} % of demand but armable load is only "
                   f"{armable_pct:.1f} % of total peak (minima add to {need_min:g} %)")
    for j, b in enumerate(study.blocks):
        share = 100.0 * float(study.peak_mw[allowed[:, j]].sum()) / total
        if b.target_pct > share:
            out.append(f"block {b.name}: target {b.target_pct:g} % is above the "
                       f"{share:.1f} % of peak that may be armed in it")
    return out + _operating_time_warnings(study)


def _breaker_time_s(study: Study) -> float | None:
    """``breaker_time_s`` of the optional ``system`` sheet, else the frequency model's
    default; None when the sheet's value is bad (the frequency command reports it)."""
    from .system import SystemParams, system_params_from_mapping

    raw = (study.system or {}).get("values", {}).get("breaker_time_s")
    if raw is None or (isinstance(raw, str) and not raw.strip()):
        return SystemParams.breaker_time_s
    try:
        return system_params_from_mapping({"breaker_time_s": raw}, study.settings.nominal_hz,
                                          study.path).breaker_time_s
    except InputError:
        return None


def _operating_time_warnings(study: Study) -> list[str]:
    """Blocks whose delay_s + breaker_time_s exceeds :data:`MAX_OPERATING_TIME_S`."""
    breaker_s = _breaker_time_s(study)
    if breaker_s is None:
        return []
    out = []
    for b in study.blocks:
        total_s = b.delay_s + breaker_s
        if total_s > MAX_OPERATING_TIME_S + 1e-9:
            out.append(f"block {b.name}: delay {b.delay_s:g} s + breaker {breaker_s:g} s = "
                       f"{total_s:g} s from the frequency crossing to load disconnected, "
                       f"longer than the {MAX_OPERATING_TIME_S:g} s usually aimed at "
                       "(a rule of thumb; the system operator's settings govern)")
    return out
