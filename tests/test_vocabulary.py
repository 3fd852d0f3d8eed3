"""One vocabulary in every output (console, report.xlsx, report.html, CSV, JSON).

What is checked: a block's status is one of "in band", "below band", "above band",
"below and above band" and reads the same in all four outputs; booleans a person reads are
"yes"/"no" (CSV, xlsx), true/false in JSON; help texts show no argparse escape "%%";
sentences about no window and one window read right; summary.json lists the validation
warnings the workbook report lists; P95 (and P99) stand beside P5 (and P1), and a
percentile rule shows the two percentiles it judges.

Outside references: Python's ``csv`` module (RFC 4180) and ``json`` read the files back;
openpyxl reads report.xlsx (ECMA-376 SpreadsheetML: a text cell has data type "s");
``numpy.percentile`` (linear interpolation, its documented default) recomputes the
percentile the rule judges from the shares in armed_load.csv.  The study is invented test
data (tests/smallnet.py).
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import re

import numpy as np
import openpyxl
import pytest

from allocator import vocab
from allocator.check import run_checks
from allocator.cli import build_parser, main
from allocator.report import figures as F
from allocator.report import html as H
from allocator.scenarios import build_years
from allocator.workbook import read_study
from smallnet import write_small_study

STATUS = {"in band", "below band", "above band", "below and above band"}


def _run(argv, width=100):
    buf = io.StringIO()
    with pytest.MonkeyPatch.context() as mp, contextlib.redirect_stdout(buf):
        mp.setenv("COLUMNS", str(width))
        rc = main(argv)
    assert rc == 0, buf.getvalue()[-2000:]
    return buf.getvalue()


def _csv(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _xlsx_text(path) -> str:
    wb = openpyxl.load_workbook(path, read_only=True)
    out = [str(v) for ws in wb.worksheets if ws.title != "intervals"
           for row in ws.iter_rows(values_only=True) for v in row if v is not None]
    wb.close()
    return "\n".join(out)


@pytest.fixture(scope="module")
def checked(tmp_path_factory):
    d = tmp_path_factory.mktemp("vocab")
    wb = write_small_study(d)
    text = _run(["check", str(wb), "--out", str(d / "out"), "--format", "xlsx,html"])
    _run(["frequency", str(wb), "--out", str(d / "freq"), "--format", "none", "--quiet"])
    return d, wb, text


def test_block_status_reads_the_same_everywhere(checked):
    d, _, text = checked
    out = d / "out"
    summ = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    statuses = {b["block"]: b["status"] for b in summ["blocks"]}
    assert set(statuses.values()) <= STATUS
    assert "below band" in statuses.values()  # S1 falls short on sunny middays
    for b in summ["blocks"]:  # the word follows the sides the rule found
        assert b["status"] == {(False, False): "in band", (True, False): "below band",
                               (False, True): "above band",
                               (True, True): "below and above band"}[
            (b["below_band"], b["above_band"])]
    # console: the verdict table's row of each block ends with its status
    flat = " ".join(text.split())
    for block, word in statuses.items():
        assert re.search(rf"\b{block} .*?{word}", flat), (block, word)
    # xlsx: the summary sheet's per-block table and the blocks sheet
    wb = openpyxl.load_workbook(out / "report.xlsx", read_only=True)
    rows = list(wb["summary"].iter_rows(values_only=True))
    head_i = next(i for i, r in enumerate(rows) if r[0] == "block" and "status" in r)
    col = rows[head_i].index("status")
    for r in rows[head_i + 1:head_i + 1 + len(statuses)]:
        assert str(r[col]).split(" (")[0] == statuses[r[0]]
    blocks = list(wb["blocks"].iter_rows(values_only=True))
    k = blocks[0].index("status")
    assert {r[k] for r in blocks[1:]} <= STATUS
    wb.close()
    # HTML: every status cell of the per-block table
    page = (out / "report.html").read_text(encoding="utf-8")
    for word in set(statuses.values()):
        assert f">{word}</td>" in page
    # CSV: the windows' status column, beside the machine column kind
    rows = _csv(out / "shortfalls.csv")
    assert rows and {r["status"] for r in rows} <= {"below band", "above band"}
    assert all(r["status"] == {"below_min": "below band", "above_max": "above band"}[r["kind"]]
               for r in rows)
    # the old words are gone from what people read
    for where, body in (("console", text), ("xlsx", _xlsx_text(out / "report.xlsx")),
                        ("html", page)):
        for old in ("OUT OF BAND", "out of band", "below_min", "above_max", "below min (",
                    "above max ("):
            assert old not in body, (where, old)


def test_booleans_yes_no_for_people_true_false_in_json(checked):
    d, _, _ = checked
    freq = _csv(d / "freq" / "frequency.csv")
    assert freq and {r["within_limits"] for r in freq} <= {"yes", "no"}
    summ = json.loads((d / "out" / "summary.json").read_text(encoding="utf-8"))
    assert summ["compliant"] is False and all(isinstance(b["compliant"], bool)
                                              for b in summ["blocks"])
    wb = openpyxl.load_workbook(d / "out" / "report.xlsx")
    ws = wb["blocks"]
    k = [c.value for c in ws[1]].index("compliant") + 1
    cells = [ws.cell(r, k) for r in range(2, ws.max_row + 1)]
    # ECMA-376: a text cell, not a boolean cell (t="b")
    assert {c.value for c in cells} <= {"yes", "no"} and {c.data_type for c in cells} == {"s"}
    sc = wb["scenarios"]
    assert "verdict" in [c.value for c in sc[1]]
    assert {sc.cell(r, [c.value for c in sc[1]].index("verdict") + 1).value
            for r in range(2, sc.max_row + 1)} <= {"compliant", "not compliant"}


def test_help_texts_show_no_argparse_escape():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    texts = [parser.format_help()] + [p.format_help() for p in sub.choices.values()]
    for t in texts:
        assert "%%" not in t
    assert "% of netted demand" in " ".join(sub.choices["check"].format_help().split())


class _Only:
    """A ScenarioChecks that shows only its first ``n`` windows."""

    def __init__(self, cs, n):
        self._cs, self._n = cs, n

    def __getattr__(self, name):
        return getattr(self._cs, name)

    def windows(self):
        return self._cs.windows().head(self._n)


@pytest.fixture(scope="module")
def small_checks(checked):
    _, wb, _ = checked
    study = read_study(wb)
    years = build_years(study)
    return run_checks(study, years, study.current_assignment)


@pytest.mark.parametrize("n", [0, 1])
def test_no_window_and_one_window_read_right(small_checks, n):
    cs = _Only(small_checks, n)
    _, _, caption = F.worst_windows(cs)
    page = H._windows(cs)
    wrong = re.compile(r"\b(The 0|0 runs|0 windows|1 runs|1 windows|one runs)\b")
    assert not wrong.search(caption) and not wrong.search(page), (caption, page)
    if n == 0:
        assert caption.startswith("No run") and "No interval lies outside" in page
    else:
        assert caption.startswith("The one run") and "1 window in all" in page


def test_summary_json_lists_the_validation_warnings(checked):
    d, _, _ = checked
    summ = json.loads((d / "out" / "summary.json").read_text(encoding="utf-8"))
    pv_warn = [w for w in summ["warnings"] if "is larger than its peak load" in w]
    assert len(pv_warn) == 16  # F20..F35: PV 0.7 MW above a 0.6 MW peak
    assert summ["study_warnings"] == [w for w in summ["warnings"]
                                      if w in summ["study_warnings"]]
    for s in summ["scenarios"]:
        assert "notes" in s and "flags" in s
    # the workbook report lists the very same warnings
    rows = [r[0] for r in openpyxl.load_workbook(d / "out" / "report.xlsx", read_only=True)
            ["summary"].iter_rows(values_only=True)]
    i = next(i for i, v in enumerate(rows) if str(v).startswith("Warnings ("))
    assert rows[i + 1:i + 1 + len(summ["warnings"])] == summ["warnings"]


def test_p95_beside_p5_and_the_percentiles_a_rule_judges(tmp_path):
    wb = write_small_study(tmp_path, settings={"compliance_rule": "percentile:2"})
    text = _run(["check", str(wb), "--out", str(tmp_path / "o"), "--format", "xlsx"], 100)
    out = tmp_path / "o"
    head = [c.value for c in openpyxl.load_workbook(out / "report.xlsx")["blocks"][1]]
    assert head.index("P99 share %") > head.index("P95 share %") > head.index("P5 share %")
    assert "P2 share % (the rule's)" in head and "P98 share % (the rule's)" in head
    assert "P2 %" in text and "P98 %" in text  # console verdict table
    summ = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    clear = next(s for s in summ["scenarios"] if s["scenario"] == "clear_sky")
    share = np.array([float(r["S1_pct"]) for r in _csv(out / "armed_load.csv")
                      if r["scenario"] == "clear_sky"])
    s1 = clear["blocks"][0]
    # numpy.percentile (linear interpolation) on the CSV's shares (6 decimals)
    assert s1["rule_low_share_pct"] == pytest.approx(np.percentile(share, 2), abs=1e-5)
    assert s1["rule_high_share_pct"] == pytest.approx(np.percentile(share, 98), abs=1e-5)
    assert s1["p99_share_pct"] == pytest.approx(np.percentile(share, 99), abs=1e-5)
    # the status follows the rule's percentiles, not the single lowest interval
    assert s1["below_band"] == (np.percentile(share, 2) < s1["min_pct"])
    page = H.render_html(_checks(wb), [])
    assert "P2 % (the rule&#x27;s)" in page and "P95 %" in page


def _checks(wb):
    study = read_study(wb)
    return run_checks(study, build_years(study), study.current_assignment)


def test_status_word_function_is_the_one_source():
    assert vocab.band_status(False, False) == "in band"
    assert vocab.band_status(True, False) == "below band"
    assert vocab.band_status(False, True) == "above band"
    assert vocab.band_status(True, True) == "below and above band"
    assert vocab.headline(True) == "COMPLIANT" and vocab.compliance_word(False) == \
        "not compliant"
    assert [vocab.count(n, "window") for n in (0, 1, 2)] == ["no windows", "1 window",
                                                              "2 windows"]
