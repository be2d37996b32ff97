"""docs/library.md's Python blocks run, in order, on a small demo study (the page stays true)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from closecall.setup.demo import write_demo

DOC = Path(__file__).resolve().parents[1] / "docs" / "library.md"


def python_blocks(text: str) -> list[str]:
    return re.findall(r"^```python\n(.*?)^```", text, flags=re.S | re.M)


def test_the_page_has_the_walk_through() -> None:
    blocks = python_blocks(DOC.read_text())
    joined = "\n".join(blocks)
    for step in ("Study.open", "to_frame()", "explain(", "record(", "export(", "disparity("):
        assert step in joined, step


def test_library_page_blocks_run(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    write_demo(tmp_path / "demo-study", cases=600, seed=11)
    monkeypatch.chdir(tmp_path)
    namespace: dict[str, object] = {"__name__": "library_doc"}
    for i, block in enumerate(python_blocks(DOC.read_text())):
        exec(compile(block, f"docs/library.md block {i + 1}", "exec"), namespace)
    assert (tmp_path / "reviews.csv").stat().st_size > 0


def test_developer_docs_stay_inside_the_repository() -> None:
    """DEVELOPERS.md and docs/ name files of this repository only (no ../ paths)."""
    root = DOC.parents[1]
    for page in [root / "DEVELOPERS.md", *sorted((root / "docs").glob("*.md"))]:
        assert "../" not in page.read_text(), page.name
