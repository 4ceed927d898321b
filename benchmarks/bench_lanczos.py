"""Lanczos settings benchmark: what the ``"arpack"`` backend's choices buy, measured.

On one affinity graph (BSDS500 val ``101085.jpg`` when ``../shared`` is present, else
scikit-image's ``chelsea``; radius 5, combined cue), in the same run:

* the cost of one product with ``S = D^-1/2 W D^-1/2`` in float64 and float32, for one vector
  and for a block of 12 (the reason for ``FLOAT32_MIN_TOL``);
* :func:`imgcut.spectral.laplacian_eigenpairs` with ``solver="arpack"`` for each Krylov basis
  size in ``--basis`` (it sets ``ARPACK_MIN_BASIS``) and each guard count in ``--guards``,
  reporting products, CPU seconds, the largest residual and the eigenvalues, so a wrong set
  shows next to the right one (the reason for ``ARPACK_MIN_BASIS`` and ``ARPACK_GUARD``).

Nothing here gates CI; ratios within one run are what to read (docs/performance.md).

Usage::

    python benchmarks/bench_lanczos.py --scale 0.5                 # 240x160, a few minutes
    python benchmarks/bench_lanczos.py --k 3 --basis 30,48,64       # full size: tens of minutes
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from bench_eigensolver import load_image  # noqa: E402  (same folder)

import imgcut.spectral as spectral
from imgcut.features import compute_features
from imgcut.graph import affinity_graph


def product_times(S, repeats: int = 5) -> dict[str, float]:
    rng = np.random.default_rng(0)
    X = rng.standard_normal((S.shape[0], 12))
    out = {}
    for name, dtype in (("float64", np.float64), ("float32", np.float32)):
        Sd, Xd = S.astype(dtype), X.astype(dtype)
        for cols, block in (("1 vector", Xd[:, 0]), ("12 vectors", Xd)):
            t = time.perf_counter()
            for _ in range(repeats):
                Sd @ block
            out[f"{name}, {cols}"] = (time.perf_counter() - t) / repeats
    return out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--image", default=None)
    ap.add_argument("--scale", type=float, default=1.0)
    ap.add_argument("--radius", type=float, default=5.0)
    ap.add_argument("--k", type=int, default=3)
    ap.add_argument("--tol", type=float, default=1e-5)
    ap.add_argument("--basis", default="30,48,64", help="comma-separated ARPACK_MIN_BASIS values")
    ap.add_argument("--guards", default="2", help="comma-separated ARPACK_GUARD values")
    args = ap.parse_args(argv)

    img, name = load_image(args.image, args.scale)
    W = affinity_graph(compute_features(img), radius=args.radius).weights
    d = np.asarray(W.sum(axis=1)).ravel()
    S = spectral._scaled_affinity(W, 1.0 / np.sqrt(d))
    print(f"{name} {img.shape[:2]}, radius {args.radius:g}: n = {W.shape[0]}, nnz = {W.nnz}")
    for label, seconds in product_times(S).items():
        print(f"  product with S, {label}: {1e3 * seconds:.1f} ms")

    saved = spectral.ARPACK_MIN_BASIS, spectral.ARPACK_GUARD
    print(f"\nk = {args.k}, tol = {args.tol:g}")
    print("| basis | guards | products | CPU s | max residual | eigenvalues |")
    print("|---|---|---|---|---|---|")
    try:
        for guard in (int(g) for g in args.guards.split(",")):
            for basis in (int(b) for b in args.basis.split(",")):
                spectral.ARPACK_MIN_BASIS, spectral.ARPACK_GUARD = basis, guard
                t = time.process_time()
                ep = spectral.laplacian_eigenpairs(W, args.k, solver="arpack", tol=args.tol, seed=0)
                cpu = time.process_time() - t
                vals = " ".join(f"{v:.4e}" for v in ep.values)
                print(
                    f"| {ep.info.get('ncv')} | {guard} | {ep.iterations} | {cpu:.1f} | "
                    f"{ep.residuals.max():.1e} | {vals} |",
                    flush=True,
                )
    finally:
        spectral.ARPACK_MIN_BASIS, spectral.ARPACK_GUARD = saved


if __name__ == "__main__":
    main()
