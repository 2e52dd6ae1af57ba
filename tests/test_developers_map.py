"""DEVELOPERS.md's module map stays true: every `file.py:name` it names is a top-level def or class of that file,
and every `file.py` it names exists (common practice, no source: documentation checked against the tree)."""
from __future__ import annotations

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
GUIDE = ROOT / "DEVELOPERS.md"
REFERENCE = re.compile(r"`([\w/]+\.py)(?::(\w+))?`")


def references() -> list[tuple[str, str | None]]:
    return sorted(set(REFERENCE.findall(GUIDE.read_text(encoding="utf-8"))), key=str)


def top_level_names(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in tree.body:
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.add(node.name)
        elif isinstance(node, (ast.Assign, ast.AnnAssign)):
            targets = node.targets if isinstance(node, ast.Assign) else [node.target]
            names.update(t.id for t in targets if isinstance(t, ast.Name))
    return names


def test_the_map_names_many_places():
    assert len([r for r in references() if r[1]]) >= 40


@pytest.mark.parametrize("path, name", references())
def test_each_reference_exists(path, name):
    file = ROOT / path
    assert file.is_file(), f"DEVELOPERS.md names {path}, which does not exist"
    if name:
        assert name in top_level_names(file), f"DEVELOPERS.md names {path}:{name}, which is not defined there"
