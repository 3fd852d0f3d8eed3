"""The shape of the code: imports point down the layers of DEVELOPERS.md ("Layers") and no
two parts import each other.  Read from the source with ``ast`` (every import, including
those inside functions), so a lazy import cannot hide an upward one."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "allocator"

#: the layers, lowest first (DEVELOPERS.md keeps the same table); a part is a top-level
#: module or package of allocator/
LAYERS = (
    ("errors", "vocab", "timefmt", "memory", "safeio", "runrecord", "version"),
    ("domain", "system", "timegrid", "periods"),
    ("workbook", "assignment", "metered", "solar", "weather", "demo_network", "demo"),
    ("year", "scenarios"),
    ("armed", "check"),
    ("plan", "frequency", "frequency_indication"),
    ("field",),
    ("files", "report", "console"),
    ("pipeline",),
    ("cli",),
)
LAYER = {part: k for k, parts in enumerate(LAYERS) for part in parts}
ENTRY = {"__init__", "__main__"}  # the package's own face: may import any layer


def _part(path: Path) -> str:
    rel = path.relative_to(PKG)
    return rel.parts[0] if len(rel.parts) > 1 else rel.stem


def _imported_parts(path: Path) -> set[str]:
    """The parts of allocator/ that ``path`` imports (absolute or relative imports)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    here = path.relative_to(PKG).with_suffix("").parts
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [a.name.split(".") for a in node.names]
            out |= {n[1] for n in names if n[0] == "allocator" and len(n) > 1}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = list(here[:-1])[: len(here) - node.level]
                mod = base + (node.module.split(".") if node.module else [])
                if mod:
                    out.add(mod[0])
                else:  # from . import x (at the top of the package)
                    out |= {a.name for a in node.names}
            elif node.module and node.module.split(".")[0] == "allocator":
                parts = node.module.split(".")
                out |= {parts[1]} if len(parts) > 1 else {a.name for a in node.names}
    return out


def _graph() -> dict[str, set[str]]:
    g: dict[str, set[str]] = {}
    for path in PKG.rglob("*.py"):
        part = _part(path)
        if part in ENTRY:
            continue
        g.setdefault(part, set()).update(p for p in _imported_parts(path) if p != part)
    return g


def test_every_part_has_a_layer():
    assert sorted(set(_graph()) - set(LAYER)) == []


def test_imports_point_down():
    up = sorted((a, b, LAYER[a], LAYER[b]) for a, bs in _graph().items() for b in bs
                if b in LAYER and LAYER[b] > LAYER[a])
    assert up == [], "upward imports (importer, imported, their layers): " + repr(up)


def _cycle(g: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(n: str) -> list[str] | None:
        state[n] = 1
        stack.append(n)
        for m in sorted(g.get(n, ())):
            if state.get(m) == 1:
                return stack[stack.index(m):] + [m]
            if m not in state and (found := visit(m)):
                return found
        state[n] = 2
        stack.pop()
        return None

    for n in sorted(g):
        if n not in state and (found := visit(n)):
            return found
    return None


def test_no_two_parts_import_each_other():
    assert _cycle(_graph()) is None


def test_the_checker_finds_what_it_should(tmp_path):
    """The cycle finder on a known graph (a → b → c → a), and the import reader on a
    relative and an absolute import."""
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": set()}) is None
    assert {"check", "field", "safeio"} <= _imported_parts(PKG / "files.py")
    assert {"check", "plan", "year"} <= _imported_parts(PKG / "field" / "plan.py")
    assert {"vocab", "check"} <= _imported_parts(PKG / "report" / "html.py")
    assert not {"htmlkit", "content"} & _imported_parts(PKG / "report" / "html.py")


@pytest.mark.parametrize("name", ["cli", "pipeline", "console", "field"])
def test_the_new_parts_are_packages(name):
    assert (PKG / name / "__init__.py").is_file()
