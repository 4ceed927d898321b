"""Dense helpers for tall, thin blocks of vectors (one row per pixel).

One job: products ``X @ Z`` with ``X`` of shape ``(n, m)``, ``n`` in the millions and ``m``
a few dozen. OpenBLAS handles such a product in one call poorly: measured on this project's
2-core machine, ``(4_000_000, 7) @ (7, 7)`` took 0.7-1.6 s in one call and 0.06 s in row
blocks of 16 384 (``benchmarks/bench_multiscale.py --matmul``), so the product runs block by
block into one preallocated output.
"""

from __future__ import annotations

import numpy as np

__all__ = ["tall_matmul"]

#: Rows per block (16 384 x m float64 fits the L2 cache for m up to ~16).
ROW_BLOCK = 1 << 14


def tall_matmul(
    X: np.ndarray, Z: np.ndarray, *, block: int = ROW_BLOCK, out: np.ndarray | None = None
) -> np.ndarray:
    """``X @ Z`` for a tall ``X``, computed in row blocks.

    Parameters
    ----------
    X : ndarray, shape (n, m)
        Tall block (n >> m).
    Z : ndarray, shape (m, p)
        Small matrix.
    block : int, default ROW_BLOCK
        Rows per BLAS call.
    out : ndarray, shape (n, p), optional
        Where to write the product; may be ``X`` itself (``Z`` square): row ``i`` of the
        product depends on row ``i`` of ``X`` only, so the rows are replaced block by block
        and no second ``n x p`` array is made.

    Returns
    -------
    ndarray, shape (n, p)
        Equal to ``X @ Z`` up to rounding (each row is one BLAS dot product either way).

    Examples
    --------
    >>> import numpy as np
    >>> X = np.arange(12.0).reshape(6, 2)
    >>> Z = np.array([[1.0, 0.0], [1.0, 2.0]])
    >>> bool(np.array_equal(tall_matmul(X, Z, block=4), X @ Z))
    True
    >>> Y = X.copy()
    >>> bool(np.array_equal(tall_matmul(Y, Z, block=4, out=Y), X @ Z))
    True
    """
    X = np.asarray(X)
    Z = np.asarray(Z)
    n = X.shape[0]
    if out is None:
        if n <= block:
            return X @ Z
        out = np.empty((n, Z.shape[1]), dtype=np.result_type(X, Z))
    elif out.shape != (n, Z.shape[1]):
        raise ValueError(f"out must have shape {(n, Z.shape[1])}, got {out.shape}")
    for r0 in range(0, n, block):
        out[r0 : r0 + block] = X[r0 : r0 + block] @ Z  # a block-sized temporary at most
    return out
