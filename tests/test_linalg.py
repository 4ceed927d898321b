"""Tests for imgcut/_linalg.py: blocked tall products equal numpy's one-call product."""

from __future__ import annotations

import numpy as np
import pytest

from imgcut._linalg import tall_matmul


@pytest.mark.parametrize("n, block", [(1, 4), (10, 4), (16, 4), (1000, 64), (5000, 1 << 14)])
def test_tall_matmul_equals_matmul(n, block):
    rng = np.random.default_rng(n)
    X = rng.standard_normal((n, 7))
    Z = rng.standard_normal((7, 3))
    got = tall_matmul(X, Z, block=block)
    assert got.shape == (n, 3)
    np.testing.assert_allclose(got, X @ Z, rtol=1e-13, atol=1e-13)


def test_tall_matmul_accepts_views():
    X = np.arange(40.0).reshape(20, 2)[::2]  # a strided view, not contiguous
    Z = np.eye(2)
    np.testing.assert_array_equal(tall_matmul(X, Z, block=3), X)


def test_tall_matmul_in_place_and_shape_check():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((1001, 5))
    Z = rng.standard_normal((5, 5))
    ref = X @ Z
    got = tall_matmul(X, Z, block=64, out=X)
    assert got is X
    np.testing.assert_allclose(X, ref, rtol=1e-13, atol=1e-13)
    with pytest.raises(ValueError, match="out must have shape"):
        tall_matmul(X, Z[:, :2], out=X)
