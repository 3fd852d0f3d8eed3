"""The bad-input corpus (tests/bad_inputs/make_cases.py) through ``allocator.cli.main``.

For every case: exit code 2; each expected problem appears on its own output line, located
by file, sheet, row (CSV: line) and column, with the part of the message that says what was
expected; every problem of the input is listed in the one run (the count in "N problems in the
input" equals the case's list); nothing is written: the ``--out`` folder and even its parent do
not appear, an existing ``--out`` folder is byte-identical afterwards, and the input files are
unchanged.  The table in docs/bad_inputs.md must show the message the tool prints today.

All inputs are invented test data built at test time.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from bad_inputs.make_cases import (CASES, DOC, OUT, VALID, case_argv, doc_rows, first_line,
                                   run)

DOC_ROWS = doc_rows(DOC.read_text(encoding="utf-8")) if DOC.exists() else {}
#: cases also run against an existing --out folder (one per kind and the multi-problem ones)
WITH_PREVIOUS_OUT = ("workbook_truncated_download", "workbook_many_problems_one_pass",
                     "settings_several_problems", "settings_interval_7_via_plan",
                     "metered_many_problems_one_pass", "metered_gaps_with_gap_fill_error",
                     "metered_unknown_feeder_via_plan", "assignment_many_problems_one_pass",
                     "assignment_markup_like_feeder_id")


def tree(d: Path, skip: str | None = None) -> dict[str, str]:
    """relative path → sha256 of every file (folders as 'dir') under d."""
    out = {}
    for p in sorted(d.rglob("*")):
        rel = p.relative_to(d).as_posix()
        if skip and (rel == skip or rel.startswith(skip + "/")):
            continue
        out[rel] = "dir" if p.is_dir() else hashlib.sha256(p.read_bytes()).hexdigest()
    return out


def _assert_reported(case, r) -> None:
    assert r.rc == 2, f"exit code {r.rc}, expected 2\n{r.text}"
    assert "Traceback" not in r.text
    missing = [f"{e.location()}: …{e.text}…" for e in case.expect if not e.found_in(r.problems)]
    assert not missing, "not reported:\n" + "\n".join(missing) + "\n--- output:\n" + r.text
    if case.exact:
        assert r.count == len(case.expect) == len(r.problems), r.text
    assert "Nothing was written." in r.text


def test_corpus_size_and_names():
    kinds = {c.kind for c in CASES}
    assert len(CASES) >= 40 and kinds == {"workbook", "settings", "metered", "assignment"}
    names = [c.name for c in CASES]
    assert len(set(names)) == len(names)
    assert all(n.startswith(c.kind + "_") for n, c in zip(names, CASES))


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_bad_input_is_refused_and_nothing_written(case, tmp_path):
    argv = case_argv(case, tmp_path)
    before = tree(tmp_path)
    r = run(argv, tmp_path, case.env)
    _assert_reported(case, r)
    assert not (tmp_path / OUT).parent.exists(), "a refused run created the output folder"
    assert tree(tmp_path) == before, "a refused run changed or added files beside its inputs"
    assert DOC_ROWS.get(case.name) == first_line(r), (
        f"docs/bad_inputs.md does not show today's message for {case.name}; regenerate it "
        "with: python tests/bad_inputs/make_cases.py")


@pytest.mark.parametrize("name", WITH_PREVIOUS_OUT)
def test_bad_input_leaves_previous_outputs_byte_identical(name, tmp_path):
    case = next(c for c in CASES if c.name == name)
    argv = case_argv(case, tmp_path)
    out = tmp_path / OUT
    (out / "check").mkdir(parents=True)
    (out / "summary.json").write_text('{"from": "the previous run"}\n')
    (out / "check" / "armed_load.csv").write_bytes(b"timestamp_utc,S1_mw\r\nx,-1.5\r\n")
    before = tree(tmp_path)
    r = run(argv, tmp_path, case.env)
    _assert_reported(case, r)
    assert tree(tmp_path) == before
    assert sorted(p.name for p in out.parent.iterdir()) == ["out"]  # no temp folder left


@pytest.mark.parametrize("name", list(VALID))
def test_suspicious_but_valid_input_is_accepted(name, tmp_path):
    """Controls: the corpus cases fail because of what they change, not because the base
    inputs or these look-alikes are refused.  Europe/Berlin skips 02:00-03:00 local on
    2025-03-30 and repeats 02:00-03:00 on 2025-10-26 (EU summer time: last Sunday of March
    and of October, 01:00 UTC; Directive 2000/84/EC)."""
    _, build = VALID[name]
    argv = build(tmp_path) + ["--out", OUT, "--format", "none"]
    r = run(argv, tmp_path)
    assert r.rc == 0, r.text
    assert (tmp_path / OUT / "summary.json").is_file()


def test_doc_lists_exactly_the_corpus():
    assert DOC.exists(), "docs/bad_inputs.md missing: python tests/bad_inputs/make_cases.py"
    assert set(DOC_ROWS) == {c.name for c in CASES}
