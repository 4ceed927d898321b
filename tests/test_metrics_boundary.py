"""Tests of imgcut.metrics.boundary: boundary maps, one-to-one matching, P/R/F protocol."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment
from skimage.morphology import thin

from imgcut.metrics import (
    BoundaryCounts,
    boundary_counts,
    boundary_scores,
    boundary_sweep,
    f_measure,
    label_boundaries,
    match_boundaries,
)
from imgcut.metrics._matching import max_matching


def _vline(shape, col, rows=slice(None)):
    b = np.zeros(shape, dtype=bool)
    b[rows, col] = True
    return b


def test_identity_gives_f_one():
    g = np.zeros((40, 60), int)
    g[:, 30:] = 1
    g[25:, :10] = 2
    c = boundary_scores(g, [g, g])
    assert (c.precision, c.recall, c.f) == (1.0, 1.0, 1.0)


def test_label_boundaries_are_one_pixel_thick_on_one_side():
    lab = np.array([[1, 1, 2, 2]] * 3)
    b = label_boundaries(lab)
    assert b[:, 1].all() and b.sum() == 3  # the corner pixel left of the crack only


def test_label_boundaries_reproduce_bsds_ground_truth(shared_data):
    # Outside source: the BSDS500 files' own Boundaries maps. Thinning our crack-corner
    # boundaries of each human Segmentation must give exactly the distributed map.
    sio = pytest.importorskip("scipy.io")
    files = sorted((shared_data / "bsds500" / "val" / "groundTruth").glob("*.mat"))[:5]
    assert files, "no BSDS500 val ground truth found"
    for f in files:
        humans = sio.loadmat(f, simplify_cells=True)["groundTruth"]
        for h in humans:
            mine = thin(label_boundaries(h["Segmentation"]))
            assert np.array_equal(mine, h["Boundaries"].astype(bool)), f.name


def test_shift_within_tolerance_matches_everything():
    shape = (100, 100)  # diagonal 141.4 px; 0.0075 x diag = 1.06 px
    a, b = _vline(shape, 50), _vline(shape, 51)
    mm, mh = match_boundaries(a, b)
    assert mm.sum() == 100 and mh.sum() == 100


def test_shift_beyond_tolerance_matches_nothing():
    shape = (100, 100)
    a, b = _vline(shape, 50), _vline(shape, 52)  # 2 px > 1.06 px
    mm, mh = match_boundaries(a, b)
    assert mm.sum() == 0 and mh.sum() == 0


def test_matching_is_one_to_one():
    # Two parallel human lines one pixel either side: each machine pixel matches once,
    # so only half of the 200 human pixels can be matched.
    shape = (100, 100)
    a = _vline(shape, 50)
    g = _vline(shape, 49) | _vline(shape, 51)
    mm, mh = match_boundaries(a, g)
    assert mm.sum() == 100 and mh.sum() == 100


@pytest.mark.parametrize("seed", range(6))
def test_max_matching_cardinality_equals_assignment_reference(seed):
    # Reference: scipy.optimize.linear_sum_assignment on the dense 0/1 adjacency
    # (maximising the number of used edges) gives the maximum matching size.
    rng = np.random.default_rng(seed)
    n_m, n_h = 40, 35
    adj = rng.random((n_m, n_h)) < 0.08
    mi, hj = np.nonzero(adj)
    dist = rng.random(mi.size)
    partner = max_matching(mi, hj, dist, n_m, n_h)
    r, c = linear_sum_assignment(adj.astype(float), maximize=True)
    assert (partner >= 0).sum() == adj[r, c].sum()
    used = partner[partner >= 0]
    assert np.unique(used).size == used.size  # one-to-one
    assert adj[np.flatnonzero(partner >= 0), used].all()  # only candidate edges


def test_max_matching_on_ladder_graph_is_fast_and_maximum():
    # The ladder shape of two nearby curves made scipy 1.17's matcher take exponential
    # time (scipy issue gh-26147); ours must finish quickly with a perfect matching.
    n = 3000
    i = np.arange(n)
    mi = np.concatenate([i, i[:-1], i[1:]])
    hj = np.concatenate([i, i[1:], i[:-1]])
    partner = max_matching(mi, hj, np.ones(mi.size), n, n)
    assert (partner >= 0).sum() == n


def test_pooling_over_humans():
    # Martin et al. 2004 protocol (from memory): a machine pixel is correct if matched to
    # ANY human; recall pools human pixels over humans.
    shape = (100, 100)
    m = _vline(shape, 50)
    h1 = _vline(shape, 50)  # fully matched
    h2 = _vline(shape, 10)  # far away: nothing matched
    c = boundary_counts(m, [h1, h2])
    assert c == BoundaryCounts(matched_machine=100, machine=100, matched_human=100, human=200)
    assert c.precision == 1.0 and c.recall == 0.5
    assert c.f == pytest.approx(2 * 0.5 / 1.5)


def test_thick_machine_boundaries_are_thinned_first():
    shape = (100, 100)
    thick = np.zeros(shape, bool)
    thick[5:95, 48:53] = True  # 5-px-wide band
    human = _vline(shape, 50, rows=slice(5, 95))
    c = boundary_counts(thick, [human])
    assert c.precision > 0.95 and c.recall > 0.95
    raw = boundary_counts(thick, [human], thin_machine=False)
    assert raw.precision < 0.5  # without thinning the extra width counts as false positives


def test_tolerance_scales_with_diagonal():
    shape = (300, 400)  # diagonal 500 px; 0.0075 x 500 = 3.75 px
    a = _vline(shape, 100)
    assert match_boundaries(a, _vline(shape, 103))[0].sum() == 300
    assert match_boundaries(a, _vline(shape, 104))[0].sum() == 0
    assert match_boundaries(a, _vline(shape, 104), max_dist=0.01)[0].sum() == 300


def test_empty_maps():
    z = np.zeros((10, 10), bool)
    c = boundary_counts(z, [z])
    assert (c.precision, c.recall) == (1.0, 1.0)
    c = boundary_counts(z, [_vline((10, 10), 3)])
    assert (c.precision, c.recall, c.f) == (1.0, 0.0, 0.0)


def test_f_measure():
    assert f_measure(0.5, 1.0) == pytest.approx(2 / 3)
    assert f_measure(0.0, 0.0) == 0.0


@pytest.mark.parametrize(
    ("a", "b", "kw", "match"),
    [
        (np.zeros((3, 3)), np.zeros((3, 4)), {}, "equal shape"),
        (np.zeros((3, 3)), np.zeros((3, 3)), {"max_dist": 0.0}, "max_dist"),
    ],
)
def test_bad_input(a, b, kw, match):
    with pytest.raises(ValueError, match=match):
        match_boundaries(a, b, **kw)


def test_bad_human_stack():
    with pytest.raises(ValueError, match="empty"):
        boundary_counts(np.zeros((3, 3)), [])
    with pytest.raises(ValueError, match="shape"):
        boundary_counts(np.zeros((3, 3)), [np.zeros((4, 3))])


def test_soft_map_sweep_trades_precision_for_recall():
    # Lower thresholds add boundary pixels: recall cannot fall, and noise lowers precision.
    rng = np.random.default_rng(0)
    g = _vline((60, 60), 30)
    soft = np.where(g, 0.6, 0.0)
    soft[:30, 30] = 0.8  # upper half of the line is stronger
    dots = rng.random((60, 60)) < 0.03
    dots[:, 26:35] = False  # away from the line, so thinning leaves the line alone
    soft[dots] = 0.4  # sparse false boundary pixels
    counts = boundary_sweep(soft, [g], [0.7, 0.5, 0.3])
    recalls = [c.recall for c in counts]
    assert recalls == sorted(recalls) and recalls[0] == pytest.approx(0.5)
    assert counts[1].recall == 1.0 and counts[1].precision == 1.0
    assert counts[2].precision < 1.0
    with pytest.raises(ValueError, match="thresholds"):
        boundary_sweep(soft, [g], [])
