"""Checks of the reports package (allocator.report): report.xlsx, figures/*.png, report.html.

Outside references used here, each named again beside its check:

* The xlsx format: ECMA-376 Office Open XML, Part 1 (SpreadsheetML: ``c``/``v``/``is``/``f``
  elements, ``t="inlineStr"``, ``quotePrefix``), read back with openpyxl.
* OWASP "CSV Injection" (formula injection) guidance: cells starting with ``=``, ``+``, ``-``
  or ``@`` must not become formulas.
* The PNG format: W3C/ISO-IEC 15948 PNG specification (8-byte signature, chunk layout,
  ``IHDR`` size, ``tEXt``/``tIME`` chunks).
* HTML escaping: Python's ``html.escape``; "no external resource" judged on the page's
  ``src``/``href``/``srcset``/``url()`` references and on what headless Chromium fetches.

The study data (feeders, shapes, blocks) is invented test data.
"""

from __future__ import annotations

import datetime
import html
import json
import os
import re
import shutil
import socket
import struct
import subprocess
import tempfile
import threading
import time
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from matplotlib import image as mpimg

from allocator.check import run_check, summary_dict
from allocator.report.content import STATUS_WORDS
from allocator.errors import InputError
from allocator.field.plan import field_plan
from allocator.files import write_check_files
from allocator.report import FORMATS, parse_formats, write_reports
from allocator.report import figures as F
from allocator.report.content import CAUTIONS
from allocator.report.excel import BLOCK_COLUMNS
from allocator.report.xlsxtable import Col, clean_text, save, table_sheet
from allocator.workbook import read_study
from allocator.year import build_year
from wbfactory import BASE_SETTINGS, flat_profiles, write_workbook

FORMULA_ID = '=HYPERLINK("x")'
AT_ID = "@SUM(A1)"
MINUS_ID = "-F2"
MARKUP_ID = "<b>F3</b>&x"
SEASONS = [{"season": "winter", "months": "1,2,3,10,11,12"},
           {"season": "summer", "months": "4,5,6,7,8,9"}]


def _shape(p, s, d, m):
    h = m / 60.0
    if p == "res":  # evening peak
        return 0.35 + 0.5 * np.exp(-0.5 * ((h - 19) / 2.0) ** 2)
    return 0.3 + 0.6 * (1.0 if 8 <= h < 18 and d == "workday" else 0.2)  # "com": office hours


def _feeders():
    rows = []
    spec = [  # id, profile, peak, pv, relay, priority, current block
        (FORMULA_ID, "com", 6.0, 0.0, "standard", None, "S1"),
        (AT_ID, "res", 4.0, 5.0, "standard", None, "S2"),
        (MINUS_ID, "res", 4.0, 0.5, "standard", None, "S1"),
        (MARKUP_ID, "res", 5.0, 6.0, "standard", None, "S2"),
        ("F04", "com", 7.0, 0.0, "standard", None, None),
        ("F05", "res", 6.0, 1.0, "direction_blocked", None, "S2"),
        ("F06", "com", 8.0, 0.0, "standard", "hospital", None),
        ("F07", "res", 5.0, 0.0, "standard", None, None),
        ("F08", "com", 9.0, 0.0, "standard", None, None),
        ("F09", "res", 6.0, 0.5, "none", None, None),
    ]
    for i, (fid, prof, peak, pv, relay, prio, cur) in enumerate(spec):
        rows.append({"feeder_id": fid, "substation": f"SUB{i % 3}", "zone": "Z",
                     "profile": prof, "peak_mw": peak, "pv_mw": pv, "relay": relay,
                     "priority": prio, "allowed_blocks": None, "trip_group": None,
                     "current_block": cur, "customers": 100 + i})
    return rows


def _force_text(path: Path) -> Path:
    """wbfactory writes a cell starting with '=' as a formula; store the ids as text."""
    wb = openpyxl.load_workbook(path)
    for row in wb["feeders"].iter_rows():
        for c in row:
            if c.data_type == "f":
                c.data_type = "s"
    wb.save(path)
    return path


def _study(tmp: Path, name="study.xlsx", settings=None, blocks=None):
    s = dict(BASE_SETTINGS)
    s.update(settings or {})
    p = write_workbook(tmp / name, settings=s, feeders=_feeders(), blocks=blocks,
                       profiles=flat_profiles(("res", "com"), ("winter", "summer"), _shape),
                       seasons=SEASONS)
    return read_study(_force_text(p))


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    study = _study(tmp)
    year = build_year(study)
    chk = run_check(study, year, study.current_assignment)
    out = tmp / "out"
    out.mkdir()
    paths = write_reports(chk, out)
    write_check_files(chk, out / "csv")
    return {"study": study, "year": year, "check": chk, "out": out, "paths": paths}


@pytest.fixture(scope="module")
def plan_case(case, tmp_path_factory):
    """A 'plan': two feeders moved, one armed, one disarmed; with plan_info and before."""
    study, year, before = case["study"], case["year"], case["check"]
    ids = list(study.feeder_ids)
    new = study.current_assignment.copy()
    new[ids.index(MARKUP_ID)] = 0  # S2 -> S1
    new[ids.index(FORMULA_ID)] = 1  # S1 -> S2
    new[ids.index("F04")] = 1  # unarmed -> S2
    new[ids.index(AT_ID)] = -1  # S2 -> unarmed
    chk = run_check(study, year, new)
    out = tmp_path_factory.mktemp("plan")
    info = {"status": "in_band", "solve_seconds": 1.5, "objective": "fewest_changes",
            "relays_changed": 4, "feeders_changed": 4,
            "explanation": ["moved <two> feeders", "=1+1 is not a formula"]}
    paths = write_reports(chk, out, field=field_plan(chk, study.current_assignment),
                          plan_info=info, before=before)
    return {"check": chk, "before": before, "out": out, "paths": paths, "new": new,
            "info": info, "study": study}


# ============================================================================================
# parse_formats
# ============================================================================================
def test_parse_formats_accepts():
    assert parse_formats(None) == {"xlsx", "html", "png"}
    assert parse_formats("none") == set()
    assert parse_formats("NONE") == set()
    assert parse_formats("xlsx") == {"xlsx"}
    assert parse_formats(" html , png ") == {"html", "png"}
    assert parse_formats("all") == set(FORMATS)
    assert parse_formats("xlsx,xlsx") == {"xlsx"}


@pytest.mark.parametrize("text", ["pdf", "xlsx,docx", "", ",", "none,xlsx"])
def test_parse_formats_rejects(text):
    with pytest.raises(InputError) as e:
        parse_formats(text)
    assert all(p.file == "--format" for p in e.value.problems)


# ============================================================================================
# workbook
# ============================================================================================
SHEETS = ["summary", "statement", "work_list", "visit_order", "scenarios", "blocks", "feeders",
          "intervals", "windows", "exports", "substations"]


def test_workbook_sheets_and_headers(case):
    chk = case["check"]
    wb = openpyxl.load_workbook(case["out"] / "report.xlsx")
    assert wb.sheetnames == SHEETS
    want = ["scenario"]
    for _, h, kind, _ in BLOCK_COLUMNS:  # a local time: date cell plus its offset column
        want += [f"{h} (local)", f"{h} UTC offset h"] if kind == "time" else [h]
    assert [c.value for c in wb["blocks"][1]][:len(want)] == want
    head = [c.value for c in wb["feeders"][1]]
    for h in ("feeder", "substation", "zone", "profile (feeder class)", "relay",
              "priority site", "block", "pickup Hz", "time delay s", "RoCoF setting Hz/s",
              "previous block", "changed", "mean net MW", "min net MW", "max net MW",
              "share of its block %"):
        assert h in head
    iv = [c.value for c in wb["intervals"][1]]
    assert iv[:5] == ["scenario", "local time (Europe/Berlin)", "UTC offset h", "UTC time",
                      "netted demand MW"]
    assert iv[5:] == ["S1 armed MW", "S1 share %", "S2 armed MW", "S2 share %"]
    ws = wb["intervals"]
    assert ws.max_row == chk.year.n_intervals + 1
    assert ws.freeze_panes == "C2"
    assert ws.auto_filter.ref == f"A1:I{chk.year.n_intervals + 1}"
    for name in ("blocks", "feeders", "intervals"):
        assert wb[name].freeze_panes in ("A2", "B2", "C2")
    # number formats (MW 0.00, % 0.0) on the data cells
    assert ws["E2"].number_format == "0.00" and ws["G2"].number_format == "0.0"
    assert ws["B2"].number_format == "yyyy-mm-dd hh:mm"
    assert ws.column_dimensions["B"].width >= 15
    # the work list: current allocation -> one line saying so
    rc = wb["work_list"]
    assert rc.max_row == 2 and "No relay changes" in rc["A2"].value
    # summary: verdict, rule, year, utility, legend and cautions
    text = "\n".join(str(c.value) for row in wb["summary"].iter_rows() for c in row
                     if c.value is not None)
    assert ("NOT COMPLIANT" if not chk.compliant else "COMPLIANT") in text
    assert "every_interval" in text and "Test Utility" in text and "2025" in text
    assert "below the band's minimum" in text and "above the band's maximum" in text
    for c in CAUTIONS:
        assert c in text


def test_intervals_values_round_trip(case):
    """The interval rows read back (openpyxl) as the very floats of the check; NaN shares
    (demand <= 0) as empty cells; times as local and UTC wall-clock times."""
    chk = case["check"]
    y = chk.year
    wb = openpyxl.load_workbook(case["out"] / "report.xlsx", read_only=True)
    rows = list(wb["intervals"].iter_rows(min_row=2, max_row=200, values_only=True))
    for k, r in enumerate(rows):
        assert r[0] == chk.scenario
        assert r[1] == y.local_times[k].tz_localize(None).to_pydatetime()
        # local = UTC + offset (Excel cells carry no zone: ECMA-376 date cells are serial
        # day numbers, so the offset is its own column)
        assert r[2] == (y.local_times[k].utcoffset().total_seconds() / 3600)
        assert r[3] == y.timestamps_utc[k].tz_localize(None).to_pydatetime()
        assert r[1] - r[3] == pd.Timedelta(hours=r[2]).to_pytimedelta()
        assert r[4] == y.demand_mw[k]
        for j in range(len(chk.blocks)):
            assert r[5 + 2 * j] == chk.armed_mw[j, k]
            assert r[6 + 2 * j] == chk.share_pct[j, k]
    wb.close()


def test_blocks_sheet_equals_summary_json(case):
    """Every statistic in the blocks sheet is the value summary.json holds (same rounding),
    and within 1e-9 of summary_dict(check)."""
    chk = case["check"]
    js = json.loads((case["out"] / "csv" / "summary.json").read_text())["blocks"]
    sd = summary_dict(chk)["blocks"]
    ws = openpyxl.load_workbook(case["out"] / "report.xlsx")["blocks"]
    head = [c.value for c in ws[1]]
    for i, (jrow, drow) in enumerate(zip(js, sd)):
        values = {h: c.value for h, c in zip(head, ws[i + 2])}
        for key, header, kind, _ in BLOCK_COLUMNS:
            if key not in jrow:
                continue
            if kind == "time":
                # ISO 8601 text in JSON (read with datetime.fromisoformat); in the xlsx a
                # zone-less date cell (ECMA-376 serial date) and the offset beside it
                t = datetime.datetime.fromisoformat(jrow[key])
                assert values[f"{header} (local)"] == t.replace(tzinfo=None)
                assert values[f"{header} UTC offset h"] == t.utcoffset().total_seconds() / 3600
                continue
            v = values[header]
            if kind == "bool":
                # booleans people read: yes/no in the xlsx, true/false in JSON (README)
                assert v == {True: "yes", False: "no"}[jrow[key]], (key, v, jrow[key])
                continue
            assert v == jrow[key], (key, v, jrow[key])
            if kind == "num" and jrow[key] is not None:
                assert abs(v - drow[key]) <= 1e-9
            if kind in ("text", "bool", "int"):
                assert v == drow[key]


def test_conditional_formats_and_legend(case):
    wb = openpyxl.load_workbook(case["out"] / "report.xlsx")
    chk = case["check"]
    n = chk.year.n_intervals + 1
    cf = wb["intervals"].conditional_formatting
    found = {}
    for rng in cf:
        for rule in rng.rules:
            found[(str(rng.sqref), rule.operator)] = (rule.formula,
                                                      rule.dxf.fill.fgColor.rgb[-6:])
    b = chk.blocks[0]
    lo = found[(f"G2:G{n}", "lessThan")]
    hi = found[(f"G2:G{n}", "greaterThan")]
    assert float(lo[0][0]) == b.min_pct and float(hi[0][0]) == b.max_pct
    assert lo[1] != hi[1]  # two distinct fills
    ws = wb["blocks"]
    rules = [(str(r.sqref), x.operator, x.formula) for r in ws.conditional_formatting
             for x in r.rules]
    assert any(op == "lessThan" and f == ["$I2"] for _, op, f in rules)  # band min column
    assert any(op == "greaterThan" and f == ["$J2"] for _, op, f in rules)
    # the legend on the summary sheet carries the same two fills
    fills = {c.fill.fgColor.rgb[-6:]: c.value for row in wb["summary"].iter_rows()
             for c in row if c.fill is not None and c.fill.fill_type == "solid"}
    assert fills.get(lo[1]) == "below the band's minimum"
    assert fills.get(hi[1]) == "above the band's maximum"


def _feeder_cell(path: Path, fid: str):
    ws = openpyxl.load_workbook(path)["feeders"]
    for row in ws.iter_rows(min_row=2, max_col=1):
        if row[0].value == fid:
            return row[0]
    raise AssertionError(f"{fid} not in the feeders sheet")


@pytest.mark.parametrize("fid", [FORMULA_ID, AT_ID, MINUS_ID, MARKUP_ID])
def test_formula_like_ids_are_text(case, fid):
    """OWASP formula-injection guidance: ids starting with = @ - stay text.  In the saved
    package (ECMA-376) the cell is an inline string with quotePrefix, and no <f> element
    holds the formula."""
    path = case["out"] / "report.xlsx"
    cell = _feeder_cell(path, fid)
    assert cell.data_type == "s" and cell.value == fid
    assert cell.quotePrefix
    with zipfile.ZipFile(path) as z:
        for name in z.namelist():
            if name.startswith("xl/worksheets/sheet"):
                xml = z.read(name).decode("utf-8")
                assert "HYPERLINK" not in "".join(re.findall(r"<f>(.*?)</f>", xml))
                assert "<f>" not in xml and "<f " not in xml
    esc = html.escape(fid, quote=False)
    pat = re.compile(r'<c r="A\d+"[^>]*t="inlineStr"[^>]*><is><t[^>]*>' + re.escape(esc) + "<")
    with zipfile.ZipFile(path) as z:
        hits = [n for n in z.namelist() if n.startswith("xl/worksheets/sheet")
                and pat.search(z.read(n).decode("utf-8"))]
    assert hits, "feeder id not stored as an inline string"


def test_plan_workbook(plan_case):
    path = plan_case["out"] / "report.xlsx"
    wb = openpyxl.load_workbook(path)
    rc = wb["work_list"]
    head = [c.value for c in rc[1]]
    rows = [dict(zip(head, [c.value for c in r])) for r in rc.iter_rows(min_row=2)]
    assert len(rows) == 4
    by_id = {r["feeder(s)"]: r for r in rows}
    assert [by_id[MARKUP_ID][k] for k in ("action", "now: block", "new: block")] == \
        ["move", "S2", "S1"]
    assert by_id[MARKUP_ID]["new: pickup Hz"] == plan_case["study"].blocks[0].pickup_hz
    assert [by_id["F04"][k] for k in ("action", "now: block", "new: block")] == \
        ["arm", "unarmed", "S2"]
    assert [by_id[AT_ID][k] for k in ("action", "now: block", "new: block")] == \
        ["disarm", "S2", "unarmed"] and by_id[AT_ID]["new: pickup Hz"] is None
    # feeders sheet: previous block and changed flag
    ws = wb["feeders"]
    head = [c.value for c in ws[1]]
    data = {r[0]: dict(zip(head, r)) for r in ws.iter_rows(min_row=2, values_only=True)}
    assert data[MARKUP_ID]["previous block"] == "S2" and data[MARKUP_ID]["block"] == "S1"
    assert data[MARKUP_ID]["changed"] == "yes" and data["F07"]["changed"] == "no"
    # shares of a block's feeders add up to 100 %
    for b in ("S1", "S2"):
        tot = sum(r["share of its block %"] for r in data.values() if r["block"] == b)
        assert tot == pytest.approx(100.0)
    # summary: plan status and explanation, as text (never formulas)
    cells = [c for row in wb["summary"].iter_rows() for c in row if c.value is not None]
    values = [c.value for c in cells]
    assert STATUS_WORDS["in_band"] in values and "=1+1 is not a formula" in values
    assert all(c.data_type != "f" for c in cells)
    # blocks sheet: the before columns
    head = [c.value for c in wb["blocks"][1]]
    assert "current allocation: lowest share %" in head
    i = head.index("current allocation: lowest share %")
    assert wb["blocks"].cell(2, i + 1).value == pytest.approx(
        plan_case["before"].stats[0].min_share_pct, abs=1e-9)


@pytest.mark.slow
def test_workbook_35040_rows(tmp_path):
    """A year of 15-minute intervals with five blocks (15 interval columns) is written whole
    (its speed is measured in bench/bench_check.py, not here)."""
    from allocator.report.excel import write_workbook as write_report_xlsx

    blocks = [{"block": f"S{k}", "order": k, "pickup_hz": 49.0 - 0.2 * k, "delay_s": 0.1,
               "rocof_hz_per_s": None, "target_pct": 8, "min_pct": 6, "max_pct": 10}
              for k in range(1, 6)]
    feeders = _feeders()
    for i, f in enumerate(feeders):
        f["current_block"] = None if f["relay"] == "none" or f["priority"] else f"S{i % 5 + 1}"
    s = dict(BASE_SETTINGS, interval_minutes=15)
    p = write_workbook(tmp_path / "q.xlsx", settings=s, feeders=feeders, blocks=blocks,
                       profiles=flat_profiles(("res", "com"), ("winter", "summer"), _shape),
                       seasons=SEASONS)
    study = read_study(_force_text(p))
    year = build_year(study)
    chk = run_check(study, year, study.current_assignment)
    assert year.n_intervals == 35040
    out = write_report_xlsx(chk, tmp_path / "report.xlsx")
    wb = openpyxl.load_workbook(out, read_only=True)
    ws = wb["intervals"]
    assert ws.max_row == 35041 and ws.max_column == 15
    last = next(ws.iter_rows(min_row=35041, max_row=35041, values_only=True))
    assert last[4] == year.demand_mw[-1] and last[-1] == chk.share_pct[-1, -1]
    wb.close()


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.text(min_size=1, max_size=40), min_size=1, max_size=5))
def test_table_text_round_trips(texts):
    """Any text (XML specials, leading = + - @, control characters) comes back from the
    saved package as the same text less what XML 1.0 forbids (ECMA-376 inline strings)."""
    wb = openpyxl.Workbook()
    t = table_sheet(wb, "t", [Col("text", texts, "text"), Col("n", list(range(len(texts))),
                                                                "int")])
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "t.xlsx"
        save(wb, p, [t])
        ws = openpyxl.load_workbook(p)["t"]
        got = [ws.cell(2 + k, 1).value for k in range(len(texts))]
        types = {ws.cell(2 + k, 1).data_type for k in range(len(texts))}
    want = [clean_text(x) or None for x in texts]
    # openpyxl drops a text cell that holds nothing but removed characters
    assert got == want
    assert types <= {"s", "n"}


def test_table_fallback_matches_fast_path(tmp_path):
    """The cell-by-cell openpyxl path (used only if openpyxl's output changes shape) reads
    back the same as the fast one."""
    import pandas as pd

    def build(fast: bool) -> Path:
        wb = openpyxl.Workbook()
        cols = [Col("t", [FORMULA_ID, None, "a&b"], "text"),
                Col("x", [1.5, np.nan, 1 / 3], "num", "0.00"),
                Col("n", [1, 2, 3], "int", "0"), Col("b", [True, False, True], "bool"),
                Col("d", pd.DatetimeIndex(["2025-01-01 00:00", "2025-03-30 01:00",
                                           "2025-12-31 23:15"]), "date")]
        t = table_sheet(wb, "t", cols)
        t.fast = fast
        path = tmp_path / f"{fast}.xlsx"
        save(wb, path, [t])
        assert t.fallback_used is (not fast)
        return path

    def cells(path: Path):
        ws = openpyxl.load_workbook(path)["t"]
        return [[(c.value, c.data_type, c.number_format if c.value is not None else None)
                 for c in row]
                for row in ws.iter_rows()]

    assert cells(build(True)) == cells(build(False))


# ============================================================================================
# figures
# ============================================================================================
PNG_SIG = b"\x89PNG\r\n\x1a\n"


def _png_chunks(data: bytes) -> list[tuple[bytes, bytes]]:
    """Chunks of a PNG (PNG specification: length, type, data, CRC)."""
    assert data[:8] == PNG_SIG
    out, i = [], 8
    while i < len(data):
        (n,) = struct.unpack(">I", data[i:i + 4])
        out.append((data[i + 4:i + 8], data[i + 8:i + 8 + n]))
        i += 12 + n
    return out


def _expected_sizes(chk) -> dict[str, tuple[float, float]]:
    nb = len(chk.blocks)
    out = {f"share_map_{b.order:02d}_{b.name}": F.SHARE_MAP_SIZE for b in chk.blocks}
    out["duration_curves"] = F.duration_size(nb)
    out["average_day"] = F.average_day_size(nb, len(chk.study.profiles.seasons))
    out["feeder_classes"] = F.classes_size(nb)
    out["worst_windows"] = F.windows_size(min(F.TOP_WINDOWS, len(chk.windows())))
    return out


def test_pngs_valid_sized_not_blank(case):
    chk = case["check"]
    want = _expected_sizes(chk)
    pngs = sorted((case["out"] / "figures").glob("*.png"))
    assert {p.stem for p in pngs} == set(want)
    for p in pngs:
        data = p.read_bytes()
        chunks = _png_chunks(data)
        assert chunks[0][0] == b"IHDR"
        w, h = struct.unpack(">II", chunks[0][1][:8])
        ew, eh = want[p.stem]
        assert (w, h) == (round(ew * F.DPI), round(eh * F.DPI)), p.name
        types = {t for t, _ in chunks}
        assert b"tIME" not in types  # no time stamp
        assert not any(t == b"tEXt" and d.startswith(b"Software") for t, d in chunks)
        img = mpimg.imread(p)
        assert img.shape[:2] == (h, w)
        assert float(img[..., :3].var()) > 1e-3, f"{p.name} looks blank"
        assert case["paths"][f"png:{p.stem}"] == p


def test_figures_deterministic(case):
    chk = case["check"]
    a = F.render_figures(chk, None)
    b = F.render_figures(chk, None)
    assert [f.png for f in a] == [f.png for f in b]
    assert {f.name: f.png for f in a} == {p.stem: p.read_bytes()
                                          for p in (case["out"] / "figures").glob("*.png")}


def test_figures_without_windows(tmp_path):
    """A compliant study still gets every figure (the timeline says there is no window)."""
    blocks = [{"block": f"S{k}", "order": k, "pickup_hz": 49.0 - 0.3 * k, "delay_s": 0.1,
               "rocof_hz_per_s": 0.5, "rocof_arm_hz": 49.5, "target_pct": 10, "min_pct": 0,
               "max_pct": 100}
              for k in (1, 2)]
    study = _study(tmp_path, blocks=blocks)
    idx = np.full(len(study.feeders), -1)
    ids = list(study.feeder_ids)
    idx[ids.index("F04")], idx[ids.index("F07")] = 0, 1  # no PV: never negative
    chk = run_check(study, build_year(study), idx)
    assert chk.windows().empty
    figs = F.render_figures(chk, tmp_path / "f")
    assert len(figs) == len(chk.blocks) + 4
    for f in figs:
        img = mpimg.imread(f.path)
        assert img.shape[:2] == (f.size_px[1], f.size_px[0])


@pytest.mark.parametrize("kind", ["all_unarmed", "demand_nonpositive"])
def test_reports_edge_cases(tmp_path, kind):
    """Nothing armed (every block at 0 %), or PV so large that netted demand is <= 0 at
    midday (those intervals have no share): every format is still written."""
    if kind == "all_unarmed":
        study = _study(tmp_path)
        idx = np.full(len(study.feeders), -1)
    else:
        feeders = _feeders()
        for f in feeders:
            f["pv_mw"] = 3.0 * f["peak_mw"]
        s = dict(BASE_SETTINGS)
        p = write_workbook(tmp_path / "pv.xlsx", settings=s, feeders=feeders,
                           profiles=flat_profiles(("res", "com"), ("winter", "summer"), _shape),
                           seasons=SEASONS)
        study = read_study(_force_text(p))
        idx = study.current_assignment
    year = build_year(study)
    chk = run_check(study, year, idx)
    if kind == "demand_nonpositive":
        assert (~chk.valid).any()
    out = tmp_path / "out"
    out.mkdir()
    paths = write_reports(chk, out)
    assert {"xlsx", "html"} <= set(paths)
    for k, p in paths.items():
        assert p.exists() and p.stat().st_size > 0, k
        if k.startswith("png:"):
            img = mpimg.imread(p)
            assert float(img[..., :3].var()) > 1e-4
    text = (out / "report.html").read_text(encoding="utf-8")
    assert "NOT COMPLIANT" in text
    if kind == "demand_nonpositive":
        assert "left out" in text
    wb = openpyxl.load_workbook(out / "report.xlsx", read_only=True)
    assert wb.sheetnames == SHEETS
    wb.close()


# ============================================================================================
# HTML
# ============================================================================================
RESOURCE_ATTR = re.compile(r"""\b(?:src|href|srcset|poster|data|action|background)\s*=\s*
                               (?:"([^"]*)"|'([^']*)'|([^\s>]+))""", re.I | re.X)


def _resource_refs(text: str) -> list[str]:
    refs = ["".join(m.groups(default="")) for m in RESOURCE_ATTR.finditer(text)]
    refs += re.findall(r"url\(\s*['\"]?([^'\")]*)", text, re.I)
    refs += re.findall(r"@import\s+['\"]?([^'\";]+)", text, re.I)
    return refs


def _check_offline(text: str) -> None:
    refs = _resource_refs(text)
    assert refs, "expected at least the embedded pictures"
    for r in refs:
        assert r.startswith("data:"), f"resource reference {r[:60]!r} is not a data: URI"
    low = text.lower()
    assert "http://" not in low and "https://" not in low
    assert "<script" not in low and "<iframe" not in low and "<link" not in low


def test_html_content(case):
    chk = case["check"]
    text = (case["out"] / "report.html").read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>")
    assert ("NOT COMPLIANT" if not chk.compliant else "COMPLIANT") in text
    assert html.escape(MARKUP_ID) in text and MARKUP_ID not in text  # exporting feeders list
    _check_offline(text)
    n_png = len(list((case["out"] / "figures").glob("*.png")))
    assert text.count('src="data:image/png;base64,') == n_png
    assert "2017/2196" in text and "Art. 50(1)" in text
    for word in ("clear-sky", "pv_derate", "every_interval", "60 minutes", "profiles"):
        assert word in text
    for c in CAUTIONS:
        assert html.escape(c) in text


def _section(text: str, anchor: str) -> str:
    i = text.index(f'id="{anchor}"')
    j = text.find("<h2", i)
    return text[i:j if j > 0 else len(text)]


def _cells(section: str) -> list[list[str]]:
    """Data rows of the tables in a page section: each cell's text, entities decoded."""
    rows = []
    for tr in re.findall(r"<tr>(.*?)</tr>", section, re.S):
        cells = [html.unescape(re.sub(r"<[^>]+>", "", c))
                 for c in re.findall(r"<td[^>]*>(.*?)</td>", tr, re.S)]
        if cells:
            rows.append(cells)
    return rows


def _check_field_sections(text: str, plan_case) -> None:
    """The statement and the work list as a reader of the page sees them: the statement's
    rows carry each block's pickup, mean and lowest share and lowest cumulative share (the
    check's own statistics; the cumulative share summed here from the block shares), and the
    work list one row per changed feeder (no trip groups here) with the action and the
    blocks now and new, as the test's plan made them."""
    chk, study, new = plan_case["check"], plan_case["study"], plan_case["new"]
    rows = _cells(_section(text, "statement"))
    assert [r[0] for r in rows] == [b.name for b in chk.blocks]
    cum = np.cumsum(chk.share_pct[:, chk.valid], axis=0).min(axis=1)
    for r, s, c in zip(rows, chk.stats, cum):
        assert r[1] == f"{s.pickup_hz:.3f}"
        assert r[5] == f"{s.mean_share_pct:.2f}" and r[6] == f"{s.min_share_pct:.2f}"
        assert r[7] == s.min_share_local_time
        assert r[11] == f"{c:.2f}"
    rows = _cells(_section(text, "work-list"))
    names = study.block_names
    word = lambda b: names[b] if b >= 0 else "unarmed"  # noqa: E731
    cur = study.current_assignment
    want = sorted((fid, "arm" if cur[i] < 0 else "disarm" if new[i] < 0 else "move",
                   word(cur[i]), word(new[i]))
                  for i, fid in enumerate(study.feeder_ids) if cur[i] != new[i])
    assert sorted((r[2], r[4], r[5], r[10]) for r in rows) == want
    assert "Visit order" in text and "visit-order" in text


def test_html_plan(plan_case):
    text = (plan_case["out"] / "report.html").read_text(encoding="utf-8")
    assert "Current allocation (before)" in text and "Planned allocation (after)" in text
    assert STATUS_WORDS["in_band"] in text and "moved &lt;two&gt; feeders" in text
    assert html.escape(MARKUP_ID) in text and MARKUP_ID not in text
    assert html.escape(FORMULA_ID) in text
    assert "field work list" in text
    _check_field_sections(text, plan_case)
    _check_offline(text)


def test_formats_subsets(case, tmp_path):
    chk = case["check"]
    a = tmp_path / "html_only"
    a.mkdir()
    w = write_reports(chk, a, formats={"html"})
    assert set(w) == {"html"} and not (a / "figures").exists()
    assert not (a / "report.xlsx").exists()
    assert "data:image/png;base64," in (a / "report.html").read_text(encoding="utf-8")
    b = tmp_path / "none"
    b.mkdir()
    assert write_reports(chk, b, formats=parse_formats("none")) == {}
    assert list(b.iterdir()) == []
    c = tmp_path / "xlsx_png"
    c.mkdir()
    w = write_reports(chk, c, formats={"xlsx", "png"})
    assert "xlsx" in w and "html" not in w and (c / "figures").is_dir()


# ============================================================================================
# headless browser
# ============================================================================================
def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser"):
        p = shutil.which(name)
        if p:
            return p
    return "/usr/bin/chromium" if os.path.exists("/usr/bin/chromium") else None


class _TrapProxy:
    """A local TCP listener given to Chromium as its HTTP proxy: every request the browser
    tries to make (http, https via CONNECT, even to loopback) lands here, is recorded by its
    request line and refused.  Nothing leaves the machine."""

    def __init__(self):
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(32)
        self.port = self.sock.getsockname()[1]
        self.requests: list[str] = []
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()

    def _run(self):
        while True:
            try:
                c, _ = self.sock.accept()
            except OSError:
                return
            c.settimeout(2.0)
            try:
                line = c.recv(4096).split(b"\r\n", 1)[0].decode("latin-1")
            except OSError:
                line = "(no request line)"
            self.requests.append(line)
            c.close()

    def hosts(self) -> set[str]:
        out = set()
        for line in self.requests:
            parts = line.split()
            target = parts[1] if len(parts) > 1 else line
            m = re.match(r"(?:[a-z]+://)?([^/:]+)", target)
            out.add(m.group(1) if m else target)
        return out

    def close(self):
        self.sock.close()


def _run_chromium(exe: str, url: str, proxy: _TrapProxy, *extra: str) -> subprocess.CompletedProcess:
    with tempfile.TemporaryDirectory() as ud:
        cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
               "--no-first-run", "--disable-background-networking", "--disable-component-update",
               "--disable-sync", f"--user-data-dir={ud}", "--hide-scrollbars",
               f"--proxy-server=http://127.0.0.1:{proxy.port}",
               "--proxy-bypass-list=<-loopback>",
               "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE 127.0.0.1", *extra, url]
        r = subprocess.run(cmd, capture_output=True, timeout=180)
    time.sleep(0.3)  # let the trap record the last connection
    return r


@pytest.mark.browser
def test_html_in_headless_chromium(plan_case, tmp_path):
    """Open report.html from disk in headless Chromium.

    Network: Chromium runs with a local trap proxy (every request goes to it, none leaves
    the machine) and a resolver that resolves nothing.  The browser's own service traffic
    (update and account endpoints) is learnt from a run on an empty page; the report run may
    reach no host beyond that.  A control page with one external image proves the trap
    sees page requests.  Then: the DOM after loading holds the verdict, the annual statement
    and the relay work list with the plan's values, and no resource reference other than
    data: URIs, and the screenshot is not blank."""
    exe = _chromium()
    if exe is None:
        if os.environ.get("UFLS_REQUIRE_BROWSER") == "1":
            pytest.fail("UFLS_REQUIRE_BROWSER=1 but no chromium found (apt-get install chromium)")
        pytest.skip("headless Chromium not installed (Debian package 'chromium')")
    report = plan_case["out"] / "report.html"
    blank = tmp_path / "blank.html"
    blank.write_text("<!DOCTYPE html><html><body>blank</body></html>")
    control = tmp_path / "control.html"
    control.write_text('<!DOCTYPE html><html><body><img src="http://report-test.invalid/x.png">'
                       "</body></html>")

    base = _TrapProxy()
    try:
        _run_chromium(exe, blank.as_uri(), base, "--dump-dom")
    finally:
        base.close()
    ctl = _TrapProxy()
    try:
        _run_chromium(exe, control.as_uri(), ctl, "--dump-dom")
    finally:
        ctl.close()
    assert "report-test.invalid" in ctl.hosts(), \
        f"the trap proxy did not see the control page's request: {ctl.requests}"

    trap = _TrapProxy()
    shot = tmp_path / "shot.png"
    try:
        r = _run_chromium(exe, report.as_uri(), trap, "--dump-dom")
        dom = r.stdout.decode("utf-8", "replace")
        _run_chromium(exe, report.as_uri(), trap, f"--screenshot={shot}",
                      "--window-size=1280,2000")
    finally:
        trap.close()
    allowed = base.hosts() | {"update.googleapis.com", "accounts.google.com",
                              "clients2.google.com"}
    extra = trap.hosts() - allowed
    assert not extra, f"the report made network requests: {sorted(extra)} ({trap.requests})"

    chk = plan_case["check"]
    assert ("NOT COMPLIANT" if not chk.compliant else "COMPLIANT") in dom
    assert "Planned allocation (after)" in dom
    # the statement and the work list as the browser built them
    _check_field_sections(dom, plan_case)
    for ref in _resource_refs(dom):
        assert ref.startswith("data:"), ref[:60]
    assert shot.exists(), r.stderr.decode("utf-8", "replace")[-2000:]
    img = mpimg.imread(shot)
    assert img.shape[1] == 1280
    assert float(img[..., :3].var()) > 1e-3


# ============================================================================================
# 5-minute intervals (105,120 a year)
# ============================================================================================
@pytest.mark.slow
def test_check_and_reports_at_5_minutes(tmp_path):
    study = _study(tmp_path, settings={"interval_minutes": 5})
    year = build_year(study)
    assert year.n_intervals == 365 * 24 * 12  # 2025 is not a leap year
    chk = run_check(study, year, study.current_assignment)
    # the share by its definition (module docstring of allocator.check), recomputed here
    blk = study.current_assignment
    relay = [f.relay for f in study.feeders]
    s1 = sum(year.net_mw[i] if relay[i] == "standard" else np.maximum(year.net_mw[i], 0)
             for i in range(len(blk)) if blk[i] == 0 and relay[i] != "none")
    ok = year.demand_mw > 0
    np.testing.assert_allclose(chk.share_pct[0][ok], 100 * s1[ok] / year.demand_mw[ok],
                               rtol=1e-12)
    grid, days = F._day_grid(chk, 0)
    assert grid.shape == (288, 365) and len(days) == 365
    assert np.isnan(grid[24:36, days.get_loc(pd.Timestamp("2025-03-30"))]).all()  # 02:xx
    out = tmp_path / "out"
    out.mkdir()
    write_check_files(chk, out)
    paths = write_reports(chk, out)
    assert json.loads((out / "summary.json").read_text())["interval_minutes"] == 5
    with open(out / "armed_load.csv", encoding="utf-8") as fh:
        assert sum(1 for _ in fh) == year.n_intervals + 1
    for k, p in paths.items():
        assert p.exists() and p.stat().st_size > 0, k
        if k.startswith("png:"):
            assert float(mpimg.imread(p)[..., :3].var()) > 1e-4, k
