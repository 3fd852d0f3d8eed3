"""Interrupted, crashed and disk-full runs leave the previous outputs byte-identical and no
partial files or temporary folders; ``--out`` never lands on an input.

Faults are simulated by monkeypatching the writers (``allocator.files.write_csv`` /
``write_json``, ``allocator.safeio.write_csv``, ``os.replace``) to raise after the first file
of the run has been written into the temporary folder.  Full disk: ``OSError`` with errno
ENOSPC (POSIX ``errno.h``; "No space left on device").  Exit codes: 130 for an interrupt
(128 + SIGINT 2, the shell convention), 1 for a crash, 2 for a refused ``--out``.

The workbook is invented test data.
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
from pathlib import Path

import pytest

import allocator.files
import allocator.safeio
from bad_inputs.make_cases import metered_rows, run, write_csv_rows, write_wb

W = "study.xlsx"


def tree(d: Path) -> dict[str, str]:
    return {p.relative_to(d).as_posix(): ("dir" if p.is_dir() else
                                          hashlib.sha256(p.read_bytes()).hexdigest())
            for p in sorted(d.rglob("*"))}


@pytest.fixture(scope="module")
def _template(tmp_path_factory):
    """An invented workbook, a metered file and finished previous runs: results/out (check)
    and results/plan (plan), made once and copied for each test."""
    d = tmp_path_factory.mktemp("atomic")
    write_wb(d)
    write_csv_rows(d / "m.csv", ["timestamp", "feeder_id", "mw"], metered_rows(24))
    r = run(["check", W, "--out", "results/out", "--format", "none", "--quiet"], d)
    assert r.rc == 0, r.text
    r = run(["plan", W, "--out", "results/plan", "--format", "none", "--quiet",
             "--time-limit", "5"], d)
    assert r.rc == 0, r.text
    assert (d / "results" / "out" / "summary.json").is_file()
    assert (d / "results" / "plan" / "plan.csv").is_file()
    return d


@pytest.fixture()
def study(_template, tmp_path):
    d = tmp_path / "case"
    shutil.copytree(_template, d, symlinks=True)
    return d


class _Fault:
    """Call the real writer ``ok`` times, then raise ``exc``; remembers the files already in
    the temporary folder when it raised (proof that the run failed part-way)."""

    def __init__(self, real, exc: BaseException, ok: int = 1, partial: bool = False):
        self.real, self.exc, self.ok, self.partial = real, exc, ok, partial
        self.calls = 0
        self.folder: Path | None = None
        self.present: list[str] = []

    def __call__(self, obj, path, *a, **kw):
        self.calls += 1
        path = Path(path)
        if self.calls <= self.ok:
            return self.real(obj, path, *a, **kw)
        if self.partial:  # a full disk: part of the file reaches it
            path.write_bytes(b'{"blocks": [')
        self.folder = path.parent.resolve()
        self.present = sorted(p.name for p in path.parent.iterdir())
        raise self.exc


FAULTS = {
    "keyboard_interrupt": (KeyboardInterrupt(), 130, "interrupted; previous outputs left as "
                                                     "they were"),
    "crash": (RuntimeError("simulated crash in a writer"), 1,
              "internal error: RuntimeError: simulated crash in a writer"),
    "disk_full": (OSError(errno.ENOSPC, os.strerror(errno.ENOSPC)), 1,
                  "No space left on device"),
}
#: (command, module whose writer is patched, writer, successful calls before the fault)
WRITERS = {
    "check_csv_after_summary_and_first_csv": ("check", allocator.files, "write_csv", 1),
    "check_summary_json": ("check", allocator.files, "write_json", 0),
    "plan_json_after_plan_csv": ("plan", allocator.files, "write_json", 0),
}


@pytest.mark.parametrize("fault", list(FAULTS))
@pytest.mark.parametrize("where", list(WRITERS))
def test_fault_in_a_writer_keeps_previous_outputs(study, monkeypatch, fault, where):
    exc, code, text = FAULTS[fault]
    command, module, writer, ok = WRITERS[where]
    out = study / "results" / ("out" if command == "check" else "plan")
    before = tree(study / "results")
    w = _Fault(getattr(module, writer), exc, ok=ok, partial=fault == "disk_full")
    monkeypatch.setattr(module, writer, w)
    argv = [command, W, "--out", f"results/{out.name}", "--format", "none", "--quiet"]
    if command == "plan":
        argv += ["--time-limit", "5"]
    r = run(argv, study)
    assert w.folder is not None, "the fault did not fire"
    assert w.folder != out and w.folder.parent == out.parent  # the temp folder beside out
    if where != "check_summary_json":
        assert w.present, "nothing was written before the fault"
    assert r.rc == code, r.text
    assert tree(study / "results") == before, "previous outputs changed or files left"
    assert not w.folder.exists()
    lines = [ln for ln in r.text.splitlines() if ln.strip()]
    assert len(lines) == 1 and text in lines[0] and "Traceback" not in r.text, r.text


def test_crash_traceback_only_with_debug(study, monkeypatch):
    def boom(*a, **kw):
        raise RuntimeError("simulated crash")
    monkeypatch.setattr(allocator.files, "write_csv", boom)
    argv = ["check", W, "--out", "results/out", "--format", "none", "--quiet"]
    r = run(argv, study)
    assert r.rc == 1 and "Traceback" not in r.text
    r = run(argv + ["--debug"], study)
    assert r.rc == 1 and "Traceback (most recent call last)" in r.text
    assert "simulated crash" in r.text


def test_failed_final_rename_restores_previous_outputs(study, monkeypatch):
    """The last step (temp folder → target) fails: the old folder, already moved aside,
    is moved back."""
    before = tree(study / "results")
    real = os.replace

    def replace(src, dst):
        if Path(src).name.startswith(".out.tmp-"):
            raise OSError(errno.EIO, "simulated I/O error on rename")
        return real(src, dst)
    monkeypatch.setattr(os, "replace", replace)
    r = run(["check", W, "--out", "results/out", "--format", "none", "--quiet"], study)
    assert r.rc == 1 and "simulated I/O error on rename" in r.text
    assert tree(study / "results") == before, "previous outputs changed or files left"


def test_interrupt_before_any_output_creates_nothing(study, monkeypatch):
    import allocator.workbook

    def interrupted(*a, **kw):
        raise KeyboardInterrupt
    monkeypatch.setattr(allocator.workbook, "read_study", interrupted)
    r = run(["check", W, "--out", "fresh/out", "--format", "none", "--quiet"], study)
    assert r.rc == 130
    assert not (study / "fresh").exists()


def test_interrupt_without_previous_outputs_leaves_no_folder(study, monkeypatch):
    w = _Fault(allocator.files.write_csv, KeyboardInterrupt())
    monkeypatch.setattr(allocator.files, "write_csv", w)
    r = run(["check", W, "--out", "fresh/out", "--format", "none", "--quiet"], study)
    assert r.rc == 130 and w.present
    assert list((study / "fresh").iterdir()) == []  # parent may exist; nothing inside


@pytest.mark.parametrize("where", ["planner", "check_files_after_plan_csv", "reports"])
def test_plan_interrupted_keeps_previous_plan(study, monkeypatch, where):
    import allocator.plan
    import allocator.report

    before = tree(study / "results")
    seen = []
    if where == "planner":
        def stop(*a, **kw):
            raise KeyboardInterrupt
        monkeypatch.setattr(allocator.plan, "plan_allocation", stop)
    elif where == "check_files_after_plan_csv":
        w = _Fault(allocator.files.write_csv, KeyboardInterrupt(), ok=1)
        monkeypatch.setattr(allocator.files, "write_csv", w)
        seen = w
    else:
        def stop(chk, out_tmp, *a, **kw):
            seen.append(out_tmp)
            raise KeyboardInterrupt
        monkeypatch.setattr(allocator.report, "write_reports", stop)
    r = run(["plan", W, "--out", "results/plan", "--format", "none", "--quiet",
             "--time-limit", "5"], study)
    assert r.rc == 130, r.text
    if where == "check_files_after_plan_csv":
        # the plan's check files are written at the top of the (temporary) plan folder
        assert seen.folder is not None and seen.folder.name.startswith(".plan.tmp-"), \
            "fault did not fire"
        assert {"plan.csv", "plan.json", "summary.json"} <= set(seen.present)
    elif where == "reports":
        assert seen, "the fault did not fire inside the run"
    assert tree(study / "results") == before, "previous outputs changed or files left"


# --------------------------------------------------------------------------------------------
# --out never on an input
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("command", ["check", "plan"])
@pytest.mark.parametrize("out", ["study.xlsx", ".", "..", "m.csv", "{abs}"])
def test_out_onto_an_input_is_refused(study, command, out):
    target = str(study) if out == "{abs}" else out
    inputs = {p: p.read_bytes() for p in (study / W, study / "m.csv")}
    listing = sorted(p.name for p in study.iterdir())
    argv = [command, W, "--metered", "m.csv", "--out", target, "--format", "none"]
    r = run(argv, study)
    assert r.rc == 2, r.text
    assert "Nothing was written" in r.text and ("is an input file" in r.text
                                                or "contains the input file" in r.text)
    assert {p: p.read_bytes() for p in inputs} == inputs
    assert sorted(p.name for p in study.iterdir()) == listing


def test_out_through_a_symlink_to_the_input_folder_is_refused(study):
    (study / "link").symlink_to(study, target_is_directory=True)
    before = (study / W).read_bytes()
    r = run(["check", W, "--out", "link", "--format", "none"], study)
    assert r.rc == 2 and "contains the input file" in r.text
    assert (study / W).read_bytes() == before and (study / "link").is_symlink()


def test_out_onto_the_assignment_file_is_refused(study):
    (study / "a.csv").write_text("feeder_id,block\nF00,S1\n")
    r = run(["check", W, "--assignment", "a.csv", "--out", "a.csv", "--format", "none"], study)
    assert r.rc == 2 and "is an input file" in r.text
    assert (study / "a.csv").read_text() == "feeder_id,block\nF00,S1\n"


def test_out_onto_an_existing_file_is_refused(study):
    (study / "notes.txt").write_text("keep me")
    r = run(["check", W, "--out", "notes.txt", "--format", "none"], study)
    assert r.rc == 2 and "exists and is not a folder" in r.text
    assert (study / "notes.txt").read_text() == "keep me"


# --------------------------------------------------------------------------------------------
# permissions follow the umask (POSIX mkdir/open: mode 0777 / 0666 with the umask bits
# cleared)
# --------------------------------------------------------------------------------------------
@pytest.fixture()
def umask():
    """Set a umask for one test and restore the previous one after."""
    old = os.umask(0o022)
    os.umask(old)
    yield lambda m: os.umask(m)
    os.umask(old)


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
@pytest.mark.parametrize("mask", [0o022, 0o002, 0o027], ids=["022", "002", "027"])
def test_output_folder_gets_the_umask_mode(tmp_path, umask, mask):
    umask(mask)
    target = tmp_path / "shared" / "out"
    with allocator.safeio.atomic_dir(target) as tmp:
        assert tmp.stat().st_mode & 0o777 == 0o700  # private while it is written
        (tmp / "summary.json").write_text("{}\n")
        (tmp / "figures").mkdir()
        (tmp / "figures" / "a.png").write_bytes(b"png")
    dir_mode, file_mode = 0o777 & ~mask, 0o666 & ~mask
    assert target.stat().st_mode & 0o777 == dir_mode
    assert (target / "figures").stat().st_mode & 0o777 == dir_mode
    assert (target / "summary.json").stat().st_mode & 0o777 == file_mode
    assert (target / "figures" / "a.png").stat().st_mode & 0o777 == file_mode
    assert sorted(p.name for p in target.iterdir()) == ["figures", "summary.json"]


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_command_outputs_readable_by_the_group(study, umask):
    """A real run with umask 002 (a shared project folder): every folder 0775 and every file
    0664, the replaced previous output folder included."""
    umask(0o002)
    r = run(["check", W, "--out", "results/out", "--quiet"], study)
    assert r.rc == 0, r.text
    out = study / "results" / "out"
    paths = [out] + sorted(out.rglob("*"))
    assert len(paths) > 5
    for p in paths:
        want = 0o775 if p.is_dir() else 0o664
        assert p.stat().st_mode & 0o777 == want, (p, oct(p.stat().st_mode))
