"""Counterparts: quantile mapping, frequency-rank mapping of categories, and swapped margins."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from closecall.analysis.counterparts import (
    counterpart_flip_rates,
    counterparts,
    counterparts_for_case,
    frequency_rank_map,
    quantile_map,
)
from closecall.suite.opening import OpenedStudy


def test_quantile_map_between_normals_is_the_linear_map() -> None:
    """For continuous distributions F_h⁻¹(F_g(x)) is the monotone transport; between normals
    it is x ↦ μ_h + σ_h (x − μ_g)/σ_g (scipy.stats.norm cdf/ppf as the reference)."""
    rng = np.random.default_rng(0)
    source = rng.normal(1.0, 2.0, 200_000)
    target = rng.normal(-3.0, 0.5, 200_000)
    x = np.array([-2.0, 0.0, 1.0, 2.5, 4.0])
    expected = stats.norm.ppf(stats.norm.cdf(x, 1.0, 2.0), -3.0, 0.5)
    np.testing.assert_allclose(quantile_map(x, source, target), expected, atol=0.02)
    np.testing.assert_allclose(expected, -3.0 + 0.5 * (x - 1.0) / 2.0, atol=1e-12)


def test_quantile_map_keeps_order_and_maps_a_sample_onto_itself() -> None:
    rng = np.random.default_rng(1)
    s = np.round(rng.exponential(size=500), 1)  # with ties
    out = quantile_map(np.sort(s), s, rng.normal(size=800))
    assert np.all(np.diff(out) >= 0)
    same = quantile_map(np.array([np.median(s)]), s, s)
    assert same[0] == pytest.approx(np.median(s), abs=0.11)


def test_frequency_rank_map_by_hand() -> None:
    """Source counts A 50, B 30, C 20 lie on [0, .5), [.5, .8), [.8, 1] (mid-points .25, .65,
    .9); target counts C 60, A 25, B 15 lie on [0, .6), [.6, .85), [.85, 1]. So A→C, B→A,
    C→B (worked by hand)."""
    source = np.repeat([0, 1, 2], [50, 30, 20])
    target = np.repeat([2, 0, 1], [60, 25, 15])
    out = frequency_rank_map(np.array([0, 1, 2]), source, target, 3)
    np.testing.assert_array_equal(out, [2, 0, 1])
    # a level the target group never shows is never a destination
    target2 = np.repeat([0, 1], [70, 30])
    assert 2 not in frequency_rank_map(np.array([0, 1, 2]), source, target2, 3)


def test_swapped_margins_are_the_model_at_the_changed_design(demo_study: OpenedStudy) -> None:
    """(a) recomputed directly: put the other group's one-hot into the case's design and score
    it with the row that scored the case."""
    snap = demo_study.snapshot
    W, row_of_case = snap.weights("pooled")
    rows = np.arange(40)
    cp = counterparts(snap, rows)
    gcols = np.flatnonzero(snap.encoder.group_mask)
    t = np.log(snap.lenses[0].threshold / (1 - snap.lenses[0].threshold))
    codes = np.asarray(snap.group_codes)
    hX = np.asarray(snap.hist_X)
    hg = np.asarray(snap.hist_group_codes)
    for k, i in enumerate(rows):
        w = np.asarray(W)[int(row_of_case[i])]
        for h in range(len(snap.group_levels)):
            x = np.asarray(snap.X[i], dtype=float).copy()
            x[gcols] = hX[np.flatnonzero(hg == h)[0], gcols]
            assert cp.swapped[k, h] == pytest.approx(w[0] + x @ w[1:] - t, abs=1e-10)
        own = codes[i]  # its own group: the case's margin, scored here from its own design
        plain = w[0] + np.asarray(snap.X[i], dtype=float) @ w[1:] - t
        assert cp.margin[k] == pytest.approx(plain, abs=1e-10)
        assert cp.swapped[k, own] == pytest.approx(plain, abs=1e-10)
        assert cp.transported[k, own] == pytest.approx(plain, abs=1e-10)


def test_carried_proxies_land_in_the_other_groups_distribution(demo_study: OpenedStudy) -> None:
    snap = demo_study.snapshot
    levels = snap.group_levels
    a, b = levels.index("Aster"), levels.index("Briar")
    aster = np.flatnonzero(np.asarray(snap.group_codes) == a)
    cp = counterparts(snap, aster)
    moved = cp.moved["depot_distance_km"][:, b]
    f = next(f for f in snap.encoder.features if f.name == "depot_distance_km")
    col = snap.columns.index("depot_distance_km")
    hist = np.asarray(snap.hist_X)[:, col] * f.sd + f.mean
    hg = np.asarray(snap.hist_group_codes)
    # Aster's carried distances look like Briar's history, not Aster's (demo: Briar lives
    # about 3.5 km further from the depot)
    assert abs(np.median(moved) - np.median(hist[hg == b])) < 0.5
    assert np.median(moved) - np.median(hist[hg == a]) > 2.0
    zone = next(f for f in snap.encoder.features if f.name == "zone")
    carried = [zone.levels[int(c)] for c in cp.moved["zone"][:, b]]
    assert set(carried) <= {"Q", "R", "N", "P", "S", "T"}
    assert np.mean([z in ("Q", "R") for z in carried]) > 0.8  # Briar's common zones


def test_demo_counterparts_favour_briar_when_carried_to_aster(demo_study: OpenedStudy) -> None:
    """The history is biased against Briar (demo.py): Briar cases carried into Aster turn
    favourable, Aster cases carried into Briar turn unfavourable, never the reverse."""
    snap = demo_study.snapshot
    rates = {(r["group"], r["as_group"]): r for r in counterpart_flip_rates(snap)}
    briar = rates[("Briar", "Aster")]
    aster = rates[("Aster", "Briar")]
    assert briar["to_favourable_carried"] > 0.05 and briar["to_unfavourable_carried"] == 0
    assert aster["to_unfavourable_carried"] > 0.05 and aster["to_favourable_carried"] == 0
    i = int(np.flatnonzero(np.asarray(snap.group_codes) == snap.group_levels.index("Briar"))[0])
    (one,) = counterparts_for_case(snap, i)
    assert one["group"] == "Aster"
    assert {c["feature"] for c in one["carried"]} == set(snap.proxies.proxies)
