"""Hostile input files and hostile text inside valid ones.

Outside sources the checks follow:

* the "billion laughs" XML entity-expansion attack (CVE-2003-1564) and external entities
  (XXE); the defusedxml documentation lists both as what it refuses (``EntitiesForbidden``);
  openpyxl uses defusedxml when it is installed (``openpyxl.xml.DEFUSEDXML``);
* ECMA-376 Part 2 (Open Packaging Conventions): an .xlsx is a zip package; the part names
  used here (``xl/workbook.xml``, ``xl/worksheets/sheetN.xml``, ``xl/styles.xml``,
  ``[Content_Types].xml``, ``docProps/core.xml``) are the ones openpyxl writes;
* a zip bomb: a small archive whose member expands to hundreds of MB (deflate reaches about
  1000:1 on zeros, from memory);
* OWASP "CSV Injection": a cell beginning with ``=``, ``+``, ``-``, ``@``, tab or carriage
  return is run as a formula by spreadsheet programs; prefixing ``'`` makes it text;
* path traversal (OWASP): ``../`` or ``..\\`` in a name used to build a file path.

All feeders and values are invented.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
import struct
import subprocess
import sys
import time
import zipfile
from pathlib import Path

import openpyxl
import pytest

from allocator.errors import InputError
from allocator.workbook import read_study
from bad_inputs.make_cases import edit_wb, feeders, metered_rows, run, write_csv_rows, write_wb

W = "study.xlsx"
LAUGHS = ("<!DOCTYPE lolz [\n <!ENTITY lol \"lol\">\n"
          + "".join(f" <!ENTITY lol{i} \"{('&lol' + str(i - 1) + ';') * 10}\">\n"
                    .replace("&lol0;", "&lol;") for i in range(1, 10)) + "]>\n")
XXE = "<!DOCTYPE r [\n <!ENTITY xxe SYSTEM \"file:///etc/hostname\">\n]>\n"


def _with_doctype(xml: bytes, doctype: str, ref: str, part: str) -> bytes:
    """Insert a DOCTYPE after the XML declaration and reference the entity in the part."""
    s = xml.decode("utf-8")
    m = re.match(r"<\?xml[^>]*\?>\s*", s)
    head, body = (s[: m.end()], s[m.end():]) if m else ("", s)
    subs = {
        "xl/workbook.xml": (r'name="settings"', f'name="{ref}"'),
        "xl/worksheets/sheet1.xml": (r"<t>([^<]*)</t>", f"<t>{ref}</t>"),
        "xl/worksheets/sheet3.xml": (r"<t>([^<]*)</t>", f"<t>{ref}</t>"),
        "xl/styles.xml": (r'<name val="[^"]*"', f'<name val="{ref}"'),
        "[Content_Types].xml": (r'ContentType="[^"]*"', f'ContentType="{ref}"'),
        "docProps/core.xml": (r"<dc:creator>[^<]*</dc:creator>",
                              f"<dc:creator>{ref}</dc:creator>"),
    }
    pat, rep = subs[part]
    body, n = re.subn(pat, rep, body, count=1)
    assert n == 1, f"no place for the entity in {part}"
    return (head + doctype + body).encode("utf-8")


def _rewrite(src: Path, dst: Path, change: dict[str, bytes]) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            zout.writestr(info, change.get(info.filename, zin.read(info.filename)))
    return dst


PARTS = ("xl/workbook.xml", "xl/worksheets/sheet1.xml", "xl/worksheets/sheet3.xml",
         "xl/styles.xml", "[Content_Types].xml", "docProps/core.xml")


@pytest.fixture(scope="module")
def valid_wb(tmp_path_factory) -> Path:
    return write_wb(tmp_path_factory.mktemp("valid"))


@pytest.fixture(scope="module")
def hostile(tmp_path_factory, valid_wb) -> dict[str, Path]:
    """Billion-laughs and XXE variants of the valid workbook, one per XML part."""
    d = tmp_path_factory.mktemp("hostile")
    out = {}
    with zipfile.ZipFile(valid_wb) as z:
        names = set(z.namelist())
        for part in PARTS:
            assert part in names, part
            xml = z.read(part)
            out[f"laughs:{part}"] = _rewrite(valid_wb, d / f"laughs_{len(out)}.xlsx",
                                             {part: _with_doctype(xml, LAUGHS, "&lol9;",
                                                                  part)})
            out[f"xxe:{part}"] = _rewrite(valid_wb, d / f"xxe_{len(out)}.xlsx",
                                          {part: _with_doctype(xml, XXE, "&xxe;", part)})
    return out


def test_defusedxml_is_active():
    from openpyxl.xml import DEFUSEDXML

    import defusedxml  # noqa: F401 - the dependency itself is installed

    assert DEFUSEDXML is True


@pytest.mark.parametrize("kind", ["laughs", "xxe"])
@pytest.mark.parametrize("part", PARTS)
def test_entity_attacks_are_refused(hostile, kind, part):
    t0 = time.perf_counter()
    with pytest.raises(InputError) as ei:
        read_study(hostile[f"{kind}:{part}"])
    assert time.perf_counter() - t0 < 10
    msg = str(ei.value)
    # defusedxml refused it (its exception names), and the message says why in plain words
    assert "EntitiesForbidden" in msg or "DTDForbidden" in msg, msg
    assert "entity-expansion ('billion laughs') or external-entity attack" in msg
    hostname = Path("/etc/hostname")
    if kind == "xxe" and hostname.exists() and hostname.read_text().strip():
        assert hostname.read_text().strip() not in msg


_CHILD = r"""
import json, resource, sys, time
from allocator.errors import InputError
from allocator.workbook import read_study
res = {}
for p in sys.argv[1:]:
    t = time.perf_counter()
    try:
        read_study(p)
        res[p] = ["ok", time.perf_counter() - t]
    except InputError as e:
        res[p] = ["InputError", time.perf_counter() - t, str(e)[:300]]
print(json.dumps({"results": res,
                  "maxrss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def _child(paths: list[Path]) -> dict:
    """read_study on each path in a fresh interpreter under a 4 GB address-space cap;
    returns results and the child's peak RSS."""
    import resource

    def cap():
        resource.setrlimit(resource.RLIMIT_AS, (4 << 30, 4 << 30))
    r = subprocess.run([sys.executable, "-c", _CHILD, *map(str, paths)], capture_output=True,
                       text=True, timeout=120, preexec_fn=cap)
    assert r.returncode == 0, r.stderr[-2000:]
    return json.loads(r.stdout.strip().splitlines()[-1])


@pytest.fixture(scope="module")
def bomb(tmp_path_factory, valid_wb) -> Path:
    """The valid workbook with its first sheet replaced by 501 MB of zeros (about 2 MB
    compressed): over the 500 MB uncompressed limit."""
    p = tmp_path_factory.mktemp("bomb") / "bomb.xlsx"
    with zipfile.ZipFile(valid_wb) as zin, zipfile.ZipFile(p, "w", zipfile.ZIP_DEFLATED,
                                                           compresslevel=1) as zout:
        for info in zin.infolist():
            if info.filename == "xl/worksheets/sheet1.xml":
                with zout.open(info.filename, "w", force_zip64=True) as f:
                    chunk = b"\0" * (1 << 20)
                    for _ in range(501):
                        f.write(chunk)
            else:
                zout.writestr(info, zin.read(info.filename))
    assert p.stat().st_size < 10 << 20
    return p


@pytest.fixture(scope="module")
def lying_bomb(tmp_path_factory, bomb) -> Path:
    """The bomb with its size fields rewritten to claim 1,000 bytes: passes the declared-
    size check, so the reader must stop at the declared size (CRC mismatch) instead of
    inflating 501 MB."""
    data = bytearray(bomb.read_bytes())
    name = b"xl/worksheets/sheet1.xml"
    # PKWARE APPNOTE 4.3.7 / 4.3.12: the local header holds the uncompressed size at
    # offset 22, the central directory header at offset 24 (4 bytes each; 0xFFFFFFFF means
    # "see the zip64 extra field", whose first 8 bytes are the uncompressed size)
    n = 0
    for sig, off, name_at in ((b"PK\x03\x04", 22, 30), (b"PK\x01\x02", 24, 46)):
        for m in re.finditer(re.escape(sig), bytes(data)):
            h = m.start()
            if bytes(data[h + name_at: h + name_at + len(name)]) != name:
                continue
            if struct.unpack_from("<I", data, h + off)[0] == 0xFFFFFFFF:
                name_len = struct.unpack_from("<H", data, h + name_at - 4)[0]
                extra = h + name_at + name_len
                assert struct.unpack_from("<H", data, extra)[0] == 1  # zip64 extra block
                struct.pack_into("<Q", data, extra + 4, 1000)
            else:
                struct.pack_into("<I", data, h + off, 1000)
            n += 1
    assert n == 2
    p = bomb.parent / "lying.xlsx"
    p.write_bytes(bytes(data))
    with zipfile.ZipFile(p) as z:
        assert z.getinfo("xl/worksheets/sheet1.xml").file_size == 1000
    return p


def test_zip_bomb_is_refused_with_the_limit(bomb):
    t0 = time.perf_counter()
    with pytest.raises(InputError) as ei:
        read_study(bomb)
    assert time.perf_counter() - t0 < 5
    msg = str(ei.value)
    assert "expands to 501 MB uncompressed, over the 500 MB limit" in msg


def test_hostile_workbooks_fast_and_without_memory_blow_up(hostile, bomb, lying_bomb,
                                                           valid_wb):
    base = _child([valid_wb])
    assert base["results"][str(valid_wb)][0] == "ok"
    paths = list(hostile.values()) + [bomb, lying_bomb]
    got = _child(paths)
    for p in paths:
        status, seconds, *msg = got["results"][str(p)]
        assert status == "InputError", (p, msg)
        assert seconds < 10, (p, seconds)
    # the 501 MB member is never inflated into memory, no entity expands
    assert got["maxrss_mb"] < base["maxrss_mb"] + 150, (got["maxrss_mb"], base["maxrss_mb"])


# --------------------------------------------------------------------------------------------
# size limits
# --------------------------------------------------------------------------------------------
def test_workbook_size_limit_from_environment(valid_wb, monkeypatch):
    monkeypatch.setenv("UFLS_MAX_WORKBOOK_MB", "0.005")
    with pytest.raises(InputError) as ei:
        read_study(valid_wb)
    msg = str(ei.value)
    assert "over the 0.005 MB limit" in msg and "UFLS_MAX_WORKBOOK_MB" in msg
    monkeypatch.setenv("UFLS_MAX_WORKBOOK_MB", "1")  # the same file under a 1 MB limit
    assert read_study(valid_wb).feeders


@pytest.mark.parametrize("value", ["lots", "-1", "0", "nan"])
def test_workbook_size_limit_not_a_positive_number_keeps_the_default(valid_wb, monkeypatch,
                                                                     value):
    monkeypatch.setenv("UFLS_MAX_WORKBOOK_MB", value)
    assert read_study(valid_wb).feeders  # the 50 MB default applies (documented)


@pytest.fixture()
def metered_case(tmp_path):
    write_wb(tmp_path)
    write_csv_rows(tmp_path / "m.csv", ["timestamp", "feeder_id", "mw"], metered_rows(24))
    return tmp_path


def _read_metered(folder: Path):
    from allocator.metered import read_metered
    from allocator.timegrid import study_intervals

    st = read_study(folder / W)
    s = st.settings
    return read_metered(folder / "m.csv", st, study_intervals(s.year, s.timezone,
                                                              s.interval_minutes))


def test_metered_file_size_is_not_limited_but_memory_is(metered_case, monkeypatch):
    """The old metered size cap is gone (UFLS_MAX_METERED_MB has no effect); what would not fit
    in memory is refused before anything is allocated, with the numbers."""
    monkeypatch.setenv("UFLS_MAX_METERED_MB", "0.001")
    assert _read_metered(metered_case).n_feeders_with_data == 10
    monkeypatch.setenv("UFLS_MAX_MEMORY_MB", "100")
    with pytest.raises(InputError) as ei:
        _read_metered(metered_case)
    msg = str(ei.value)
    # 10 feeders + TOTAL, 8,760 hourly intervals in 2025, 10 bytes a cell, plus 256 MB
    assert "(11 series × 8,760 intervals × 10 bytes, plus 256 MB for reading)" in msg
    assert "about 0.25 GB" in msg and "only 0.10 GB is available (UFLS_MAX_MEMORY_MB)" in msg
    monkeypatch.setenv("UFLS_MAX_MEMORY_MB", "300")
    assert _read_metered(metered_case).n_feeders_with_data == 10


def test_memory_available_reads_proc_meminfo():
    """MemAvailable from /proc/meminfo (Linux proc(5)), compared with the kernel's own file
    read here independently."""
    from allocator.memory import available_bytes

    text = Path("/proc/meminfo").read_text() if Path("/proc/meminfo").exists() else ""
    m = re.search(r"^MemAvailable:\s+(\d+) kB", text, re.M)
    if not m:
        pytest.skip("no /proc/meminfo MemAvailable on this system")
    got, source = available_bytes()
    if source == "MemAvailable":
        assert abs(got - int(m.group(1)) * 1024) < 512 * 1024 * 1024  # it moves between reads


def test_memory_available_without_proc_meminfo_falls_back(monkeypatch):
    """Where /proc/meminfo is missing the free physical pages of sysconf(3) are used, here
    compared with os.sysconf read directly; with nothing known, nothing is refused."""
    import os

    from allocator import memory

    monkeypatch.setattr(memory, "_meminfo_available", lambda: None)
    monkeypatch.setattr(memory, "_psutil_available", lambda: None)
    monkeypatch.delenv("UFLS_MAX_MEMORY_MB", raising=False)
    try:
        want = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        want = None
    got, source = memory.available_bytes()
    if want is not None and source == "free physical memory":
        assert abs(got - want) < 512 * 1024 * 1024
    monkeypatch.setattr(memory, "_sysconf_available", lambda: None)
    monkeypatch.setattr(memory, "_address_space_left", lambda: None)
    assert memory.available_bytes() == (None, "unknown")
    memory.require(10**15, "a petabyte", "x.csv")  # unknown: not refused


@pytest.mark.parametrize("value", ["lots", "-1", "0", "inf", "nan"])
def test_memory_limit_not_a_positive_number_is_an_input_error(metered_case, monkeypatch,
                                                              value):
    monkeypatch.setenv("UFLS_MAX_MEMORY_MB", value)
    with pytest.raises(InputError) as ei:
        _read_metered(metered_case)
    assert f"UFLS_MAX_MEMORY_MB='{value}'" in str(ei.value)


# --------------------------------------------------------------------------------------------
# hostile text in a valid workbook: path traversal, formula injection, HTML, terminal markup
# --------------------------------------------------------------------------------------------
INJECT = ['=HYPERLINK("http://x")', "+1", "-2+3", "@SUM(A1)"]
TRAVERSAL = ["../../etc/passwd", "a/b", "..\\x", "/abs/path"]


def _hostile_study(folder: Path) -> Path:
    """Ten feeders; ids, substations and zones are injection and traversal strings; block
    names too.  Armed feeders with large PV export at sunny middays, so the CSVs hold
    negative MW numbers (which must stay numbers)."""
    fs = feeders()
    ids = INJECT + TRAVERSAL + ["<script>alert(1)</script>", "F09"]
    for f, fid in zip(fs, ids):
        f["feeder_id"] = fid
    for i, f in enumerate(fs):
        f["substation"] = ["=cmd|' /C calc'!A0", "-SUB", "@SUB", "+SUB"][i % 4]
        f["zone"] = ["-Z1", "=Z2"][i % 2]
        f["trip_group"] = None
        f["current_block"] = {"S1": "../../B1", "S2": "..\\B2"}.get(f["current_block"])
        if f["allowed_blocks"] == "S2":
            f["allowed_blocks"] = "..\\B2"
    fs[8]["current_block"] = "../../B1"
    for i in (0, 1, 7, 8):
        fs[i]["pv_mw"] = 6.0 * (fs[i]["peak_mw"])
    from wbfactory import BASE_BLOCKS

    bs = [dict(b) for b in BASE_BLOCKS]
    bs[0]["block"], bs[1]["block"] = "../../B1", "..\\B2"
    p = write_wb(folder, feeders_=fs, blocks=bs)

    def as_text(wb):  # typed into a spreadsheet as text, not as formulas
        for ws in wb.worksheets:
            for row in ws.iter_rows():
                for c in row:
                    if isinstance(c.value, str) and c.value.startswith("="):
                        c.data_type = "s"
    return edit_wb(p, as_text)


@pytest.fixture(scope="module")
def hostile_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("hostile_text")
    _hostile_study(d)
    outside_before = {p: sorted(x.name for x in p.iterdir()) for p in (d, d.parent)}
    r_check = run(["check", W, "--out", "out/check"], d)  # every report format
    r_plan = run(["plan", W, "--out", "out/plan", "--time-limit", "5"], d)
    return d, r_check, r_plan, outside_before


def test_hostile_text_runs(hostile_run):
    d, r_check, r_plan, _ = hostile_run
    assert r_check.rc == 0, r_check.text
    assert r_plan.rc == 0, r_plan.text


def test_path_traversal_ids_stay_inside_out(hostile_run):
    d, _, _, before = hostile_run
    out = (d / "out").resolve()
    files = [p for p in (d / "out").rglob("*")]
    assert any(p.suffix == ".png" for p in files) and any(p.suffix == ".csv" for p in files)
    for p in files:
        rp = p.resolve()
        assert rp == out or out in rp.parents, p
        assert not p.is_symlink()
        assert ".." not in p.relative_to(d / "out").parts
    # nothing new beside the inputs or in the folder above them
    after = {p: sorted(x.name for x in p.iterdir()) for p in before}
    assert after[d] == sorted(before[d] + ["out"])
    assert after[d.parent] == before[d.parent]
    assert not (d / "etc").exists() and not Path("/abs/path").exists()


def _csv_cells(path: Path) -> list[str]:
    with open(path, newline="", encoding="utf-8") as fh:
        return [c for row in csv.reader(fh) for c in row]


def _is_number(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def test_formula_injection_blocked_in_every_csv(hostile_run):
    d, _, _, _ = hostile_run
    csvs = sorted((d / "out").rglob("*.csv"))
    names = {p.relative_to(d / "out").as_posix() for p in csvs}
    for must in ("check/armed_load.csv", "check/exporting_feeders.csv",
                 "check/by_substation.csv", "plan/plan.csv", "plan/armed_load.csv",
                 "plan/current/armed_load.csv"):
        assert must in names, names
    seen_injected, seen_negative = set(), 0
    for p in csvs:
        for c in _csv_cells(p):
            if c[:1] in ("=", "+", "-", "@", "\t", "\r"):
                assert _is_number(c), f"{p.name}: formula-like text cell {c!r}"
                seen_negative += c.startswith("-")
            if c.startswith("'") and _is_number(c[1:]) and c[1:] not in INJECT:
                pytest.fail(f"{p.name}: a number was prefixed: {c!r}")
            if c.startswith("'"):
                seen_injected.add(c[1:])
    # the hostile values did reach the CSVs (quoted) and negative numbers stayed numbers
    for v in INJECT + ["=cmd|' /C calc'!A0", "-SUB", "@SUB", "+SUB", "-Z1", "=Z2"]:
        assert v in seen_injected, v
    assert seen_negative > 0
    # column headers built from block names
    header = _csv_cells(d / "out" / "check" / "armed_load.csv")[:9]
    assert all(h[:1] not in "=+-@" or h.startswith("'") for h in header)


def test_plan_csv_ids_neutralised(hostile_run):
    d, _, _, _ = hostile_run
    with open(d / "out" / "plan" / "plan.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    ids = [r["feeder_id"] for r in rows]
    assert ids[:4] == ["'" + v for v in INJECT]
    assert ids[4:8] == TRAVERSAL  # text, not a path: written as it is


def test_report_xlsx_holds_text_not_formulas(hostile_run):
    d, _, _, _ = hostile_run
    for p in (d / "out").rglob("*.xlsx"):
        wb = openpyxl.load_workbook(p)
        for ws in wb.worksheets:
            for row in ws.iter_rows():
                for c in row:
                    if isinstance(c.value, str) and ("HYPERLINK" in c.value or
                                                     "SUM(A1)" in c.value):
                        assert c.data_type == "s", (p.name, ws.title, c.coordinate, c.value)


def test_report_html_escapes_ids(hostile_run):
    d, _, _, _ = hostile_run
    pages = list((d / "out").rglob("*.html"))
    assert pages
    for p in pages:
        html = p.read_text(encoding="utf-8")
        assert "<script>alert(1)</script>" not in html
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_terminal_markup_in_input_errors_is_shown_verbatim(tmp_path):
    """rich console markup ('[/red]', '[bold]') in an id is printed as it is, not parsed
    (it used to crash the error printer with MarkupError, or vanish)."""
    write_wb(tmp_path)
    (tmp_path / "a.csv").write_text("feeder_id,block\n[/red],S1\n[bold]x,S2\n")
    r = run(["check", W, "--assignment", "a.csv", "--out", "o", "--format", "none"], tmp_path)
    assert r.rc == 2
    assert "unknown feeder '[/red]'" in r.text and "unknown feeder '[bold]x'" in r.text


def test_terminal_markup_in_workbook_text_is_printed_verbatim(tmp_path):
    fs = feeders()
    fs[0]["feeder_id"] = "[/red]"
    fs[0]["pv_mw"] = 5.0  # PV above peak: validate prints a warning naming the feeder
    write_wb(tmp_path, feeders_=fs)
    r = run(["validate", W], tmp_path)
    assert r.rc == 0, r.text
    assert "[/red]" in r.text
