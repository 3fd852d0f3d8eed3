"""Every output of a plan folder against every other: the CSV files, the report.xlsx sheets,
report.html and the console text must say the same thing.  These are consistency checks
between renderings of one result (no outside reference is needed: a planner handed the
printed sheet and one handed the CSV must do the same job)."""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import openpyxl
import pandas as pd

REMOTE = "set remote schedule"


def _blank(v):
    return "" if v is None or (isinstance(v, float) and math.isnan(v)) else v


def _sheet_rows(ws) -> list[list]:
    return [[_blank(c) for c in r] for r in ws.iter_rows(min_row=2, values_only=True)]


def _same_cell(a, b) -> bool:
    if a == "" or b == "":
        return _blank(a) == _blank(b)
    try:
        return math.isclose(float(a), float(b), rel_tol=1e-9, abs_tol=1e-9)
    except (TypeError, ValueError):
        return str(a) == str(b)


def _same_table(csv: pd.DataFrame, rows: list[list], name: str) -> None:
    assert len(rows) == len(csv), (name, len(rows), len(csv))
    for k, (want, got) in enumerate(zip(csv.itertuples(index=False), rows)):
        # the sheet splits each ISO local time into a date cell and an offset column, so
        # compare the columns both have by position of the text columns: feeders, action
        assert len(got) >= len(want) - 2, (name, k)
        assert all(_same_cell(w, g) for w, g in zip(want[:6], got[:6])), (name, k, want, got)


def figure_spy(monkeypatch) -> list[list[str]]:
    """Record the substations, in order, of every visit-order figure drawn from now on."""
    import allocator.report.figures as F

    drawn: list[list[str]] = []
    real = F.visit_order_figure

    def spy(order, *a, **kw):
        drawn.append([v.substation for v in order.visits])
        return real(order, *a, **kw)
    monkeypatch.setattr(F, "visit_order_figure", spy)
    return drawn


def assert_plan_outputs_agree(out: Path, console_text: str | None = None,
                              figures: list[list[str]] | None = None) -> dict:
    """Check the plan folder ``out`` (written with every format); returns plan.json.
    ``figures``: what :func:`figure_spy` saw while the folder was written."""
    info = json.loads((out / "plan.json").read_text(encoding="utf-8"))
    plan = pd.read_csv(out / "plan.csv", keep_default_na=False)
    wl = pd.read_csv(out / "work_list.csv", keep_default_na=False)
    vo = pd.read_csv(out / "visit_order.csv", keep_default_na=False)
    field, remote = wl[wl["action"] != REMOTE], wl[wl["action"] == REMOTE]
    # the counts of plan.json are the rows of the files
    assert info["feeders_changed"] == int((plan["changed"] == "yes").sum())
    assert info["field_relays_changed"] == info["relays_changed"] == len(field)
    assert info["remote_relays_changed"] == len(remote)
    sites = vo[(vo["visit"] > 0) & ~vo["substation"].str.startswith("control room")]
    assert info["substations_visited"] == len(sites) == field["visit"].nunique()
    # the control room's step is one row of the visit order, numbered as its work list rows
    steps = vo.loc[vo["substation"].str.startswith("control room"), "visit"]
    assert len(steps) == (1 if len(remote) else 0)
    assert set(remote["visit"]) == set(steps)
    if "changed_by" in plan:
        assert set(plan.loc[plan["changed"] == "yes", "changed_by"]) <= {"field visit",
                                                                        "remote schedule"}
        remote_ids = {f for x in remote["feeders"] for f in x.split("; ")}
        assert remote_ids == set(plan.loc[plan["changed_by"] == "remote schedule",
                                          "feeder_id"])
    # the workbook's sheets are the CSV files, row for row
    wb = openpyxl.load_workbook(out / "report.xlsx", read_only=True)
    sheet = _sheet_rows(wb["work_list"])
    _same_table(wl, sheet, "work_list")
    assert [r[5] for r in sheet] == list(wl["action"])
    assert [r[3] for r in sheet] == list(wl["feeders"])
    vsheet = [r for r in _sheet_rows(wb["visit_order"]) if isinstance(r[0], int)]
    assert [(r[0], r[1]) for r in vsheet] == list(zip(vo["visit"], vo["substation"]))
    # report.html: the plan's facts and the work list's rows
    page = (out / "report.html").read_text(encoding="utf-8")
    facts = dict(re.findall(r"<dt>(.*?)</dt><dd>(.*?)</dd>", page))
    assert facts["feeders whose block changes (field or schedule)"] == \
        str(info["feeders_changed"])
    assert facts["relays changed in the field"] == str(info["field_relays_changed"])
    assert facts["substations a crew visits"] == str(info["substations_visited"])
    section = page[page.index('id="work-list"'):page.index('id="statement"')]
    assert section.count(f"<td>{REMOTE}</td>") == len(remote)
    assert len(re.findall(r"<td>(?:arm|move|disarm)</td>", section)) == len(field)
    # the summary sheet's plan section
    summ: dict = {}
    for r in wb["summary"].iter_rows(values_only=True):  # the first row of each label
        if r and r[0] and r[0] not in summ:
            summ[r[0]] = r[1]
    assert summ["feeders whose block changes (field or schedule)"] == info["feeders_changed"]
    assert summ["relays changed in the field"] == info["field_relays_changed"]
    if figures is not None:  # the figure of the plan: the visits of visit_order.csv
        assert (out / "figures" / "visit_order.png").is_file() == bool(len(vo) > 1)
        assert list(vo["substation"][1:]) in figures
    # the order ends with the allocation as planned: in band when the plan is
    if info["every_interval_in_band"] and len(vo) > 1:
        assert float(vo["worst_violation_pp"].iloc[-1]) <= 1e-6
    if console_text is not None:
        flat = " ".join(console_text.split())
        assert (f"Feeders whose block changes (field or schedule): "
                f"{info['feeders_changed']}.") in flat
    return info
