"""Locate (or rebuild) the invented demo network's workbook."""

from __future__ import annotations

from pathlib import Path


def _candidates() -> list[Path]:
    here = Path.cwd() / "inputs_demo"
    repo = Path(__file__).resolve().parents[1] / "inputs_demo"
    return [here, repo]


def demo_workbook_path(build_dir: Path) -> Path:
    """The demo workbook: ``inputs_demo/*.xlsx`` in the current folder or beside the
    package; otherwise rebuilt from :mod:`allocator.demo_network` into ``build_dir``."""
    for d in _candidates():
        if d.is_dir():
            found = sorted(d.glob("*.xlsx"))
            if found:
                return found[0]
    from .demo_network import write_demo_workbook

    build_dir.mkdir(parents=True, exist_ok=True)
    return write_demo_workbook(build_dir)
