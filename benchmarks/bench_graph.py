"""Affinity-graph build: time and peak memory per non-zero, against a naive COO builder.

Both builders compute the same weights (cue "combined", the σ values imgcut derives) in the
same run; the baseline assembles per-offset index/weight arrays by concatenation and converts
COO → CSR with scipy, the straightforward way. Printed: non-zeros, wall and CPU time, peak
traced memory (tracemalloc, numpy allocations) in bytes per non-zero, and imgcut/baseline
ratios. CPU time is reported beside wall time because other jobs may share the machine.

    python benchmarks/bench_graph.py            # 481x321 colour r=5, 1024x1024 gray r=3
    python benchmarks/bench_graph.py --quick    # the 481x321 case only
    python benchmarks/bench_graph.py --large    # adds 2048x2048 r=2 (needs ~4 GB for the baseline)
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np
import scipy.sparse as sp
from skimage import data, transform

from imgcut.features import compute_features
from imgcut.graph import _exponent, _half_offsets, _rectangles, affinity_graph


def _naive_build(feats, radius, sigmas):
    """Baseline: concatenate per-offset COO triplets (and mirrors), then COO → CSR."""
    h, w = feats.shape
    flat = np.arange(h * w, dtype=np.int64).reshape(h, w)
    values = np.moveaxis(feats.values, 2, 0)
    inv_f = 1.0 / sigmas["feature"] ** 2
    inv_x = 1.0 / sigmas["distance"] ** 2
    inv_e = 1.0 / sigmas["edge"] ** 2
    rows, cols, vals = [], [], []
    for dy, dx in _half_offsets(radius):
        rects = _rectangles(h, w, dy, dx)
        if rects is None:
            continue
        ri, rj = rects
        wgt = np.exp(-_exponent(values, feats.edges, ri, rj, dy, dx, inv_f, inv_x, inv_e)).ravel()
        a, b = flat[ri].ravel(), flat[rj].ravel()
        rows += [a, b]
        cols += [b, a]
        vals += [wgt, wgt]
    coo = sp.coo_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(h * w, h * w)
    )
    del rows, cols, vals
    csr = coo.tocsr()
    csr.sort_indices()
    return csr


def _measure(fn):
    """(result, wall s, cpu s) of one call, then peak traced bytes of a second call."""
    t_wall, t_cpu = time.perf_counter(), time.process_time()
    out = fn()
    t_wall, t_cpu = time.perf_counter() - t_wall, time.process_time() - t_cpu
    del out
    tracemalloc.start()
    out = fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return out, t_wall, t_cpu, peak


def _cases(quick: bool, large: bool):
    astro = data.astronaut()[:321, :481]  # ships with scikit-image, 481x321 colour
    yield "481x321 rgb", astro, 5.0
    if quick:
        return
    cam = transform.resize(data.camera(), (1024, 1024), order=1)  # gray, float
    yield "1024x1024 gray", cam, 3.0
    if large:
        yield "2048x2048 gray", transform.resize(data.camera(), (2048, 2048), order=1), 2.0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--large", action="store_true")
    parser.add_argument("--repeat", type=int, default=3, help="timing repeats (best is kept)")
    args = parser.parse_args()

    header = (
        f"{'case':<16}{'r':>4}{'nnz':>12}  {'wall s':>7}{'cpu s':>7}{'B/nnz':>7}"
        f"  {'base wall':>9}{'base cpu':>9}{'B/nnz':>7}  {'cpu ratio':>9}{'mem ratio':>10}"
    )
    print(header)
    print("-" * len(header))
    for name, img, radius in _cases(args.quick, args.large):
        feats = compute_features(img)
        best = None
        for _ in range(max(1, args.repeat)):
            g, wall, cpu, peak = _measure(
                lambda feats=feats, r=radius: affinity_graph(feats, radius=r)
            )
            best = (wall, cpu, peak) if best is None or cpu < best[1] else best
        wall, cpu, peak = best
        nnz = g.weights.nnz
        base, bwall, bcpu, bpeak = _measure(
            lambda g=g, f=feats: _naive_build(f, g.radius, g.sigmas)
        )
        assert base.nnz == nnz and abs(base - g.weights).max() == 0.0, "builders disagree"
        del base
        print(
            f"{name:<16}{radius:>4g}{nnz:>12,}  {wall:>7.3f}{cpu:>7.3f}{peak / nnz:>7.1f}"
            f"  {bwall:>9.3f}{bcpu:>9.3f}{bpeak / nnz:>7.1f}"
            f"  {cpu / bcpu:>9.2f}{peak / bpeak:>10.2f}"
        )


if __name__ == "__main__":
    main()
