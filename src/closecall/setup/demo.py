"""The bundled demo: Harbourside Home Retrofit Grants (a fictional programme).

The fictional city of Harbourside fast-tracks home-retrofit grant applications that a scoring
model predicts will complete their works within 18 months; the rest go to a full assessment.
The group attribute is ``heritage`` (two fictional communities, Aster and Briar).

The generator plants a known structure (docs/demo.md states it):

- ``zone`` (categorical) and ``depot_distance_km`` (numeric) differ strongly between the groups
  and have no (zone) or a tiny (distance) true effect: they are proxies;
- the historical labels are biased against Briar: a share of Briar households that did complete
  were recorded as not completed;
- ``household_size`` really does act differently: it helps Briar households complete and
  slightly hinders Aster ones, so a split model legitimately fits Briar better.

Everything is drawn from a seeded NumPy generator: the same seed gives the same files.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.special import expit

from closecall.core.errors import Fix, UserError

GROUPS = ("Aster", "Briar")
ZONES = ("N", "P", "Q", "R", "S", "T")
LABELS = ("A", "B", "C", "D", "E", "F", "G")

# The true structure, stated in docs/demo.md; tests check the models recover it.
TRUE = {
    "share_briar": 0.35,
    "intercept": -0.9,
    "income_per_k": 0.025,  # per 1,000 of household income, centred at 38
    "quotes": 0.35,  # per contractor quote obtained
    "dwelling_age_per_year": -0.006,  # centred at 60 years
    "prior_grant": 0.4,
    "depot_distance_per_km": -0.02,  # centred at 8 km: tiny true effect
    "self_funded_share": 2.0,
    "poor_energy_label": -0.25,  # labels E, F, G
    "household_size_aster": -0.05,  # per person, centred at 3
    "household_size_briar": 0.30,
    "zone": 0.0,  # no true effect: a pure proxy
    "heritage": 0.0,  # no true effect of the group itself
    "briar_completion_recorded_as_failure": 0.3,  # label bias in the history
    "pending_share": 0.2,
    "missing_dwelling_age": 0.02,
}

ZONE_PROBS = {
    "Aster": (0.32, 0.32, 0.03, 0.03, 0.15, 0.15),
    "Briar": (0.02, 0.03, 0.45, 0.44, 0.03, 0.03),
}

DEMO_CONFIG = """# closecall study: Harbourside Home Retrofit Grants (fictional demo scenario)
# Every key is explained in docs/config.md.

[study]
name = "Harbourside Home Retrofit Grants (demo)"
seed = {seed}

[data]
history = "history.csv"          # past applications with their recorded outcome
pending = "pending.csv"          # applications awaiting a decision
id = "application_id"
outcome = "completed"            # did the retrofit complete within 18 months?
favourable = "yes"
group = ["heritage"]             # the protected attribute (fictional communities)

[deployed]
scorecard = "scorecard.csv"      # the Office's published points card: the model in use today
# The pending file's deployed_score column holds the Office's previous model's probabilities:
# to analyse those instead, remove this section and set deployed_score = "deployed_score"
# under [data] (docs/demo.md).

[model]
penalty = 1.0                    # ridge strength on standardised features; 0 = off
folds = 5
reference = "pooled"

[[lens]]
name = "equal-costs"             # a wrong fast-track costs as much as a wrong referral
cost_false_favourable = 1
cost_false_unfavourable = 1

[[lens]]
name = "cautious"                # a wrong fast-track costs 1.5 times a wrong referral
cost_false_favourable = 3
cost_false_unfavourable = 2

[proxies]
association = 0.3
influence = 0.02

[multiplicity]
epsilon = 0.001
neighbours = 5

[review]
band = 0.5
ledger = "ledger.sqlite"
reviewers = []                   # empty: any login may record (list logins to restrict)
analysts = []
"""


# The Harbourside Housing Renewal Office's published points card for the fast track (fictional,
# our own): the deployed model as a scorecard (docs/scorecard.md). Its points follow the true
# structure on the scale of 20 points to double the odds (500 points = odds 1:1), except for
# the planted group weight: Briar households lose 18 points (≈ 0.62 in log-odds) although the
# group has no true effect. It leaves household_size and zone out. docs/demo.md states its
# true effect.
DEMO_SCORECARD = """feature,level,low,high,points
(intercept),,,,474
(cutoff),,,,500
(pdo),,,,20
(anchor_points),,,,500
(anchor_odds),,,,1
household_income_k,,,25,-12
household_income_k,,25,35,-5
household_income_k,,35,45,0
household_income_k,,45,60,8
household_income_k,,60,,20
quotes_obtained,,,1,0
quotes_obtained,,1,2,10
quotes_obtained,,2,3,20
quotes_obtained,,3,,30
dwelling_age,,,40,4
dwelling_age,,40,80,0
dwelling_age,,80,,-4
dwelling_age,(missing),,,0
prior_grant,yes,,,12
prior_grant,no,,,0
depot_distance_km,,,5,3
depot_distance_km,,5,10,0
depot_distance_km,,10,,-4
self_funded_share,,,0.1,0
self_funded_share,,0.1,0.2,4
self_funded_share,,0.2,0.3,9
self_funded_share,,0.3,0.4,15
self_funded_share,,0.4,,21
energy_label,A,,,0
energy_label,B,,,0
energy_label,C,,,0
energy_label,D,,,0
energy_label,E,,,-7
energy_label,F,,,-7
energy_label,G,,,-7
heritage,Aster,,,0
heritage,Briar,,,-18
"""
#: The card's planted group weight (points) and its scale (points to double the odds).
SCORECARD_BRIAR_POINTS = -18
SCORECARD_PDO = 20


def generate(cases: int = 5000, seed: int = 7) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """All applications, their true outcomes and their recorded (biased) outcomes."""
    if cases < 200:
        raise UserError(
            f"{cases} is too small", Fix("cases", range="at least 200 cases"), about="cases"
        )
    rng = np.random.default_rng(seed)
    n = cases
    briar = rng.random(n) < TRUE["share_briar"]
    heritage = np.where(briar, "Briar", "Aster")
    income = np.round(np.exp(rng.normal(np.log(38) - np.where(briar, 0.08, 0.0), 0.35)), 1)
    quotes = np.minimum(rng.poisson(1.5, n), 4)
    age = np.round(rng.uniform(8, 120, n))
    prior = rng.random(n) < 0.2
    zone = np.empty(n, dtype=object)
    for g in GROUPS:
        sel = heritage == g
        zone[sel] = rng.choice(ZONES, size=int(sel.sum()), p=ZONE_PROBS[g])
    distance = np.round(np.clip(rng.normal(np.where(briar, 9.5, 6.0), 3.0), 0.5, None), 1)
    size = np.clip(rng.poisson(np.where(briar, 3.4, 2.6)), 1, 8)
    label = rng.choice(LABELS, size=n, p=(0.04, 0.1, 0.2, 0.26, 0.2, 0.12, 0.08))
    share = np.round(rng.uniform(0, 0.5, n), 2)
    t = TRUE
    eta = (
        t["intercept"]
        + t["income_per_k"] * (income - 38)
        + t["quotes"] * quotes
        + t["dwelling_age_per_year"] * (age - 60)
        + t["prior_grant"] * prior
        + t["depot_distance_per_km"] * (distance - 8)
        + t["self_funded_share"] * share
        + t["poor_energy_label"] * np.isin(label, ("E", "F", "G"))
        + np.where(briar, t["household_size_briar"], t["household_size_aster"]) * (size - 3)
    )
    truth = rng.random(n) < expit(eta)
    lost = briar & truth & (rng.random(n) < t["briar_completion_recorded_as_failure"])
    recorded = truth & ~lost
    age_col = age.astype(float)
    age_col[rng.random(n) < t["missing_dwelling_age"]] = np.nan
    deployed = expit(eta - 0.35 * briar + rng.normal(0, 0.35, n))
    frame = pd.DataFrame(
        {
            "application_id": [f"HR-{i:07d}" for i in range(1, n + 1)],
            "heritage": heritage,
            "household_income_k": income,
            "quotes_obtained": quotes,
            "dwelling_age": age_col,
            "prior_grant": np.where(prior, "yes", "no"),
            "zone": zone,
            "depot_distance_km": distance,
            "household_size": size,
            "energy_label": label,
            "self_funded_share": share,
            "deployed_score": np.round(np.clip(deployed, 1e-4, 1 - 1e-4), 4),
        }
    )
    return frame, truth, recorded


def write_demo(out_dir: Path, cases: int = 5000, seed: int = 7) -> Path:
    """Write the demo study (data files and closecall.toml) into out_dir; return the config.

    ``out_dir`` must be new, empty or free of study files: a folder that already holds a
    study config, a data file of the demo, a ledger or a snapshot folder is refused
    (:func:`closecall.setup.output_files.check_demo_folder`).
    """
    from closecall.setup.output_files import check_demo_folder

    out_dir = Path(out_dir)
    check_demo_folder(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    frame, truth, recorded = generate(cases, seed)
    rng = np.random.default_rng(seed + 1)
    pending = rng.random(len(frame)) < TRUE["pending_share"]
    hist = frame[~pending].drop(columns=["deployed_score"]).copy()
    hist.insert(2, "completed", np.where(recorded[~pending], "yes", "no"))
    hist.to_csv(out_dir / "history.csv", index=False)
    frame[pending].to_csv(out_dir / "pending.csv", index=False)
    pd.DataFrame(
        {
            "application_id": frame.loc[pending, "application_id"],
            "completed": np.where(truth[pending], "yes", "no"),
        }
    ).to_csv(out_dir / "pending_outcomes.csv", index=False)
    (out_dir / "scorecard.csv").write_text(DEMO_SCORECARD)
    config = out_dir / "closecall.toml"
    config.write_text(DEMO_CONFIG.replace("{seed}", str(seed)))
    return config
