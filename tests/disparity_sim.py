"""Simulated review tables with a known structure, for the disparity tests (no ledger)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from closecall.core.vocabulary import final_decisions
from closecall.reports.disparity.simulate import simulate_actions


def review_table(
    n: int,
    seed: int,
    *,
    bias: float = 1.0,
    groups: tuple[str, ...] = ("A", "B"),
    shares: tuple[float, ...] = (0.6, 0.4),
    reviewers: int = 3,
    base_rate: float = 0.25,
    band: float = 0.5,
) -> pd.DataFrame:
    """Close calls with margins uniform in [-band, band]; group B is the biased one."""
    rng = np.random.default_rng(seed)
    g = rng.choice(np.array(groups), size=n, p=np.array(shares))
    m = rng.uniform(-band, band, size=n)
    actions = simulate_actions(m, g, rng, biased_group="B", bias=bias, base_rate=base_rate)
    model = pd.Series(np.where(m > 0, "favourable", "unfavourable"))
    frame = pd.DataFrame(
        {
            "case_id": [f"C-{i:05d}" for i in range(n)],
            "group": g,
            "reviewer": np.array([f"rev-{k}" for k in range(reviewers)])[
                rng.integers(0, reviewers, n)
            ],
            "margin": m,
            "model_decision": model,
            "action": actions,
        }
    )
    frame["final_decision"] = final_decisions(frame["model_decision"], frame["action"])
    return frame


def table_from_counts(rows: dict[str, tuple[int, int, int, int]]) -> pd.DataFrame:
    """A review table from per-group counts of (model fav → final fav, model fav → final unfav,
    model unfav → final fav, model unfav → final unfav)."""
    kinds = (
        ("favourable", "uphold"),
        ("favourable", "override-unfavourable"),
        ("unfavourable", "override-favourable"),
        ("unfavourable", "uphold"),
    )
    groups = np.repeat(list(rows), [sum(c) for c in rows.values()])
    kind = np.concatenate([np.repeat(np.arange(4), c) for c in rows.values()]).astype(int)
    model = np.array([k[0] for k in kinds])[kind]
    frame = pd.DataFrame(
        {
            "case_id": [f"C-{i}" for i in range(len(kind))],
            "group": groups,
            "reviewer": "r1",
            "margin": np.where(model == "favourable", 0.1, -0.1),
            "model_decision": model,
            "action": np.array([k[1] for k in kinds])[kind],
        }
    )
    frame["final_decision"] = final_decisions(frame["model_decision"], frame["action"])
    return frame
