"""Every command's console output at 80 columns and at 40, piped (no terminal): no line longer
than the width, nothing cut with "…", no spinner or control characters, and the key numbers
of the files the command wrote present whole.

The commands run through ``allocator.cli.main`` with stdout captured (not a terminal, like a
pipe or a log file); ``COLUMNS`` sets rich's width.  The demo runs on the small invented
study of tests/smallnet.py instead of the demo network, to stay quick.  Invented test data.
"""

from __future__ import annotations

import contextlib
import io
import json
import re

import pytest

import allocator.demo
from allocator.cli import main
from smallnet import write_small_study

WIDTHS = (80, 40)
SPINNER = re.compile("[\u2800-\u28ff\x1b\r]")  # braille spinner frames, ANSI escapes, CR


@pytest.fixture(scope="module")
def wb(tmp_path_factory):
    return write_small_study(tmp_path_factory.mktemp("console"))


def _run(argv, width, monkeypatch=None):
    buf = io.StringIO()
    with pytest.MonkeyPatch.context() as mp, contextlib.redirect_stdout(buf):
        mp.setenv("COLUMNS", str(width))
        if monkeypatch:
            monkeypatch(mp)
        rc = main(argv)
    text = buf.getvalue()
    assert rc == 0, text[-3000:]
    return text


def _fits(text, width):
    lines = text.splitlines()
    assert lines
    too_long = [x for x in lines if len(x) > width]
    assert not too_long, too_long[:3]
    assert "…" not in text
    assert not SPINNER.search(text), repr(SPINNER.search(text).group())


def _whole(text, values):
    """Each formatted value appears as a whole token (not the start of a cut number)."""
    flat = " ".join(text.split())
    for v in values:
        assert re.search(rf"(?<![\d.]){re.escape(v)}(?![\d])", flat), v


def _check_numbers(summ):
    out = [f"{summ['worst_violation_pp']:.2f}"]
    for b in summ["blocks"]:
        out += [f"{b['min_share_pct']:.1f}", f"{b['max_share_pct']:.1f}",
                f"{b['headroom_to_min_pp']:+.2f}", f"{b['headroom_to_max_pp']:+.2f}",
                f"{b['pickup_hz']:.2f}", b["status"]]
    return out


@pytest.mark.parametrize("width", WIDTHS)
def test_validate(wb, width):
    text = _run(["validate", str(wb)], width)
    _fits(text, width)
    _whole(text, ["36", "48.6 MW", "11.2 MW", "16 warnings", "1 more warning"])


@pytest.mark.parametrize("width", WIDTHS)
def test_check(wb, width, tmp_path):
    text = _run(["check", str(wb), "--out", str(tmp_path / "o"), "--format", "none"], width)
    _fits(text, width)
    summ = json.loads((tmp_path / "o" / "summary.json").read_text(encoding="utf-8"))
    _whole(text, _check_numbers(summ) + ["NOT COMPLIANT", "2017/2196"])


@pytest.mark.parametrize("width", WIDTHS)
def test_plan(wb, width, tmp_path):
    text = _run(["plan", str(wb), "--out", str(tmp_path / "p"), "--format", "none",
                 "--time-limit", "3"], width)
    _fits(text, width)
    info = json.loads((tmp_path / "p" / "plan.json").read_text(encoding="utf-8"))
    room = [f"{h[k]:+.2f}" for h in info["headroom_pp"].values() for k in ("to_min", "to_max")]
    _whole(text, room + [str(info["relays_changed"]), f"{info['worst_violation_pp']:.2f}",
                         f"{info['mean_abs_deviation_pp']:.2f}", info["solver_version"]])


@pytest.mark.parametrize("width", WIDTHS)
def test_frequency(wb, width, tmp_path):
    text = _run(["frequency", str(wb), "--out", str(tmp_path / "f"), "--format", "none"],
                width)
    _fits(text, width)
    fj = json.loads((tmp_path / "f" / "frequency.json").read_text(encoding="utf-8"))
    vals = []
    for r in fj["intervals"]:
        vals += [r["local_time"], r["scenario"], f"{r['demand_mw']:.0f}",
                 f"{r['total_armed_pct']:.1f}"]
        lc = r["largest_covered_pct"]
        vals += ["none"] if lc is None else [f"{lc:g}", f"{r['largest_covered_mw']:.0f}"]
    _whole(text, vals)


@pytest.mark.parametrize("width", WIDTHS)
def test_demo(width, tmp_path):
    def small(mp):
        mp.setattr(allocator.demo, "demo_workbook_path",
                   lambda build_dir: write_small_study(_mk(build_dir)))
    text = _run(["demo", "--out", str(tmp_path / "d"), "--format", "none", "--time-limit",
                 "3"], width, small)
    _fits(text, width)
    summ = json.loads((tmp_path / "d" / "summary.json").read_text(encoding="utf-8"))
    before = json.loads((tmp_path / "d" / "current" / "summary.json").read_text(
        encoding="utf-8"))
    _whole(text, _check_numbers(summ) + _check_numbers(before) + ["Verdict before"])
    info = json.loads((tmp_path / "d" / "plan.json").read_text(encoding="utf-8"))
    _whole(text, [str(info["relays_changed"]), info["solver_version"]])


def _mk(d):
    d.mkdir(parents=True, exist_ok=True)
    return d
