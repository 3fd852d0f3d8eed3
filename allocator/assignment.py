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


def _read_text(p: Path, col: Collector) -> str:
    """The file's text (UTF-8, BOM allowed); raises when it is missing, over
    :data:`MAX_ASSIGNMENT_BYTES` (bytes), not UTF-8 or holds NUL bytes."""
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
    return text


def _read_header(col: Collector, reader) -> list[str]:
    """The CSV's header line, stripped and lower-case; raises when empty or unreadable."""
    try:
        header = next(reader)
    except StopIteration:
        col.add("empty file; expected a header line 'feeder_id,block'", row=1)
        col.raise_if_any()
    except csv.Error as exc:
        col.add(f"not readable as CSV: {exc}", row=1)
        col.raise_if_any()
    return [h.strip().lower() for h in header]


def _read_block_lines(col: Collector, reader, header: list[str], study: Study
                      ) -> tuple[np.ndarray, dict[int, int]]:
    """The ``feeder_id,block`` lines → (block index per feeder, feeder → line); every
    problem collected."""
    i_f, i_b = header.index("feeder_id"), header.index("block")
    fidx = {fid: i for i, fid in enumerate(study.feeder_ids)}
    bidx = {b: i for i, b in enumerate(study.block_names)}
    out = np.full(len(study.feeders), UNARMED, dtype=np.intp)
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
            if f in lines:
                col.add(f"feeder '{fid}' listed twice (also line {lines[f]})", row=line_no,
                        column="feeder_id")
                continue
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
    return out, lines


def read_assignment(path: str | os.PathLike, study: Study) -> tuple[np.ndarray, list[str]]:
    """Read a ``feeder_id,block`` CSV.  Returns (block index per feeder, warnings).

    Feeders the file does not list are unarmed (a warning says how many).  Raises
    :class:`InputError` listing every problem: unknown feeders or blocks, a feeder twice, and
    every hard-rule violation (see :func:`rule_problems`).
    """
    p = Path(path)
    col = Collector(str(p))
    text = _read_text(p, col)
    reader = csv.reader(io.StringIO(text, newline=""))
    header = _read_header(col, reader)
    if "period" in header and "feeder_id" in header and "block" in header:
        return _read_schedule(p, col, reader, header, study)
    for c in ("feeder_id", "block"):
        if c not in header:
            col.add(f"missing column '{c}' in the header line (found: {', '.join(header)})",
                    row=1, column=c)
    col.raise_if_any()
    out, lines = _read_block_lines(col, reader, header, study)
    col.extend(rule_problems(study, out, str(p), rows=lines))
    col.raise_if_any()
    warnings = []
    missing = len(study.feeders) - len(lines)
    if missing:
        warnings.append(f"{p.name}: {missing} feeder(s) of the workbook are not listed and are "
                        "taken as unarmed")
    return out, warnings


def _lookups(study: Study) -> tuple[dict, dict, dict]:
    return ({f: i for i, f in enumerate(study.feeder_ids)},
            {n: i for i, n in enumerate(study.period_names)},
            {b: i for i, b in enumerate(study.block_names)})


def _schedule_line(col: Collector, rec: list[str], idx: tuple[int, int, int], line_no: int,
                   study: Study, look: tuple[dict, dict, dict]
                   ) -> tuple[int, int | None, int] | None:
    """(feeder, period or None = every period, block) of one schedule line, or None."""
    fid, per, blk = (rec[i].strip() if i < len(rec) else "" for i in idx)
    fidx, pidx, bidx = look
    ok = True
    if not fid or fid not in fidx:
        col.add("blank feeder_id" if not fid else f"unknown feeder '{fid[:60]}' (not in the "
                "workbook's feeders sheet)", row=line_no, column="feeder_id")
        ok = False
    if per and per not in pidx:
        col.add(f"unknown period '{per[:40]}'; the workbook's periods are "
                f"{', '.join(study.period_names)} (blank = every period)", row=line_no,
                column="period")
        ok = False
    b = UNARMED
    if blk and blk.lower() not in ("unarmed", "none"):
        if blk not in bidx:
            col.add(f"unknown block '{blk[:40]}'; blocks are {', '.join(study.block_names)} "
                    "(blank = unarmed)", row=line_no, column="block")
            ok = False
        else:
            b = bidx[blk]
    return (fidx[fid], pidx[per] if per else None, b) if ok else None


def _read_schedule(p: Path, col: Collector, reader, header: list[str],
                   study: Study) -> tuple[np.ndarray, list[str]]:
    """The rest of a ``feeder_id,period,block`` file → ``[feeder, period]`` block index."""
    n_p = len(study.periods)
    idx = (header.index("feeder_id"), header.index("period"), header.index("block"))
    out = np.full((len(study.feeders), n_p), UNARMED, dtype=np.intp)
    line_of = np.zeros((len(study.feeders), n_p), dtype=np.int64)  # 0: not listed
    look = _lookups(study)
    try:
        for line_no, rec in enumerate(reader, start=2):
            if not rec or all(not c.strip() for c in rec):
                continue
            got = _schedule_line(col, rec, idx, line_no, study, look)
            if got is None:
                continue
            f, per, b = got
            cols = np.arange(n_p) if per is None else np.array([per])
            twice = line_of[f, cols]
            if twice.any():
                col.add(f"feeder '{study.feeder_ids[f]}' listed twice for period "
                        f"{study.period_names[cols[np.argmax(twice > 0)]]} (also line "
                        f"{int(twice.max())})", row=line_no, column="period")
                continue
            out[f, cols], line_of[f, cols] = b, line_no
    except csv.Error as exc:
        col.add(f"not readable as CSV: {exc}", row=reader.line_num)
    col.extend(_schedule_problems(study, out, line_of, str(p)))
    col.raise_if_any()
    missing = int((line_of == 0).all(axis=1).sum())
    warnings = [f"{p.name}: {missing} feeder(s) of the workbook are not listed and are taken "
                "as unarmed"] if missing else []
    return out, warnings


def _schedule_problems(study: Study, sched: np.ndarray, line_of: np.ndarray,
                       file: str) -> list[Problem]:
    """Partly listed feeders, non-switchable feeders with two blocks, and the hard rules
    in every period."""
    out: list[Problem] = []
    names = study.period_names
    listed = line_of > 0
    for f in np.flatnonzero(listed.any(axis=1) & ~listed.all(axis=1)):
        gone = ", ".join(names[k] for k in np.flatnonzero(~listed[f]))
        out.append(Problem(file=file, row=int(line_of[f][listed[f]][0]), column="period",
                           message=f"feeder '{study.feeder_ids[f]}' has no line for period(s) "
                           f"{gone}; list every period or leave period blank for all"))
    two = (sched != sched[:, :1]).any(axis=1) & ~study.is_switchable
    for f in np.flatnonzero(two):
        lines = ", ".join(str(int(x)) for x in sorted(set(line_of[f][listed[f]].tolist())))
        out.append(Problem(file=file, row=int(line_of[f][listed[f]][0]), column="block",
                           message=f"feeder '{study.feeder_ids[f]}' has different blocks in "
                           f"different periods (lines {lines}) but is not remote_switch yes "
                           "in the workbook; its block is set in the field, once for the year"))
    seen: set[tuple] = set()
    for k in range(sched.shape[1]):
        rows = {int(f): int(line_of[f, k]) for f in np.flatnonzero(listed[:, k])}
        for pr in rule_problems(study, sched[:, k], file, rows=rows):
            key = (pr.row, pr.message)
            if key not in seen:
                seen.add(key)
                out.append(pr)
    return out


def current_assignment(study: Study) -> tuple[np.ndarray, list[str]]:
    """The workbook's ``current_block`` allocation and its rule violations as warnings
    (the check reports the allocation as it is; the planner never returns such a plan)."""
    a = study.current_assignment.copy()
    warns = [str(p.message) for p in rule_problems(study, a, study.path, sheet="feeders",
                                                    column="current_block")]
    return a, warns


def schedule_rows(study: Study, schedule: np.ndarray) -> list[dict[str, str]]:
    """Rows for ``schedule.csv`` (feeder_id, period, block): one row per feeder and period,
    feeder order then period order; blank block = unarmed."""
    names = study.block_names
    return [{"feeder_id": fid, "period": per,
             "block": names[int(schedule[i, k])] if schedule[i, k] >= 0 else ""}
            for i, fid in enumerate(study.feeder_ids)
            for k, per in enumerate(study.period_names)]


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


__all__ = ["read_assignment", "schedule_rows", "current_assignment", "rule_problems", "assignment_rows",
           "InputError"]
