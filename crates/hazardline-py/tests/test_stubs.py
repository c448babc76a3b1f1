"""The type stubs of the extension module name every function and class it has, and no other."""

from __future__ import annotations

import ast
from pathlib import Path

import hazardline._core as core


def test_stubs_cover_the_extension_module():
    stub = Path(__file__).resolve().parents[1] / "python" / "hazardline" / "_core.pyi"
    tree = ast.parse(stub.read_text())
    declared = {n.name for n in tree.body if isinstance(n, (ast.FunctionDef, ast.ClassDef))}
    public = {name for name in dir(core) if not name.startswith("_")}
    assert declared == public, (sorted(public - declared), sorted(declared - public))
