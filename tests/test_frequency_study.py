"""Frequency indication at the intervals the check flags (allocator.frequency_indication)."""

from __future__ import annotations

import json
import re

import numpy as np
import pandas as pd
import pytest

from allocator.assignment import current_assignment
from allocator.check import run_check
from allocator.cli import main
from allocator.frequency_indication import (frequency_summary, frequency_table, pick_intervals,
                                       run_frequency_study)
from allocator.errors import InputError
from allocator.plan import plan_allocation
from allocator.workbook import read_study
from allocator.year import build_year

DEMO = "inputs_demo/lindmark.xlsx"


@pytest.fixture(scope="module")
def demo():
    study = read_study(DEMO)
    year = build_year(study)
    cur, warns = current_assignment(study)
    return study, year, run_check(study, year, cur, warns)


def test_examined_intervals_are_the_flagged_ones(demo):
    study, year, chk = demo
    labels, idx = pick_intervals(chk)
    # every block's lowest-share interval is examined (possibly merged with another label)
    for j, b in enumerate(study.blocks):
        s = np.where(chk.valid, chk.share_pct[j], np.inf)
        t = int(np.argmin(s))
        k = list(idx).index(t)
        assert f"lowest_{b.name}" in labels[k]
    assert any("lowest_demand" in lab for lab in labels)
    assert any("typical" in lab for lab in labels)
    t_typ = idx[[i for i, lab in enumerate(labels) if "typical" in lab][0]]
    d = year.demand_mw[chk.valid]
    assert year.demand_mw[t_typ] == pytest.approx(np.sort(d)[len(d) // 2])


def test_user_times_and_bad_user_time(demo):
    _, _, chk = demo
    labels, idx = pick_intervals(chk, ["2025-04-20 13:00"])
    assert any("user_1" in lab for lab in labels)
    with pytest.raises(InputError) as e:
        pick_intervals(chk, ["not a time", "2031-01-01 00:00"])
    assert len(e.value.problems) == 2


def test_planted_shortfall_lowers_coverage_and_plan_restores_it(demo):
    """The demo's 'done when': at B2's planted shortfall interval the largest covered loss is
    lower than at a typical interval; the planned allocation raises the worst interval's."""
    study, year, chk = demo
    fs = run_frequency_study(chk)
    cover = dict(zip(fs.labels, fs.largest_covered_pct))
    low_b2 = next(v for k, v in cover.items() if "lowest_B2" in k)
    typical = next(v for k, v in cover.items() if "typical" in k)
    assert low_b2 < typical
    outcome = plan_allocation(study, year, time_limit_s=30, max_changes=20)
    after = run_check(study, year, outcome.block_idx)
    assert after.compliant
    fs2 = run_frequency_study(after)
    assert np.nanmin(fs2.largest_covered_pct) > low_b2


def test_tables_and_cli(demo, tmp_path, monkeypatch):
    _, _, chk = demo
    fs = run_frequency_study(chk)
    tab = frequency_table(fs)
    assert len(tab) == len(fs.labels) * len(fs.params.disturbances_pct)
    s = frequency_summary(fs)
    assert s["cautions"] and "system operator" in s["cautions"][0]
    monkeypatch.chdir(tmp_path)
    import shutil

    shutil.copy(f"{__import__('pathlib').Path(__file__).parents[1]}/{DEMO}", "demo.xlsx")
    assert main(["frequency", "demo.xlsx", "--out", "fq", "--quiet"]) == 0
    data = json.loads((tmp_path / "fq" / "frequency.json").read_text())
    assert {"intervals", "parameters", "cautions", "floor_hz"} <= set(data)
    assert (tmp_path / "fq" / "frequency.csv").is_file()
    # one set of figures per scenario (clear_sky and no_pv by default), named for it
    for sc in ("clear_sky", "no_pv"):
        assert (tmp_path / "fq" / "figures" / f"{sc}_frequency_traces_critical.png").is_file()
    assert {r["scenario"] for r in data["intervals"]} == {"clear_sky", "no_pv"}


# ---- frequency results that agree -----------------------------------------------------------
@pytest.fixture(scope="module")
def demo_fs(demo):
    return run_frequency_study(demo[2])


def _covered_line_x(fig) -> tuple[float, str]:
    """x and legend label of the figure's vertical line (constant x data)."""
    ax = fig.axes[0]
    lines = [ln for ln in ax.lines if len(set(np.atleast_1d(ln.get_xdata()))) == 1
             and len(np.atleast_1d(ln.get_xdata())) == 2]
    assert len(lines) == 1
    return float(lines[0].get_xdata()[0]), lines[0].get_label()


def test_figure_marks_the_largest_loss_the_table_reports(demo_fs):
    """The nadir figure's vertical line and the frequency.json / console value are one
    quantity: before, the figure took the system sheet's coarse sizes (40 % at the demo's
    lowest_B1) while the table took the 1 % sweep (42 %)."""
    from allocator.report.frequency_figures import frequency_figures

    fs = demo_fs
    summary = frequency_summary(fs)
    figs = frequency_figures(fs)
    by_label = {}
    for name, fig in figs.items():
        if name.startswith("frequency_nadir_"):
            title = fig.axes[0].get_title()
            by_label[title.split(" — ")[1].rsplit(" (", 1)[0]] = fig
    assert set(by_label) == set(fs.labels)
    for row in summary["intervals"]:
        x, label = _covered_line_x(by_label[row["interval"]])
        assert x == row["largest_covered_pct"]
        assert f"{x:g} %" in label and "within limits" in label
        # no size drawn in the figure contradicts it: every loss up to it is within limits
        c = fs.labels.index(row["interval"])
        drawn = fs.sweep.disturbances_pct
        assert fs.sweep.within_limits[c][drawn <= x].all()


def test_an_instant_weakest_for_two_blocks_gets_a_figure_named_for_both(demo):
    """Force B3's lowest share onto B1's lowest-share interval: one examined instant with two
    labels, and its nadir figure names both (before, only the first label appeared)."""
    import dataclasses

    from allocator.report.frequency_figures import frequency_figures

    _, _, chk = demo
    valid = np.flatnonzero(chk.valid)
    sp = chk.share_pct.copy()
    t_b1 = valid[int(np.argmin(sp[0, valid]))]
    sp[2, t_b1] = np.nanmin(sp[2]) - 1.0
    fs = run_frequency_study(dataclasses.replace(chk, share_pct=sp))
    assert "lowest_B1+lowest_B3" in fs.labels
    names = [n for n in frequency_figures(fs) if n.startswith("frequency_nadir_")]
    assert len(names) == len(fs.labels) == len(set(names))
    both = [n for n in names if "lowest_B1" in n and "lowest_B3" in n]
    assert len(both) == 1, names


ISO_LOCAL = re.compile(r"\d{4}-\d{2}-\d{2}T\d{2}:\d{2}[+-]\d{2}:\d{2}")  # ISO 8601


def test_local_times_are_iso_8601_with_offset(demo, demo_fs):
    """ISO 8601 extended format with the UTC offset; pandas' ISO parser (independent of the
    formatter) reads each back to the examined instant."""
    _, year, _ = demo
    fs = demo_fs
    for text, t in zip(fs.local_times, fs.interval_index):
        assert ISO_LOCAL.fullmatch(text), text
        assert pd.Timestamp(text) == year.local_times[t]
    tab = frequency_table(fs)
    assert tab["local_time"].map(lambda s: bool(ISO_LOCAL.fullmatch(s))).all()
    assert [r["local_time"] for r in frequency_summary(fs)["intervals"]] == list(fs.local_times)


def _console_text(summary, width):
    import io

    from rich.console import Console

    from allocator.console.frequency import frequency_summary as _print_frequency

    buf = io.StringIO()
    _print_frequency(Console(width=width, file=buf, color_system=None, legacy_windows=False),
                     summary)
    return buf.getvalue()


BIG = {"floor_hz": 48.0, "ceiling_hz": 51.5, "cautions": ["Indicative model."],
       "intervals": [
           {"interval": "lowest_B1+lowest_B3+lowest_demand",
            "local_time": "2025-06-02T03:00+02:00", "demand_mw": 12345.4,
            "total_armed_pct": 45.61, "largest_covered_pct": 42.0, "largest_covered_mw": 5185.1},
           {"interval": "typical", "local_time": "2025-10-26T02:00+01:00", "demand_mw": 835.0,
            "total_armed_pct": 4.0, "largest_covered_pct": None, "largest_covered_mw": None}]}


@pytest.mark.parametrize("which", ["demo", "big numbers"])
def test_console_table_at_80_columns_cuts_nothing(demo_fs, which):
    """COLUMNS=80: no line wider than 80, no '…', the full ISO time, and each interval's
    numbers whole on the line of its first label."""
    from rich.cells import cell_len

    summary = frequency_summary(demo_fs) if which == "demo" else BIG
    text = _console_text(summary, 80)
    lines = text.splitlines()
    assert max(cell_len(ln) for ln in lines) <= 80 and "…" not in text
    for r in summary["intervals"]:
        assert r["local_time"] in text
        first = r["interval"].split("+")[0]
        line = next(ln for ln in lines if re.search(rf"\b{re.escape(first)}\b", ln))
        tokens = line.replace("│", " ").split()
        lc = r["largest_covered_pct"]
        want = [f"{r['demand_mw']:.0f}", f"{r['total_armed_pct']:.1f}",
                "none" if lc is None else f"{lc:g}",
                "none" if lc is None else f"{r['largest_covered_mw']:.0f}"]
        assert tokens[-4:] == want, line
    assert not re.search(r"(?<![\d-])\d{2}-\d{2} \d{2}:\d{2}", text)  # no date without year


def test_console_narrower_than_the_table_lists_each_interval(demo_fs):
    text = _console_text(BIG, 40)
    assert "…" not in text
    for value in ("12345", "45.6", "42", "5185", "2025-06-02T03:00+02:00", "835", "4.0"):
        assert re.search(rf"(?<![\w.]){re.escape(value)}(?![\w.])", text), value
