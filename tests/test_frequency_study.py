"""Frequency indication at the intervals the check flags (allocator.frequency_study)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from allocator.assignment import current_assignment
from allocator.check import run_check
from allocator.cli import main
from allocator.frequency_study import (frequency_summary, frequency_table, pick_intervals,
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
    outcome = plan_allocation(study, year, time_limit_s=15, max_changes=20)
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
    assert any((tmp_path / "fq" / "figures").glob("frequency_traces_critical.png"))
