"""closecall.core.vocabulary: the one definition of the project's words, used everywhere."""

from __future__ import annotations

import ast
from pathlib import Path

import pandas as pd
import pytest

from closecall.core import vocabulary as v

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "closecall"
#: Names only the vocabulary may define (a second definition is how views drifted apart).
OWNED = {
    "ACTIONS",
    "OVERRIDES",
    "DECISIONS",
    "STATE_NAMES",
    "STATE_OF_ACTION",
    "SHORT_MODEL",
    "MODEL_NAMES",
    "FITTED_MODELS",
    "MODEL_LETTER",
    "_KNOWN_LETTERS",
    "final_decision",
    "final_decision_of",
    "final_decisions",
    "decision_word",
    "short_model",
    "model_letters",
}


def _definitions(path: Path) -> list[tuple[str, int]]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    out = []
    for node in tree.body:
        if isinstance(node, (ast.FunctionDef, ast.ClassDef)):
            out.append((node.name, node.lineno))
        elif isinstance(node, (ast.Assign, ast.AnnAssign)):
            targets = node.targets if isinstance(node, ast.Assign) else [node.target]
            for target in targets:
                for name in ast.walk(target):
                    if isinstance(name, ast.Name):
                        out.append((name.id, node.lineno))
    return out


def test_no_module_but_the_vocabulary_defines_its_words() -> None:
    found = [
        f"{path.relative_to(PACKAGE)}:{line} defines {name}"
        for path in sorted(PACKAGE.rglob("*.py"))
        if path.name != "vocabulary.py"
        for name, line in _definitions(path)
        if name in OWNED
    ]
    assert found == []


def test_state_codes_follow_the_actions() -> None:
    assert v.STATE_NAMES[v.OPEN] == "open" and v.STATE_NAMES[v.CONFLICT] == "conflict"
    for action, code in v.STATE_OF_ACTION.items():
        assert v.STATE_NAMES[code] == action
    assert tuple(v.STATE_OF_ACTION[a] for a in v.ACTIONS) == (
        v.UPHELD,
        v.TO_FAVOURABLE,
        v.TO_UNFAVOURABLE,
        v.DEFERRED,
    )


@pytest.mark.parametrize("reference", v.DECISIONS)
@pytest.mark.parametrize("action", v.ACTIONS)
def test_the_column_rule_is_the_case_rule(reference: str, action: str) -> None:
    # written out by hand from docs/ledger.md: uphold keeps, overrides set, defer leaves none
    expected = {
        "uphold": reference,
        "override-favourable": "favourable",
        "override-unfavourable": "unfavourable",
        "defer": None,
    }[action]
    assert v.final_decision(reference, action) == expected
    column = v.final_decisions(pd.Series([reference]), pd.Series([action]))
    assert (None if pd.isna(column.iloc[0]) else column.iloc[0]) == expected


def test_an_unknown_action_is_an_error_not_a_decision() -> None:
    with pytest.raises(ValueError, match="unknown action"):
        v.final_decision("favourable", "approve")


def test_every_model_has_one_short_name_and_one_letter() -> None:
    assert set(v.SHORT_MODEL) == set(v.MODEL_NAMES) == set(v.MODEL_LETTER)
    assert len(set(v.MODEL_LETTER.values())) == len(v.MODEL_NAMES)
    assert v.model_letters(v.MODEL_NAMES) == v.MODEL_LETTER
    assert v.model_letters(["pooled", "probe"]) == {"pooled": "P", "probe": "R"}
    assert v.model_at_lens("pooled", "default") == "pooled@default"
