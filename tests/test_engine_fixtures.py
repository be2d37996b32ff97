"""The bundled demo in fixtures/ is exactly what the seeded generator writes."""

from __future__ import annotations

from pathlib import Path

from closecall.setup.demo import write_demo

FIXTURE = Path(__file__).resolve().parent.parent / "fixtures" / "demo"


def test_bundled_demo_is_reproducible(tmp_path: Path) -> None:
    write_demo(tmp_path, cases=5000, seed=7)
    for name in (
        "history.csv",
        "pending.csv",
        "pending_outcomes.csv",
        "closecall.toml",
        "scorecard.csv",  # issue 15: the deployed model as a published points card
    ):
        assert (tmp_path / name).read_bytes() == (FIXTURE / name).read_bytes(), name
