"""Checks of allocator.assignment: reading and validating ``feeder_id,block`` CSV files.

The rules checked (a relay-less feeder cannot be armed; priority sites kept off the scheme or
only in the last stage; feeders tripped by one relay share a block; a feeder's allowed blocks
honoured) are the tool's hard rules, common practice, no source.  Line numbers are CSV line
numbers as a text editor shows them (header = line 1), per RFC 4180's one-record-per-line
layout for files without quoted line breaks.

All feeders and blocks are invented test data.
"""

from __future__ import annotations

import csv

import numpy as np
import pytest

from allocator.assignment import (assignment_rows, current_assignment, read_assignment,
                                  rule_problems)
from allocator.domain import UNARMED
from allocator.errors import InputError
from allocator.workbook import read_study
from wbfactory import BASE_SETTINGS, base_feeders, write_workbook


def _study(tmp_path, policy="exclude"):
    feeders = base_feeders(10)
    feeders[1]["relay"] = "none"
    feeders[2]["priority"] = "hospital"
    feeders[3]["trip_group"] = feeders[4]["trip_group"] = "TG1"
    feeders[5]["allowed_blocks"] = "S2"
    s = dict(BASE_SETTINGS, priority_policy=policy)
    return read_study(write_workbook(tmp_path / f"wb_{policy}.xlsx", settings=s,
                                     feeders=feeders))


@pytest.fixture()
def study(tmp_path):
    return _study(tmp_path)


def _write(tmp_path, lines, name="a.csv"):
    p = tmp_path / name
    p.write_text("\n".join(["feeder_id,block"] + lines) + "\n", encoding="utf-8")
    return p


def _problems(path, study):
    with pytest.raises(InputError) as ei:
        read_assignment(path, study)
    return ei.value.problems


def _rows(problems):
    return sorted((p.row, p.column) for p in problems)


def test_unknown_feeder_every_line(tmp_path, study):
    p = _write(tmp_path, ["F00,S1", "FX1,S1", "F06,S2", "FX2,S2"])
    probs = _problems(p, study)
    assert _rows(probs) == [(3, "feeder_id"), (5, "feeder_id")]
    assert "unknown feeder 'FX1'" in probs[0].message
    assert "unknown feeder 'FX2'" in probs[1].message
    assert all(pr.file == str(p) for pr in probs)


def test_unknown_block(tmp_path, study):
    p = _write(tmp_path, ["F00,S1", "F06,S9", "F07,s1"])  # block names are case-sensitive
    probs = _problems(p, study)
    assert _rows(probs) == [(3, "block"), (4, "block")]
    assert "unknown block 'S9'" in probs[0].message and "S1, S2" in probs[0].message


def test_feeder_twice(tmp_path, study):
    p = _write(tmp_path, ["F00,S1", "F06,S2", "F00,S2"])
    probs = _problems(p, study)
    assert _rows(probs) == [(4, "feeder_id")]
    assert "listed twice" in probs[0].message and "line 2" in probs[0].message


def test_relay_none_feeder_in_block(tmp_path, study):
    p = _write(tmp_path, ["F00,S1", "F01,S2"])
    probs = _problems(p, study)
    assert _rows(probs) == [(3, "block")]
    assert "relay 'none'" in probs[0].message
    # unarmed (blank, "unarmed" or "none") is fine for it
    for blank in ("F01,", "F01,unarmed", "F01,none"):
        idx, _ = read_assignment(_write(tmp_path, ["F00,S1", blank], "ok.csv"), study)
        assert idx[1] == UNARMED


def test_priority_exclude(tmp_path, study):
    p = _write(tmp_path, ["F00,S1", "F02,S2"])
    probs = _problems(p, study)
    assert _rows(probs) == [(3, "block")]
    assert "priority" in probs[0].message and "exclude" in probs[0].message


def test_priority_last_block(tmp_path):
    study = _study(tmp_path, "last_block")
    probs = _problems(_write(tmp_path, ["F00,S1", "F02,S1"]), study)
    assert _rows(probs) == [(3, "block")]
    assert "last_block" in probs[0].message and "S2" in probs[0].message
    # the last block (highest order) is allowed
    idx, _ = read_assignment(_write(tmp_path, ["F00,S1", "F02,S2"], "ok.csv"), study)
    assert idx[2] == 1


def test_split_trip_group(tmp_path, study):
    probs = _problems(_write(tmp_path, ["F03,S1", "F04,S2"]), study)
    assert _rows(probs) == [(2, "block")]
    assert "trip group 'TG1'" in probs[0].message and "F04→S2" in probs[0].message
    # one member armed, the other listed unarmed: also split; the line of a listed member
    probs = _problems(_write(tmp_path, ["F03,", "F04,S1"], "b.csv"), study)
    assert len(probs) == 1 and probs[0].row in (2, 3)
    # one member armed, the other not in the file at all (unarmed): the offending line is
    # the armed member's, line 2
    probs = _problems(_write(tmp_path, ["F04,S1"], "c.csv"), study)
    assert _rows(probs) == [(2, "block")]
    # together, or both unarmed, is fine
    for lines in (["F03,S2", "F04,S2"], ["F03,", "F04,"], ["F00,S1"]):
        read_assignment(_write(tmp_path, lines, "ok.csv"), study)


def test_allowed_blocks(tmp_path, study):
    probs = _problems(_write(tmp_path, ["F00,S1", "F05,S1"]), study)
    assert _rows(probs) == [(3, "block")]
    assert "allowed_blocks" in probs[0].message
    idx, _ = read_assignment(_write(tmp_path, ["F05,S2"], "ok.csv"), study)
    assert idx[5] == 1


def test_all_problems_in_one_pass(tmp_path, study):
    lines = [
        "F00,S1",   # 2 ok
        "FX9,S1",   # 3 unknown feeder
        "F06,S7",   # 4 unknown block
        "F00,S2",   # 5 twice
        "F01,S1",   # 6 relay none
        "F02,S1",   # 7 priority (exclude)
        "F03,S1",   # 8 trip group TG1 split (F04 in S2)
        "F04,S2",   # 9
        "F05,S1",   # 10 allowed_blocks is S2
        "F07,S2",   # 11 ok
    ]
    probs = _problems(_write(tmp_path, lines), study)
    assert _rows(probs) == [(3, "feeder_id"), (4, "block"), (5, "feeder_id"), (6, "block"),
                            (7, "block"), (8, "block"), (10, "block")]
    text = "\n".join(str(p) for p in probs)
    for word in ("unknown feeder", "unknown block", "listed twice", "relay 'none'",
                 "priority", "trip group", "allowed_blocks"):
        assert word in text
    assert "7 problems" in InputError(probs).render()


def test_good_file_round_trips(tmp_path, study):
    a = np.full(len(study.feeders), UNARMED, dtype=np.intp)
    a[[0, 3, 4, 7]] = [0, 1, 1, 0]  # F01 (relay none) and F02 (priority) unarmed
    a[5] = 1
    rows = assignment_rows(study, a)
    assert rows[0] == {"feeder_id": "F00", "block": "S1"}
    assert rows[1] == {"feeder_id": "F01", "block": ""}
    p = tmp_path / "good.csv"
    with p.open("w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=["feeder_id", "block"])
        w.writeheader()
        w.writerows(rows)
    back, warns = read_assignment(p, study)
    np.testing.assert_array_equal(back, a)
    assert warns == []  # every feeder listed
    assert rule_problems(study, a, str(p)) == []
    # with the previous allocation: changed flags
    prev = a.copy()
    prev[0] = 1
    rows2 = assignment_rows(study, a, previous=prev)
    assert rows2[0] == {"feeder_id": "F00", "block": "S1", "previous_block": "S2",
                        "changed": "yes"}
    assert rows2[7]["changed"] == "no"
    # a file listing only some feeders: the rest unarmed, with a warning that counts them
    back, warns = read_assignment(_write(tmp_path, ["F00,S1", "F07,S1"], "part.csv"), study)
    assert list(np.flatnonzero(back >= 0)) == [0, 7]
    assert len(warns) == 1 and "8 feeder(s)" in warns[0]


def test_current_assignment_violations_are_warnings(tmp_path):
    feeders = base_feeders(4)
    feeders[0]["current_block"] = "S1"
    feeders[1]["current_block"] = "S1"
    feeders[1]["allowed_blocks"] = "S2"
    study = read_study(write_workbook(tmp_path / "cur.xlsx", feeders=feeders))
    a, warns = current_assignment(study)
    np.testing.assert_array_equal(a, [0, 0, UNARMED, UNARMED])
    assert len(warns) == 1 and "allowed_blocks" in warns[0]
