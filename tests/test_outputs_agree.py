"""One result, every rendering: a switched plan's CSV files, report.xlsx, report.html and
the console agree (tests/agreement.py), and the field results are computed once per plan.
Invented test data (a small network with remote-switchable feeders and day/night periods)."""

from __future__ import annotations

import io

import pytest
from rich.console import Console

from agreement import assert_plan_outputs_agree, figure_spy
from test_switched import DAY_NIGHT, _shape
from wbfactory import BASE_SETTINGS, base_feeders, flat_profiles, write_workbook

import allocator.field.plan as FP
from allocator.console.field import field_summary
from allocator.console.plan import plan_summary
from allocator.pipeline import (PlanOptions, PlanRequest, Sources, plan_study,
                                write_plan_folder)


def _study(tmp_path, switch=(0, 1, 2)):
    """12 feeders at three substations, ``switch`` remote-switchable; every feeder armed in
    S1 now, so the plan has field moves (and remote schedules) to make."""
    fs = base_feeders(12)
    for i, f in enumerate(fs):
        f["substation"] = f"SUB{i % 3}"
        f["current_block"] = "S1"
    for i in switch:
        fs[i]["remote_switch"] = "yes"
    return write_workbook(tmp_path / f"sw{len(switch)}.xlsx", settings=dict(BASE_SETTINGS), feeders=fs,
                          profiles=flat_profiles(value=_shape),
                          extra_sheets={"periods": DAY_NIGHT})


def _run(tmp, switch, arming="auto"):
    calls = []
    real = FP.visit_order
    mp = pytest.MonkeyPatch()
    mp.setattr(FP, "visit_order", lambda *a, **kw: calls.append(1) or real(*a, **kw))
    drawn = figure_spy(mp)
    try:
        res = plan_study(PlanRequest(Sources(_study(tmp, switch)),
                                     PlanOptions(time_limit_s=5, arming=arming)))
        write_plan_folder(res, tmp / "plan")
    finally:
        mp.undo()
    buf = io.StringIO()
    con = Console(file=buf, width=100, color_system=None)
    plan_summary(con, res)
    field_summary(con, res.field)
    return res, tmp / "plan", buf.getvalue(), calls, drawn


@pytest.fixture(scope="module")
def switched(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("agree_switched"), (0, 1, 2), "switched")


@pytest.fixture(scope="module")
def fixed(tmp_path_factory):
    return _run(tmp_path_factory.mktemp("agree_fixed"), ())


def test_switched_plan_outputs_agree(switched):
    res, out, text, _, drawn = switched
    assert res.switched is not None and res.field.schedule is not None
    info = assert_plan_outputs_agree(out, text, drawn)
    assert info["feeders_changed"] == res.field.counts.feeders_changed > 0
    assert info["remote_relays_changed"] > 0 and info["field_relays_changed"] > 0


def test_fixed_plan_outputs_agree(fixed):
    res, out, text, _, drawn = fixed
    assert res.switched is None and res.field.schedule is None
    info = assert_plan_outputs_agree(out, text, drawn)
    assert info["remote_relays_changed"] == 0 and info["field_relays_changed"] > 0


@pytest.mark.parametrize("case", ["switched", "fixed"])
def test_visit_order_searched_once(case, request):
    """The visit order is searched once per plan made (its FieldPlan: the fixed plan, and
    the switched one when planned) and every output renders that one order (work list,
    sheets, HTML, figure, console)."""
    res, _, _, calls, _ = request.getfixturevalue(case)
    assert len(calls) == len(res.candidates) == (2 if case == "switched" else 1)


def test_both_plans_side_by_side_with_the_same_counts(switched):
    """plan.json ``arming.plans``, the xlsx summary's side-by-side rows, the page's table and
    the console show both plans with the same numbers; the chosen plan's counts are the
    plan's own."""
    import re

    import openpyxl

    res, out, text, _, _ = switched
    info = res.record
    plans = info["arming"]["plans"]
    assert set(plans) == {"fixed", "switched"} and info["arming"]["chosen"] == "switched"
    for key in ("field_relays_changed", "remote_relays_changed", "feeders_changed"):
        assert plans["switched"][key] == info[key]
    fx, sw = res.candidate("fixed"), res.candidate("switched")
    assert plans["fixed"]["field_relays_changed"] == fx.field.counts.field_relays
    assert plans["fixed"]["remote_relays_changed"] == fx.field.counts.remote_relays
    ws = openpyxl.load_workbook(out / "report.xlsx", read_only=True)["summary"]
    rows = [r for r in ws.iter_rows(values_only=True) if r and r[0]]
    i = next(k for k, r in enumerate(rows) if str(r[0]).startswith("Fixed and switched"))
    side = {r[0]: r[1:3] for r in rows[i + 1:i + 16]}
    assert side["relays changed in the field"] == (plans["fixed"]["field_relays_changed"],
                                                   plans["switched"]["field_relays_changed"])
    assert side["switching operations per year"] == (
        0, plans["switched"]["switch_operations_per_year"])
    page = (out / "report.html").read_text(encoding="utf-8")
    table = page[page.index('id="arming"'):]
    row = re.search(r"<td>relays set by remote schedule</td><td>(\d+)</td><td>(\d+)</td>",
                    table)
    assert row and (int(row[1]), int(row[2])) == (plans["fixed"]["remote_relays_changed"],
                                                  plans["switched"]["remote_relays_changed"])
    assert sw.switched is not None and fx.switched is None
