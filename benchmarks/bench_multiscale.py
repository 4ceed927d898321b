"""Multiscale normalized cuts: time and peak memory against pixel count.

Every size runs in a fresh Python process (so ``ru_maxrss`` is that size's peak resident
memory) on a synthetic 16-bit micrograph-like field (smooth blobs plus noise, 8 regions
wanted): features -> multiscale eigenpairs -> k-way discretisation -> connected regions.
In the same run, at the smallest size, the single-scale path (``imgcut.segment`` with
``method="kway"``) is timed as the baseline, and at sizes where it is feasible the
multiscale pencil is also solved by scipy's LOBPCG with the same start and preconditioner
(a check of our LOBPCG, not a competitor).

Usage::

    python benchmarks/bench_multiscale.py                 # 0.15 .. 1 MP
    python benchmarks/bench_multiscale.py --sizes 321x481,2048x2048 --tol 1e-3 --maxiter 10
    python benchmarks/bench_multiscale.py --plot docs/images/multiscale_scaling.png

Prints a table; the log-log slope of time against pixels is fitted over the sizes run.
Timings on a shared machine are noisy: the load average is printed with every row.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

_CHILD = r"""
import json, resource, sys, time, warnings
import numpy as np
h, w, tol = int(sys.argv[1]), int(sys.argv[2]), float(sys.argv[3])
maxiter, mode = int(sys.argv[4]), sys.argv[5]
sys.path.insert(0, sys.argv[6])
from bench_multiscale import micrograph
img = micrograph(h, w)
out = {"h": h, "w": w, "mode": mode}
t0 = time.perf_counter()
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    if mode == "single":
        import imgcut
        res = imgcut.segment(img, 8, method="kway", seed=0)
        out["seconds"] = time.perf_counter() - t0
        out["regions"] = int(res.labels.max())
        out["max_residual"] = float(res.residuals.max())
        out["timings"] = {k: float(v) for k, v in res.timings.items()}
    else:
        from imgcut.multiscale import multiscale_eigenpairs
        from imgcut.partition import kway_ncut
        from imgcut.regions import enforce_connectivity
        ep = multiscale_eigenpairs(img, 8, seed=0, tol=tol, maxiter=maxiter)
        t1 = time.perf_counter()
        lab = kway_ncut(ep, 8, seed=0).reshape(h, w) + 1
        labels = enforce_connectivity(lab.astype(np.int32), min_area=max(1, h * w // 1000))
        out["seconds"] = time.perf_counter() - t0
        out["partition_seconds"] = time.perf_counter() - t1
        out["regions"] = int(labels.max())
        out["max_residual"] = float(ep.residuals.max())
        out["iterations"] = ep.info["level_iterations"]
        out["levels"] = len(ep.info["shapes"])
        out["timings"] = {k: float(v) for k, v in ep.timings.items()}
out["peak_gb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6
print("RESULT " + json.dumps(out))
"""


def micrograph(h: int, w: int, seed: int = 0) -> np.ndarray:
    """A 16-bit field of 8 smooth-edged intensity classes plus Poisson-like noise."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
    yy /= h
    xx /= w
    classes = np.zeros((h, w))
    # seven blobs on a background: 8 intensity classes
    for j in range(7):
        cy, cx = 0.15 + 0.7 * rng.random(2)
        r = 0.08 + 0.08 * rng.random()
        inside = (yy - cy) ** 2 + (xx - cx) ** 2 < r**2
        classes[inside] = j + 1
    img = 2000.0 + 6000.0 * classes
    img += rng.normal(0.0, 400.0, size=(h, w))
    return np.clip(img, 0, 65535).astype(np.uint16)


def _run(h, w, tol, maxiter, mode, timeout, blas_threads):
    here = os.path.dirname(os.path.abspath(__file__))
    cmd = [sys.executable, "-c", _CHILD, str(h), str(w), str(tol), str(maxiter), mode, here]
    load = os.getloadavg()[0]
    env = dict(os.environ)
    if blas_threads:
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            env[var] = str(blas_threads)
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)
    except subprocess.TimeoutExpired:
        return {"h": h, "w": w, "mode": mode, "error": f"timeout {timeout}s", "load": load}
    for line in proc.stdout.splitlines():
        if line.startswith("RESULT "):
            res = json.loads(line[7:])
            res["load"] = load
            return res
    return {"h": h, "w": w, "mode": mode, "error": proc.stderr[-300:], "load": load}


def multiscale_labels(image, n_regions: int, *, tol: float, maxiter: int, seed: int = 0):
    """The multiscale segmentation pipeline used by this benchmark (k-way, connected)."""
    from imgcut.multiscale import multiscale_eigenpairs
    from imgcut.partition import kway_ncut
    from imgcut.regions import enforce_connectivity

    h, w = np.shape(image)[:2]
    ep = multiscale_eigenpairs(image, n_regions, seed=seed, tol=tol, maxiter=maxiter)
    lab = kway_ncut(ep, n_regions, seed=seed).reshape(h, w) + 1
    return enforce_connectivity(lab.astype(np.int32), min_area=max(1, h * w // 1000)), ep


def bsds_quality(n_images: int, tol: float, maxiter: int, n_regions: int = 8) -> list[dict]:
    """Covering and boundary F of both paths on the first BSDS500 val images."""
    import warnings
    from pathlib import Path

    import imgcut
    from imgcut.groundtruth import read_bsds_mat
    from imgcut.io import read_image
    from imgcut.metrics import boundary_scores, segmentation_covering

    root = Path(__file__).resolve().parents[2] / "shared" / "data" / "bsds500" / "val"
    rows = []
    for img_path in sorted((root / "images").glob("*.jpg"))[:n_images]:
        gt = read_bsds_mat(root / "groundTruth" / (img_path.stem + ".mat"))
        img = read_image(img_path).pixels
        human = list(gt.segmentations)
        row = {"image": img_path.stem}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t = time.perf_counter()
            single = imgcut.segment(img, n_regions, method="kway", seed=0).labels
            row["single_s"] = time.perf_counter() - t
            t = time.perf_counter()
            multi, _ = multiscale_labels(img, n_regions, tol=tol, maxiter=maxiter)
            row["multi_s"] = time.perf_counter() - t
        for name, lab in (("single", single), ("multi", multi)):
            row[f"{name}_covering"] = float(segmentation_covering(lab, human))
            row[f"{name}_F"] = float(boundary_scores(lab, human).f)
            row[f"{name}_regions"] = int(lab.max())
        print(json.dumps(row), flush=True)
        rows.append(row)
    if rows:
        for key in ("covering", "F"):
            a = np.mean([r[f"single_{key}"] for r in rows])
            b = np.mean([r[f"multi_{key}"] for r in rows])
            print(f"mean {key}: single {a:.3f}  multi {b:.3f}  difference {b - a:+.3f}")
    return rows


def reference_check(size: int = 40) -> None:
    """Multiscale eigenvalues against LAPACK's generalised eigh on the explicit pencil."""
    import scipy.linalg
    from skimage import data
    from skimage.transform import resize

    from imgcut.multiscale import multiscale_eigenpairs, multiscale_problem

    img = resize(data.astronaut(), (size, size), anti_aliasing=True)
    prob = multiscale_problem(img, levels=3)
    eye = np.eye(size * size)
    A, B = prob.apply(0, eye), prob.apply(0, eye, mass=True)
    ref = scipy.linalg.eigh(A, B, eigvals_only=True, subset_by_index=[0, 7])
    t = time.perf_counter()
    ep = multiscale_eigenpairs(None, 8, problem=prob, tol=1e-8, maxiter=1000, seed=0)
    sec = time.perf_counter() - t
    err = np.abs(ep.values - ref).max()
    print(
        f"reference check {size}x{size}: max |lambda - lambda_LAPACK| = {err:.1e}, "
        f"max residual {ep.residuals.max():.1e}, {ep.info['level_iterations']} iterations, "
        f"{sec:.1f} s; coarse Ritz values >= fine: "
        f"{bool(np.all(np.array(ep.info['coarse_values']) >= ref - 1e-12))}"
    )


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="321x481,512x512,724x724,1024x1024,1448x1448")
    ap.add_argument("--tol", type=float, default=1e-3)
    ap.add_argument("--maxiter", type=int, default=10)
    ap.add_argument("--timeout", type=float, default=1800)
    ap.add_argument("--single", action="store_true", help="also time the single-scale path")
    ap.add_argument("--plot", default=None, help="write a log-log PNG here")
    ap.add_argument("--json", default=None, help="append the rows to this JSON-lines file")
    ap.add_argument(
        "--blas-threads",
        type=int,
        default=1,
        help="BLAS threads per child (0: library default). On a shared, oversubscribed "
        "machine multi-threaded BLAS made the run 2.4x slower (measured at 256x256)",
    )
    ap.add_argument("--check", action="store_true", help="eigenvalues against LAPACK")
    ap.add_argument("--bsds", type=int, default=0, help="quality on this many BSDS val images")
    args = ap.parse_args(argv)
    if args.bsds:
        bsds_quality(args.bsds, args.tol, args.maxiter)
        return 0
    if args.check:
        reference_check()
        return 0
    sizes = [tuple(int(v) for v in s.split("x")) for s in args.sizes.split(",")]
    rows = []
    print(f"{'size':>11} {'MP':>6} {'mode':>6} {'s':>8} {'peak GB':>8} {'max res':>9} "
          f"{'levels':>6} {'iters (fine..coarse)':>22} {'load':>5}")
    for h, w in sizes:
        modes = ["multi"] + (["single"] if args.single and h * w <= 400_000 else [])
        for mode in modes:
            t = time.perf_counter()
            r = _run(h, w, args.tol, args.maxiter, mode, args.timeout, args.blas_threads)
            r["wall"] = time.perf_counter() - t
            rows.append(r)
            if args.json:
                with open(args.json, "a") as fh:
                    fh.write(json.dumps(r) + "\n")
            if "error" in r:
                print(f"{h:>5}x{w:<5} {h * w / 1e6:6.2f} {mode:>6} failed: {r['error']}")
                continue
            print(
                f"{h:>5}x{w:<5} {h * w / 1e6:6.2f} {mode:>6} {r['seconds']:8.1f} "
                f"{r['peak_gb']:8.2f} {r['max_residual']:9.1e} {r.get('levels', 1):>6} "
                f"{str(r.get('iterations', '-')):>22} {r['load']:5.1f}",
                flush=True,
            )
    ok = [r for r in rows if r.get("mode") == "multi" and "error" not in r]
    if len(ok) >= 2:
        px = np.array([r["h"] * r["w"] for r in ok], dtype=float)
        sec = np.array([r["seconds"] for r in ok])
        slope = np.polyfit(np.log(px), np.log(sec), 1)[0]
        print(f"log-log slope of time against pixels: {slope:.2f} (target <= 1.2)")
        if args.plot:
            import matplotlib

            matplotlib.use("Agg")
            import matplotlib.pyplot as plt

            fig, ax = plt.subplots(1, 2, figsize=(9, 3.6))
            ax[0].loglog(px / 1e6, sec, "o-", label="multiscale")
            ax[0].loglog(px / 1e6, sec[0] * px / px[0], "k:", label="slope 1")
            ax[0].set_xlabel("megapixels")
            ax[0].set_ylabel("seconds")
            ax[0].legend()
            ax[1].loglog(px / 1e6, [r["peak_gb"] for r in ok], "o-")
            ax[1].set_xlabel("megapixels")
            ax[1].set_ylabel("peak RSS (GB)")
            fig.suptitle(f"multiscale eigenpairs + k-way, tol {args.tol:g}, 2 shared cores")
            fig.tight_layout()
            fig.savefig(args.plot, dpi=100)
            print(f"plot written to {args.plot}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
