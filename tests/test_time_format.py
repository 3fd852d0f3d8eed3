"""One time format: ISO 8601 local time with its UTC offset in every CSV and JSON the tool
writes, real date cells plus an offset column in report.xlsx, and never a date without its
year (figures included).

Outside references:

* ISO 8601 (extended format, local time with the offset from UTC: ``2025-06-02T03:00+02:00``;
  UTC with ``Z``), read back with Python's ``datetime.fromisoformat``.
* ECMA-376 Part 1 (SpreadsheetML), §18.17.4: a date cell is a serial day number with a date
  number format and carries no time zone, so the offset needs a column of its own; read back
  with openpyxl.
* Europe/Berlin is UTC+01:00 in winter and UTC+02:00 in summer (EU summer time, Directive
  2000/84/EC; from memory).

The study and the metered file are invented test data (tests/smallnet.py).
"""

from __future__ import annotations

import csv
import datetime
import json
import re
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from allocator.cli import main
from allocator.report import figures as F
from allocator.report import content
from allocator.scenarios import build_years
from allocator.check import run_checks
from allocator.workbook import read_study
from smallnet import write_small_study

#: anything that looks like a date and time
DATE_LIKE = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2})?(?:Z|[+-]\d{2}:?\d{2})?")
#: the one local form, and UTC with Z (armed_load.csv timestamp_utc only)
ISO_LOCAL = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}[+-]\d{2}:\d{2}")
ISO_UTC = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}Z")
#: a date without its year: "06-02 03:00", "02 Jun", "Jun 02"
NO_YEAR = re.compile(r"(?<![\d-])\d{2}-\d{2} \d{2}:\d{2}|\b\d{1,2} (?:Jan|Feb|Mar|Apr|May|Jun|"
                     r"Jul|Aug|Sep|Oct|Nov|Dec)\b(?! \d{4})")


def _metered(path: Path) -> Path:
    """F00 metered all year (hourly, UTC with Z) but for a 5-hour gap on 5 January."""
    t = pd.date_range("2024-12-31T23:00Z", periods=8760, freq="h")
    keep = np.ones(len(t), dtype=bool)
    keep[100:105] = False
    pd.DataFrame({"timestamp": t[keep].strftime("%Y-%m-%dT%H:%M:%SZ"), "feeder_id": "F00",
                  "mw": 1.0}).to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = tmp_path_factory.mktemp("timefmt")
    wb = write_small_study(d)
    met = _metered(d / "m.csv")
    for argv in (["check", str(wb), "--metered", str(met), "--out", str(d / "check"),
                  "--format", "xlsx"],
                 ["plan", str(wb), "--out", str(d / "plan"), "--format", "none",
                  "--time-limit", "5"],
                 ["frequency", str(wb), "--out", str(d / "freq"), "--format", "none"]):
        assert main(argv + ["--quiet"]) == 0, argv
    return d


def _strings(obj, where=""):
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _strings(v, f"{where}.{k}")
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from _strings(v, f"{where}[{i}]")
    elif isinstance(obj, str):
        yield where, obj


def _cells(path: Path):
    with open(path, newline="", encoding="utf-8") as fh:
        r = csv.reader(fh)
        head = next(r)
        for row in r:
            for h, v in zip(head, row):
                yield h, v


def test_every_csv_and_json_time_is_iso_8601_with_offset(runs):
    files = sorted(p for p in runs.rglob("*") if p.suffix in (".csv", ".json"))
    names = {p.relative_to(runs).as_posix() for p in files}
    assert {"check/summary.json", "check/armed_load.csv", "plan/plan.json",
            "freq/frequency.csv", "freq/frequency.json"} <= names
    seen = 0
    for p in files:
        if p.name == "m.csv":
            continue  # the input
        items = (_cells(p) if p.suffix == ".csv" else
                 _strings(json.loads(p.read_text(encoding="utf-8"))))
        for where, text in items:
            assert not NO_YEAR.search(text), (p.name, where, text)
            for m in DATE_LIKE.finditer(text):
                seen += 1
                ok = ISO_LOCAL.fullmatch(m.group()) or (
                    where == "timestamp_utc" and ISO_UTC.fullmatch(m.group()))
                assert ok, (p.name, where, text)
                datetime.datetime.fromisoformat(m.group().replace("Z", "+00:00"))
    assert seen > 1000
    # the metered notes and flags carry times too, in the same form (winter: +01:00)
    summ = json.loads((runs / "check" / "summary.json").read_text(encoding="utf-8"))
    gap = [w for w in summ["warnings"] if "longest gap" in w]
    assert gap and "2025-01-05T04:00+01:00" in gap[0], gap


def test_xlsx_times_are_date_cells_with_their_offset(runs):
    """ECMA-376 date cells carry no zone: each local time is a date cell (openpyxl reads a
    datetime) with a UTC offset column beside it, and local − offset = the instant of the
    ISO 8601 text in the CSV."""
    wb = openpyxl.load_workbook(runs / "check" / "report.xlsx")
    with open(runs / "check" / "shortfalls.csv", newline="", encoding="utf-8") as fh:
        windows = list(csv.DictReader(fh))
    assert windows
    ws = wb["windows"]
    head = [c.value for c in ws[1]]
    for name, col in (("start", "start_local"), ("end", "end_local")):
        k, o = head.index(f"{name} (local)"), head.index(f"{name} UTC offset h")
        for row, w in zip(ws.iter_rows(min_row=2, values_only=True), windows):
            t = datetime.datetime.fromisoformat(w[col])
            assert isinstance(row[k], datetime.datetime) and row[k] == t.replace(tzinfo=None)
            assert row[o] == t.utcoffset().total_seconds() / 3600
    for sheet, header in (("blocks", "time of lowest share"),
                          ("exports", "time of largest export")):
        ws = wb[sheet]
        head = [c.value for c in ws[1]]
        k, o = head.index(f"{header} (local)"), head.index(f"{header} UTC offset h")
        rows = list(ws.iter_rows(min_row=2, values_only=True))
        assert rows and all(isinstance(r[k], datetime.datetime) for r in rows)
        # Europe/Berlin: +1 h in winter, +2 h in summer (from memory)
        assert {r[o] for r in rows} <= {1.0, 2.0}
        assert all(r[o] == (2.0 if 3 < r[k].month < 10 else r[o]) for r in rows)
    summary = [r for r in wb["summary"].iter_rows(values_only=True)]
    i = next(i for i, r in enumerate(summary) if r[0] == "rank" and "start (local)" in r)
    assert isinstance(summary[i + 1][summary[i].index("start (local)")], datetime.datetime)


def test_figures_show_dates_with_their_year(runs):
    study = read_study(runs / "small.xlsx")
    cs = run_checks(study, build_years(study), study.current_assignment)
    check = cs.checks[0]
    fig, _, _ = F.feeder_classes(check, content.feeder_contrib(check))
    ticks = [t.get_text() for t in fig.axes[1].get_xticklabels()]
    assert ticks and all(ISO_LOCAL.search(t) for t in ticks), ticks
    fig, _, _ = F.worst_windows(cs)
    labels = [t.get_text() for t in fig.axes[0].get_yticklabels()]
    assert any(ISO_LOCAL.search(t) for t in labels), labels
    for t in ticks + labels:
        assert not NO_YEAR.search(t), t
