"""Every type a public method of ``Study`` (or of its ``Ledger``) returns can be imported from
``closecall`` (issue 15): a user who gets a ``WhatIfResult`` can name it in their own
annotations without knowing where it lives. Read from the source with ``ast``, so a method
added later is checked too.
"""

from __future__ import annotations

import ast
import builtins
import importlib
from pathlib import Path

import pytest

import closecall

STUDY = Path(closecall.__file__).parent / "api" / "study.py"
CLASSES = ("Study", "Ledger")
#: Names an annotation may use that are not closecall's (typing and the standard library).
NOT_OURS = {"Any", "Iterable", "Mapping", "Sequence", "Path", "Self"}


def _imports(tree: ast.Module) -> dict[str, str]:
    """Every ``from X import Name`` of the module (TYPE_CHECKING blocks included): name → X."""
    found: dict[str, str] = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            for alias in node.names:
                found[alias.asname or alias.name] = node.module
    return found


def _returned_names() -> dict[str, set[str]]:
    """Plain names in the return annotations of the public methods: name → methods."""
    tree = ast.parse(STUDY.read_text(encoding="utf-8"))
    names: dict[str, set[str]] = {}
    for cls in tree.body:
        if not (isinstance(cls, ast.ClassDef) and cls.name in CLASSES):
            continue
        for fn in cls.body:
            if not isinstance(fn, ast.FunctionDef) or fn.name.startswith("_") or not fn.returns:
                continue
            for name in _plain_names(fn.returns):
                names.setdefault(name, set()).add(f"{cls.name}.{fn.name}")
    return names


def _plain_names(annotation: ast.expr) -> list[str]:
    """Names in an annotation, but not builtins nor dotted ones (``np.ndarray``, ``pd.DataFrame``:
    another library's)."""
    dotted = {id(n.value) for n in ast.walk(annotation) if isinstance(n, ast.Attribute)}
    names = [
        n.id
        for n in ast.walk(annotation)
        if isinstance(n, ast.Name) and id(n) not in dotted and not hasattr(builtins, n.id)
    ]
    for n in ast.walk(annotation):  # a quoted annotation ("Study")
        if isinstance(n, ast.Constant) and isinstance(n.value, str):
            names += _plain_names(ast.parse(n.value, mode="eval").body)
    return names


def test_the_walk_finds_the_result_types() -> None:
    """The check below can fail: it sees the names (a walk that found none would pass)."""
    found = _returned_names()
    assert {"QueueResult", "WhatIfResult", "Ledger", "Explanation"} <= set(found)
    assert not {"np", "pd", "ndarray", "DataFrame", "str", "list"} & set(found)


@pytest.mark.parametrize("name", sorted(set(_returned_names()) - NOT_OURS))
def test_every_returned_type_is_importable_from_closecall(name: str) -> None:
    where = _imports(ast.parse(STUDY.read_text(encoding="utf-8")))
    methods = _returned_names()[name]
    assert name in closecall.__all__, f"{name} (returned by {methods}) is not in __all__"
    exported = getattr(closecall, name)
    module = where.get(name, "closecall.api.study")
    assert exported is getattr(importlib.import_module(module), name)
    ns: dict[str, object] = {}
    exec(f"from closecall import {name}", ns)  # the form a user writes
    assert ns[name] is exported


def test_names_in_all_all_resolve() -> None:
    assert sorted(closecall.__all__) == sorted(closecall._WHERE)
    for name in closecall.__all__:
        assert getattr(closecall, name) is not None, name
    assert set(closecall.__all__) <= set(dir(closecall))
