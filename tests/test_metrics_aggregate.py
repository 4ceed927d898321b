"""Tests of imgcut.metrics.aggregate: ODS, OIS and covering Best over a sweep."""

from __future__ import annotations

import numpy as np
import pytest

from imgcut.metrics import BoundaryCounts, region_scores, summarize_boundaries, summarize_regions


def test_boundary_ods_ois_hand_computed():
    # Two images, two parameters; hand computation of the definitions in Arbelaez et al.
    # 2011 (ODS: one parameter for all; OIS: best per image), counts pooled over images.
    img1 = [BoundaryCounts(9, 10, 9, 10), BoundaryCounts(5, 10, 5, 10)]  # F 0.9, 0.5
    img2 = [BoundaryCounts(2, 10, 2, 10), BoundaryCounts(8, 10, 8, 10)]  # F 0.2, 0.8
    s = summarize_boundaries([img1, img2])
    # ODS: param 0 pooled P = R = 11/20, param 1 pooled 13/20 -> F 0.65 at index 1
    assert s.ods_index == 1 and s.ods_f == pytest.approx(0.65)
    # OIS: image 1 at param 0, image 2 at param 1 -> (9 + 8) / 20
    assert s.ois_index.tolist() == [0, 1] and s.ois_f == pytest.approx(17 / 20)
    assert s.f.tolist() == pytest.approx([0.55, 0.65])


def test_region_ods_ois_best_hand_computed():
    g = np.array([[1, 1, 2, 2]])
    whole = np.array([[1, 1, 1, 1]])
    left_ok = np.array([[1, 1, 2, 3]])  # region 1 exact, region 2 split in halves
    # Image A: levels (whole, g); image B: levels (left_ok, whole) against the same g.
    a = [region_scores(whole, g), region_scores(g, g)]
    b = [region_scores(left_ok, g), region_scores(whole, g)]
    s = summarize_regions([a, b])
    # covering per (image, level): A = (0.5, 1.0); B = ((2*1 + 2*0.5)/4 = 0.75, 0.5)
    assert s.covering.tolist() == pytest.approx([(0.5 + 0.75) / 2, (1.0 + 0.5) / 2])
    assert s.covering_ods == pytest.approx(0.75) and s.covering_ods_index == 1
    assert s.covering_ois == pytest.approx((1.0 + 0.75) / 2)
    # Best: B's region 2 takes its best over levels, max(0.5, 0.5) = 0.5 -> B 0.75, A 1.0
    assert s.covering_best == pytest.approx((4 * 1.0 + 2 * 1 + 2 * 0.5) / 8)
    assert s.pri_ois >= s.pri_ods and s.voi_ois <= s.voi_ods


def test_ragged_sweep_rejected():
    c = BoundaryCounts(1, 1, 1, 1)
    with pytest.raises(ValueError, match="same"):
        summarize_boundaries([[c, c], [c]])
    with pytest.raises(ValueError, match="no images"):
        summarize_regions([])


@pytest.mark.parametrize(
    "module",
    ["region", "boundary", "instance", "aggregate", "_matching", "_labels"],
)
def test_docstring_examples_run(module):
    # The numpydoc Examples of every metrics module run as doctests.
    import doctest
    import importlib

    mod = importlib.import_module(f"imgcut.metrics.{module}")
    result = doctest.testmod(mod, optionflags=doctest.ELLIPSIS)
    assert result.failed == 0
