"""Which feeder sits in which block: read, write and validate assignments.

An assignment is an integer array ``[feeder]`` of block indices (position in
``Study.blocks``, i.e. block order − 1 after sorting) with ``UNARMED`` (−1) for feeders not in
the scheme.  The CSV form is ``feeder_id,block`` with a blank block for unarmed; it is what the
planner writes and what ``check --assignment`` reads.
"""

from __future__ import annotations

import csv
import io
import os
from pathlib import Path

import numpy as np

from .domain import UNARMED, Study
from .errors import Collector, InputError, Problem

#: refuse assignment files larger than this (bytes) before parsing
MAX_ASSIGNMENT_BYTES = 20 * 1024 * 1024


def rule_problems(study: Study, block_idx: np.ndarray, file: str,
                  rows: dict[int, int] | None = None, sheet: str | None = None,
                  column: str = "block") -> list[Problem]:
    """Hard-rule violations of an assignment, one Problem per offending feeder or group.

    Rules: relay ``none`` unarmed; ``allowed_blocks`` honoured; priority feeders per
    ``priority_policy``; all members of a trip group in one block (or all unarmed).
    ``rows`` maps feeder index → line/row for messages.
    """
    rows = rows or {}
    out: list[Problem] = []
    names = study.block_names
    last = len(names) - 1
    for i, f in enumerate(study.feeders):
        b = int(block_idx[i])
        if b == UNARMED:
            continue
        where = dict(file=file, sheet=sheet, row=rows.get(i, f.row if sheet else None),
                     column=column)
        if f.relay == "none":
            out.append(Problem(message=f"feeder '{f.feeder_id}' has relay 'none' and cannot "
                               f"be armed, but is in block {names[b]}", **where))
            continue
        if f.allowed_blocks is not None and names[b] not in f.allowed_blocks:
            allowed = ", ".join(f.allowed_blocks) or "none"
            out.append(Problem(message=f"feeder '{f.feeder_id}' is in block {names[b]} but its "
                               f"allowed_blocks are {allowed}", **where))
        if f.priority:
            pol = study.settings.priority_policy
            if pol == "exclude":
                out.append(Problem(message=f"feeder '{f.feeder_id}' is a priority site "
                                   f"({f.priority}); priority_policy 'exclude' keeps it off the "
                                   f"scheme, but it is in block {names[b]}", **where))
            elif b != last:
                out.append(Problem(message=f"feeder '{f.feeder_id}' is a priority site "
                                   f"({f.priority}); priority_policy 'last_block' allows only "
                                   f"block {names[last]}, but it is in {names[b]}", **where))
    for g, members in study.trip_groups().items():
        blocks = {int(block_idx[m]) for m in members}
        if len(blocks) > 1:
            desc = ", ".join(f"{study.feeders[m].feeder_id}→"
                             f"{names[int(block_idx[m])] if block_idx[m] >= 0 else 'unarmed'}"
                             for m in members)
            # name a line the file has: an armed member's, else any listed member's
            listed = [m for m in members if m in rows]
            first = ([m for m in listed if block_idx[m] >= 0] or listed or members)[0]
            out.append(Problem(file=file, sheet=sheet,
                               row=rows.get(first, study.feeders[first].row if sheet else None),
                               column=column,
                               message=f"trip group '{g}' is split across blocks ({desc}); one "
                               "relay trips them all, so they must share one block or all be "
                               "unarmed"))
    return out


def read_assignment(path: str | os.PathLike, study: Study) -> tuple[np.ndarray, list[str]]:
    """Read a ``feeder_id,block`` CSV.  Returns (block index per feeder, warnings).

    Feeders the file does not list are unarmed (a warning says how many).  Raises
    :class:`InputError` listing every problem: unknown feeders or blocks, a feeder twice, and
    every hard-rule violation (see :func:`rule_problems`).
    """
    p = Path(path)
    col = Collector(str(p))
    if not p.is_file():
        col.add("file not found")
        col.raise_if_any()
    if p.stat().st_size > MAX_ASSIGNMENT_BYTES:
        col.add(f"file is over the {MAX_ASSIGNMENT_BYTES // 1048576} MB limit for an "
                "assignment (refused before parsing)")
        col.raise_if_any()
    raw = p.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        col.add(f"not UTF-8 text (byte {exc.start}); expected a CSV file feeder_id,block")
        col.raise_if_any()
    if "\x00" in text:
        col.add("contains NUL bytes; expected a CSV text file feeder_id,block")
        col.raise_if_any()
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        header = next(reader)
    except StopIteration:
        col.add("empty file; expected a header line 'feeder_id,block'", row=1)
        col.raise_if_any()
    except csv.Error as exc:
        col.add(f"not readable as CSV: {exc}", row=1)
        col.raise_if_any()
    header = [h.strip().lower() for h in header]
    for c in ("feeder_id", "block"):
        if c not in header:
            col.add(f"missing column '{c}' in the header line (found: {', '.join(header)})",
                    row=1, column=c)
    col.raise_if_any()
    i_f, i_b = header.index("feeder_id"), header.index("block")
    fidx = {fid: i for i, fid in enumerate(study.feeder_ids)}
    bidx = {b: i for i, b in enumerate(study.block_names)}
    out = np.full(len(study.feeders), UNARMED, dtype=np.intp)
    seen: dict[int, int] = {}
    lines: dict[int, int] = {}
    try:
        for line_no, rec in enumerate(reader, start=2):
            if not rec or all(not c.strip() for c in rec):
                continue
            fid = rec[i_f].strip() if i_f < len(rec) else ""
            blk = rec[i_b].strip() if i_b < len(rec) else ""
            if not fid:
                col.add("blank feeder_id", row=line_no, column="feeder_id")
                continue
            if fid not in fidx:
                col.add(f"unknown feeder '{fid[:60]}' (not in the workbook's feeders sheet)",
                        row=line_no, column="feeder_id")
                continue
            f = fidx[fid]
            if f in seen:
                col.add(f"feeder '{fid}' listed twice (also line {seen[f]})", row=line_no,
                        column="feeder_id")
                continue
            seen[f] = line_no
            lines[f] = line_no
            if blk == "" or blk.lower() in ("unarmed", "none"):
                continue
            if blk not in bidx:
                col.add(f"unknown block '{blk[:40]}'; blocks are "
                        f"{', '.join(study.block_names)} (blank = unarmed)", row=line_no,
                        column="block")
                continue
            out[f] = bidx[blk]
    except csv.Error as exc:
        col.add(f"not readable as CSV: {exc}", row=reader.line_num)
    col.extend(rule_problems(study, out, str(p), rows=lines))
    col.raise_if_any()
    warnings = []
    missing = len(study.feeders) - len(seen)
    if missing:
        warnings.append(f"{p.name}: {missing} feeder(s) of the workbook are not listed and are "
                        "taken as unarmed")
    return out, warnings


def current_assignment(study: Study) -> tuple[np.ndarray, list[str]]:
    """The workbook's ``current_block`` allocation and its rule violations as warnings
    (the check reports the allocation as it is; the planner never returns such a plan)."""
    a = study.current_assignment.copy()
    warns = [str(p.message) for p in rule_problems(study, a, study.path, sheet="feeders",
                                                    column="current_block")]
    return a, warns


def assignment_rows(study: Study, block_idx: np.ndarray,
                    previous: np.ndarray | None = None) -> list[dict[str, str]]:
    """Rows for ``feeder_id,block[,previous_block,changed]`` output, feeder order."""
    names = study.block_names
    rows = []
    for i, fid in enumerate(study.feeder_ids):
        b = int(block_idx[i])
        row = {"feeder_id": fid, "block": names[b] if b >= 0 else ""}
        if previous is not None:
            pb = int(previous[i])
            row["previous_block"] = names[pb] if pb >= 0 else ""
            row["changed"] = "yes" if pb != b else "no"
        rows.append(row)
    return rows


__all__ = ["read_assignment", "current_assignment", "rule_problems", "assignment_rows",
           "InputError"]
