"""Tests of imgcut.metrics.region: covering, Rand index, PRI, variation of information."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from imgcut.metrics import (
    probabilistic_rand_index,
    rand_index,
    region_scores,
    segmentation_covering,
    variation_of_information,
)


def _random_labels(rng, shape, k):
    return rng.integers(1, k + 1, size=shape)


def _pair_count_rand(a, b):
    """Rand index by direct enumeration of all unordered pixel pairs (Rand 1971 definition)."""
    a, b = a.ravel(), b.ravel()
    agree = total = 0
    for i, j in itertools.combinations(range(a.size), 2):
        agree += (a[i] == a[j]) == (b[i] == b[j])
        total += 1
    return agree / total


# --- identities (Arbelaez et al. 2011 definitions: S = G gives covering 1, PRI 1, VoI 0) ---


@pytest.mark.parametrize("seed", [0, 1])
def test_identity_gives_perfect_scores(seed):
    g = _random_labels(np.random.default_rng(seed), (12, 9), 5)
    s = region_scores(g, [g, g, g])
    assert s.covering == 1.0
    assert s.pri == 1.0
    assert s.voi.total == 0.0 and s.voi.false_splits == 0.0 and s.voi.false_merges == 0.0


def test_relabelled_identity_is_still_perfect():
    g = np.array([[1, 1, 2], [3, 3, 2]])
    perm = np.array([0, 7, 4, 9])[g]  # same partition, other label values
    s = region_scores(perm, g)
    assert (s.covering, s.pri, s.voi.total) == (1.0, 1.0, 0.0)


# --- hand-computed contingency tables ---


def test_hand_case_single_segment_over_two_regions():
    # Table n = [[2, 2]] (rows S, cols G), a = [4], b = [2, 2], N = 4; computed by hand:
    # covering: each G region has IoU 2/4 -> 0.5; RI = 1 - (16/2 + 8/2 - 8)/6 = 1/3;
    # H(S|G) = 0 (S constant), H(G|S) = H(G) = 1 bit.
    g = np.array([[1, 1, 2, 2]])
    s = np.array([[1, 1, 1, 1]])
    r = region_scores(s, g)
    assert r.covering == pytest.approx(0.5)
    assert r.pri == pytest.approx(1 / 3)
    assert r.voi.false_splits == pytest.approx(0.0)
    assert r.voi.false_merges == pytest.approx(1.0)


def test_hand_case_three_segments_over_two_regions():
    # G = 111222, S = 112233; table rows S: [2,0],[1,1],[0,2]; a = [2,2,2], b = [3,3].
    # Covering: G1 best IoU 2/3 (vs 1/4), G2 the same -> 2/3.
    # RI: disagreements = 12/2 + 18/2 - 10 = 5 of C(6,2) = 15 -> 2/3.
    # H(S|G) = H(2/3, 1/3) = 0.918296 bits; H(G|S) = (1/3) * 1 bit.
    g = np.array([[1, 1, 1, 2, 2, 2]])
    s = np.array([[1, 1, 2, 2, 3, 3]])
    r = region_scores(s, g)
    assert r.covering == pytest.approx(2 / 3)
    assert r.pri == pytest.approx(2 / 3)
    h = -(2 / 3) * np.log2(2 / 3) - (1 / 3) * np.log2(1 / 3)
    assert r.voi.false_splits == pytest.approx(h)
    assert r.voi.false_merges == pytest.approx(1 / 3)
    assert r.voi.total == pytest.approx(h + 1 / 3)


def test_hand_case_unlabelled_ground_truth_is_ignored():
    # Pixels with G = 0 are removed: what remains is S = [3, 3], G = [1, 1], a perfect match.
    g = np.array([[0, 0, 1, 1]])
    s = np.array([[1, 2, 3, 3]])
    r = region_scores(s, g)
    assert (r.covering, r.pri, r.voi.total) == (1.0, 1.0, 0.0)


def test_segmentation_zero_covers_nothing():
    # G1 lies entirely in S label 0 (no region) -> best overlap 0; G2 = S1 -> 1. Covering 1/2.
    g = np.array([[1, 1, 2, 2]])
    s = np.array([[0, 0, 1, 1]])
    assert segmentation_covering(s, g) == pytest.approx(0.5)


def test_covering_pools_over_humans_by_area():
    g1 = np.array([[1, 1, 2, 2]])
    g2 = np.array([[1, 1, 1, 1]])
    s = g1.copy()
    # Human 1 covered perfectly (4 px * 1); human 2: IoU 2/4 (4 px * 0.5) -> (4 + 2) / 8
    assert segmentation_covering(s, [g1, g2]) == pytest.approx(0.75)


# --- reference libraries ---


@pytest.mark.parametrize("seed", range(4))
def test_voi_halves_match_scikit_image(seed):
    # Reference: skimage.metrics.variation_of_information(image0=G, image1=S) returns
    # [H(S|G), H(G|S)], documented there as (false splits, false merges), in bits.
    skm = pytest.importorskip("skimage.metrics")
    rng = np.random.default_rng(seed)
    g = _random_labels(rng, (30, 20), 4)
    s = _random_labels(rng, (30, 20), 6)
    ref = skm.variation_of_information(g, s)
    v = variation_of_information(s, g)
    assert v.false_splits == pytest.approx(ref[0], abs=1e-12)
    assert v.false_merges == pytest.approx(ref[1], abs=1e-12)


def test_voi_ignores_ground_truth_zero_like_scikit_image():
    # Reference: skimage's ignore_labels drops pixels where the *true* image has those labels.
    skm = pytest.importorskip("skimage.metrics")
    rng = np.random.default_rng(5)
    g = rng.integers(0, 4, size=(25, 25))
    s = rng.integers(1, 5, size=(25, 25))
    ref = skm.variation_of_information(g, s, ignore_labels=[0])
    v = variation_of_information(s, g)
    assert (v.false_splits, v.false_merges) == pytest.approx(tuple(ref), abs=1e-12)


def test_voi_is_in_bits_not_nats():
    # G splits left/right, S splits odd/even columns: independent fair bits, so
    # H(S|G) = H(G|S) = 1 bit exactly (Shannon). A natural-log VoI would be 2 ln 2 = 1.386.
    g = np.array([[1, 1, 2, 2]] * 2)
    s = np.array([[1, 2, 1, 2]] * 2)
    v = variation_of_information(s, g)
    assert v.total == pytest.approx(2.0)
    assert v.total != pytest.approx(2.0 * np.log(2.0))


@pytest.mark.parametrize("seed", range(3))
def test_rand_index_matches_direct_pair_count(seed):
    # Reference: the definition (Rand 1971) enumerated over all C(30, 2) pixel pairs.
    rng = np.random.default_rng(seed)
    a = _random_labels(rng, (6, 5), 3)
    b = _random_labels(rng, (6, 5), 4)
    assert rand_index(a, b) == pytest.approx(_pair_count_rand(a, b), abs=1e-12)


@pytest.mark.parametrize("seed", range(3))
def test_rand_index_matches_scikit_learn(seed):
    # Reference: sklearn.metrics.rand_score (pair-counting Rand index of two clusterings).
    skl = pytest.importorskip("sklearn.metrics")
    rng = np.random.default_rng(seed)
    a = _random_labels(rng, (40, 30), 5)
    b = _random_labels(rng, (40, 30), 7)
    assert rand_index(a, b) == pytest.approx(skl.rand_score(a.ravel(), b.ravel()), abs=1e-12)


def test_pri_matches_pairwise_probability_definition():
    # Reference: Unnikrishnan et al. 2007, PRI = mean over pairs of
    # c_ij p_ij + (1 - c_ij)(1 - p_ij), p_ij = fraction of humans with i, j together.
    rng = np.random.default_rng(3)
    humans = [_random_labels(rng, (4, 5), k) for k in (2, 3, 4)]
    s = _random_labels(rng, (4, 5), 3).ravel()
    hs = [h.ravel() for h in humans]
    vals = []
    for i, j in itertools.combinations(range(s.size), 2):
        c = float(s[i] == s[j])
        p = np.mean([h[i] == h[j] for h in hs])
        vals.append(c * p + (1 - c) * (1 - p))
    pri = probabilistic_rand_index(s.reshape(4, 5), humans)
    assert pri == pytest.approx(np.mean(vals), abs=1e-12)


@settings(max_examples=30, deadline=None)
@given(
    arrays(np.int64, (5, 6), elements=st.integers(0, 4)),
    arrays(np.int64, (5, 6), elements=st.integers(1, 4)),
)
def test_scores_are_in_range_and_label_permutation_invariant(s, g):
    r = region_scores(s, g)
    assert 0.0 <= r.covering <= 1.0 + 1e-12
    assert 0.0 <= r.pri <= 1.0 + 1e-12
    assert r.voi.total >= 0.0
    shuffled = np.array([0, 9, 3, 7, 5])[s]  # relabel S keeping 0 as "no region"
    r2 = region_scores(shuffled, g)
    assert r2.covering == pytest.approx(r.covering)
    assert r2.pri == pytest.approx(r.pri)
    assert r2.voi.total == pytest.approx(r.voi.total)


def test_large_label_values_use_sparse_table():
    g = np.array([[1, 1, 2, 2]], dtype=np.int64) * 10**12
    assert segmentation_covering(g, g) == 1.0


# --- bad input ---


@pytest.mark.parametrize(
    ("seg", "gt", "match"),
    [
        (np.zeros((3, 3, 3), int), np.zeros((3, 3), int), "2-D"),
        (np.zeros((3, 3), int), np.zeros((3, 4), int), "shape"),
        (np.array([[-1, 1]]), np.array([[1, 1]]), ">= 0"),
        (np.array([[0.5, 1.0]]), np.array([[1, 1]]), "whole-number"),
        (np.array([["a", "b"]]), np.array([[1, 1]]), "dtype"),
        (np.zeros((0, 3), int), np.zeros((0, 3), int), "empty"),
        (np.zeros((3, 3), int), [], "empty"),
    ],
)
def test_bad_input_raises_value_error(seg, gt, match):
    with pytest.raises(ValueError, match=match):
        region_scores(seg, gt)


def test_float_whole_number_labels_are_accepted():
    g = np.array([[1.0, 1.0, 2.0]])
    assert segmentation_covering(g, g.astype(int)) == 1.0
