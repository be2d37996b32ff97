"""Dependence on the group and its proxies; proxy detection; the queue's analysis filters."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.special import logit

from analysis_helpers import group_copy_study, plain_band_terms
from closecall.analysis.dependence import dependence, dependence_by_group
from closecall.review.queue import build_queue, queue_rows
from closecall.suite.opening import OpenedStudy, open_study
from closecall.suite.proxies import cramers_v
from closecall.suite.snapshot import Snapshot


@pytest.fixture(scope="module")
def copy_study(tmp_path_factory: pytest.TempPathFactory) -> OpenedStudy:
    return open_study(group_copy_study(tmp_path_factory.mktemp("copy")))


def test_contributions_add_up_to_margin_minus_baseline(demo_study: OpenedStudy) -> None:
    """Linear SHAP (Lundberg & Lee 2017): Σ_j w_j (x_j − E[x_j]) = margin − baseline, exactly
    (to rounding), for every case, model with weights and lens."""
    snap = demo_study.snapshot
    for model in ("pooled", "unaware", "proxy_free", "split"):
        for lens in snap.lenses:
            dep = dependence(snap, model, lens.name)
            np.testing.assert_allclose(dep.margin, snap.margins(model, lens.name), atol=1e-12)
            total = dep.baseline + dep.contributions.sum(axis=1)
            np.testing.assert_allclose(total, dep.margin, atol=1e-12)
            np.testing.assert_allclose(
                dep.group_part + dep.proxy_part + dep.rest, dep.margin - dep.baseline, atol=1e-12
            )


def test_baseline_is_the_margin_of_the_average_case(demo_study: OpenedStudy) -> None:
    snap = demo_study.snapshot
    W, row_of_case = snap.weights("pooled")
    mu = np.asarray(snap.hist_X).mean(axis=0)
    t = logit(snap.lenses[0].threshold)
    dep = dependence(snap, "pooled", rows=np.arange(10))
    for k in range(10):
        w = np.asarray(W)[int(row_of_case[k])]
        assert dep.baseline[k] == pytest.approx(w[0] + mu @ w[1:] - t)


def test_a_copy_of_the_group_is_a_proxy_and_neutralising_both_leaves_no_dependence(
    copy_study: OpenedStudy,
) -> None:
    """'marker' copies the group exactly: Cramér's V = 1 (a 2×2 table with empty
    off-diagonal; Cramér 1946) and it carries the group effect in the unaware model."""
    snap = copy_study.snapshot
    rows = {r.feature: r for r in snap.proxies.rows}
    assert rows["marker"].association == pytest.approx(1.0)
    assert rows["marker"].proxy
    assert not rows["x1"].proxy and not rows["x2"].proxy
    assert snap.proxies.recoverability == pytest.approx(1.0)
    dep = dependence(snap, "pooled")
    codes = np.asarray(snap.group_codes)
    # the group and its copy are constant within a group, so together they are one shift
    # per group (per fitted row); what remains is the rest, which does not know the group
    for g in (0, 1):
        for r in np.unique(snap.weights("pooled")[1]):
            sel = (codes == g) & (np.asarray(snap.weights("pooled")[1]) == r)
            assert np.ptp(dep.dependence[sel]) < 1e-12
    rest_gap = abs(dep.margin_neutral[codes == 0].mean() - dep.margin_neutral[codes == 1].mean())
    dep_gap = abs(dep.dependence[codes == 0].mean() - dep.dependence[codes == 1].mean())
    assert dep_gap > 0.5  # the planted group effect is 1.0 log-odds
    assert rest_gap < 0.1 * dep_gap
    # the proxy-free model drops both: its margins do not depend on the group at all
    pf = dependence(snap, "proxy_free")
    assert np.all(pf.group_part == 0) and np.all(pf.proxy_part == 0)


def test_demo_proxies_and_the_sign_of_briars_dependence(demo_study: OpenedStudy) -> None:
    """The demo plants zone and depot_distance_km as proxies and a label bias against Briar
    (src/closecall/setup/demo.py, TRUE): both proxies are flagged and Briar's pooled margins are
    pulled down by the group and its proxies, Aster's up."""
    snap = demo_study.snapshot
    assert {"zone", "depot_distance_km"} <= set(snap.proxies.proxies)
    by = {r["group"]: r for r in dependence_by_group(snap)}
    assert by["Briar"]["mean_group_part"] < 0
    assert by["Briar"]["mean_dependence"] < 0 < by["Aster"]["mean_dependence"]
    assert by["Briar"]["rests_on_group"] > by["Aster"]["rests_on_group"]


def test_cramers_v_matches_a_textbook_table() -> None:
    """For a 2×2 table Cramér's V is |φ| = |ad − bc| / sqrt(r1 r2 c1 c2) (Cramér, Mathematical
    Methods of Statistics, 1946): [[10, 20], [30, 40]] gives 200 / sqrt(30·70·40·60) = 0.08909,
    by hand (Pearson's χ² = 0.79365 from expected counts 12, 18, 28, 42)."""
    a = np.repeat([0, 0, 1, 1], [10, 20, 30, 40])
    b = np.repeat([0, 1, 0, 1], [10, 20, 30, 40])
    assert cramers_v(a, b) == pytest.approx(200 / np.sqrt(30 * 70 * 40 * 60), abs=1e-9)
    assert cramers_v(a, b) == pytest.approx(np.sqrt(0.79365 / 100), abs=1e-5)


def _plain_parts(snap: Snapshot) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Margin, group part, proxy part and |contribution| of each source feature (its design
    columns summed) of the pooled model, recomputed here with NumPy from the stored weights
    and design (Lundberg & Lee 2017, linear SHAP: w_j (x_j − E[x_j])), not through
    closecall.analysis."""
    W, row_of_case = snap.weights("pooled")
    w = np.asarray(W)[np.asarray(row_of_case)]
    X = np.asarray(snap.X)
    contributions = w[:, 1:] * (X - np.asarray(snap.hist_X).mean(axis=0))
    source = np.array(snap.meta["column_source"])
    groups = [f.name for f in snap.encoder.features if f.is_group]
    proxies = list(snap.proxies.proxies)
    t = logit(snap.lenses[0].threshold)
    margin = w[:, 0] + (X * w[:, 1:]).sum(axis=1) - t
    group_part = contributions[:, np.isin(source, groups)].sum(axis=1)
    proxy_part = contributions[:, np.isin(source, proxies)].sum(axis=1)
    by_feature = [contributions[:, source == f].sum(axis=1) for f in dict.fromkeys(source)]
    return margin, group_part, proxy_part, np.abs(np.column_stack(by_feature))


def test_queue_filters_and_sorts_by_the_analysis(demo_study: OpenedStudy) -> None:
    """The queue's analysis filters and sorts against values recomputed in the test: the
    decision flips when the group's (and proxies') contributions are removed; the band
    margin ± sqrt(2 ε f* x̃ᵀH⁻¹x̃) (Marx, Calmon & Ustun 2020) straddles zero; the share
    (|group| + |proxies|) / Σ|w_j (x_j − E x_j)| orders the list."""
    snap = demo_study.snapshot
    options = {"config": demo_study.config}
    margin, group_part, proxy_part, abs_contrib = _plain_parts(snap)
    np.testing.assert_allclose(margin, snap.margins("pooled"), atol=1e-9)
    flips = {
        "group": (margin > 0) != (margin - group_part > 0),
        "proxies": (margin > 0) != (margin - group_part - proxy_part > 0),
    }
    for part, mask in flips.items():
        q = build_queue(snap, band=10.0, rests_on_part=part, options=options)
        assert sorted(q.order.tolist()) == np.flatnonzero(mask).tolist()
        assert mask.sum() > 0
    eps = 0.001
    _, best, quad = plain_band_terms(snap)  # f* and x̃ᵀH⁻¹x̃ written out with NumPy
    straddles = np.abs(margin) <= np.sqrt(2.0 * eps * best * quad)
    q = build_queue(snap, band=10.0, ambiguous_only=True, options={"epsilon": eps})
    assert sorted(q.order.tolist()) == np.flatnonzero(straddles).tolist() and straddles.any()
    q = build_queue(snap, band=10.0, sort="dependence", options=options)
    total = abs_contrib.sum(axis=1)
    share = (np.abs(group_part) + np.abs(proxy_part)) / np.where(total > 0, total, 1.0)
    listed = share[q.order]
    assert np.all(np.diff(listed) <= 1e-12)  # larger share first
    rows = queue_rows(snap, q, 0, 3)
    assert rows[0]["dependence"] == pytest.approx(listed[0])
    q = build_queue(snap, band=10.0, sort="ambiguity", options=options)
    reach = q.measures["ambiguity"][q.order]
    assert np.all(np.diff(reach) <= 1e-12) and reach.min() >= 0 and reach.max() <= 1


def test_queue_cli_filters(demo_config: Path, cli) -> None:  # type: ignore[no-untyped-def]
    import json

    r = cli("queue", "--config", str(demo_config), "--rests-on", "group", "--json", "-n", "0")
    assert r.code == 0, r
    data = json.loads(r.out)
    assert data["filters"]["rests_on"] == "group"
    assert all("dependence" in row for row in data["rows"])
    r = cli("queue", "--config", str(demo_config), "--ambiguous", "--sort", "ambiguity", "-n", "5")
    assert r.code == 0, r
    assert max(len(line) for line in r.out.splitlines()) <= 80
    assert "amb." in r.out
    r = cli("queue", "--config", str(demo_config), "--rests-on", "zone")
    assert r.code == 2 and "group, proxies" in r.err
