"""Multiscale normalized cuts: time and peak memory against pixel count, and quality.

Every size runs in a fresh Python process (so ``ru_maxrss`` is that size's peak resident
memory) on a synthetic 16-bit micrograph-like field (smooth blobs plus noise): the whole
``imgcut.segment(img, 8, method="kway", scale="multi", seed=0)`` call with the library's
defaults (features, multiscale graphs, eigenpairs, k-way discretisation, connected regions).
``--photo`` adds a 481x321 BSDS500 val photograph (the issue's colour target) and
``--single`` the single-scale call (radius 5, tol 1e-5) at the sizes where it fits, as the
same-run baseline. Wall and CPU seconds are printed with the load average.

Usage::

    python benchmarks/bench_multiscale.py --photo --single          # 0.15 .. 16 MP
    python benchmarks/bench_multiscale.py --sizes 321x481,2048x2048
    python benchmarks/bench_multiscale.py --plot docs/images/multiscale_scaling.png
    python benchmarks/bench_multiscale.py --bsds 20 --cache /tmp/single  # quality vs single
    python benchmarks/bench_multiscale.py --check     # eigenvalues against LAPACK
    python benchmarks/bench_multiscale.py --matmul    # tall block products

Prints a table; the log-log slope of time against pixels is fitted over the sizes run.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

_CHILD = r"""
import json, resource, sys, time, warnings
import numpy as np
h, w = int(sys.argv[1]), int(sys.argv[2])
tol = None if sys.argv[3] == "none" else float(sys.argv[3])
maxiter = None if sys.argv[4] == "none" else int(sys.argv[4])
mode = sys.argv[5]
sys.path.insert(0, sys.argv[6])
from bench_multiscale import micrograph, photo
img = photo() if mode == "photo" else micrograph(h, w)
h, w = img.shape[:2]
out = {"h": h, "w": w, "mode": mode}
import imgcut
t0, c0 = time.perf_counter(), time.process_time()
with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    scale = "single" if mode == "single" else "multi"
    res = imgcut.segment(img, 8, method="kway", scale=scale, seed=0, tol=tol, maxiter=maxiter)
out["seconds"] = time.perf_counter() - t0
out["cpu_seconds"] = time.process_time() - c0
out["regions"] = int(res.labels.max())
out["max_residual"] = float(res.residuals.max())
out["tol"] = res.params["tol"]
ms = res.params.get("multiscale") or {}
out["iterations"] = ms.get("level_iterations", "-")
out["relaxed"] = ms.get("relaxed_levels", 0)
out["levels"] = len(ms.get("shapes") or [1])
out["timings"] = {k: float(v) for k, v in res.timings.items()}
out["peak_gb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6
print("RESULT " + json.dumps(out))
"""

_BSDS = Path(__file__).resolve().parents[2] / "shared" / "data" / "bsds500" / "val"


def photo(name: str = "101085") -> np.ndarray:
    """A 481 x 321 BSDS500 val photograph (colour), the issue's 481 x 321 target image."""
    from imgcut.io import read_image

    return read_image(_BSDS / "images" / f"{name}.jpg").pixels


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


def _run(h, w, tol, maxiter, mode, timeout, blas_threads, hugepage="numpy"):
    here = os.path.dirname(os.path.abspath(__file__))
    cmd = [
        sys.executable, "-c", _CHILD, str(h), str(w),
        "none" if tol is None else str(tol), "none" if maxiter is None else str(maxiter),
        mode, here,
    ]  # fmt: skip
    load = os.getloadavg()[0]
    env = dict(os.environ)
    if blas_threads:
        for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
            env[var] = str(blas_threads)
    if hugepage == "off":  # NumPy's documented switch, as the imgcut command line sets it
        env["NUMPY_MADVISE_HUGEPAGE"] = "0"
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


def bsds_ids(n_images: int) -> list[str]:
    """A fixed, seeded random subset of the BSDS500 val images (all 100 when n >= 100)."""
    ids = sorted(p.stem for p in (_BSDS / "images").glob("*.jpg"))
    if n_images >= len(ids):
        return ids
    return sorted(np.random.default_rng(2026).choice(ids, n_images, replace=False).tolist())


def bsds_quality(
    n_images: int, tol, maxiter, n_regions: int = 8, cache: str | None = None
) -> list[dict]:
    """Covering and boundary F of the single-scale and multiscale ``segment`` calls.

    Both run ``imgcut.segment(img, n_regions, method="kway", seed=0)`` on the same BSDS500 val
    image, ``scale="single"`` (radius 5, tol 1e-5) and ``scale="multi"`` (its defaults, or
    ``tol``/``maxiter``); the slow single-scale labels are kept in ``cache`` when given.
    """
    import warnings

    import imgcut
    from imgcut.groundtruth import read_bsds_mat
    from imgcut.io import read_image
    from imgcut.metrics import boundary_scores, segmentation_covering

    rows = []
    for name in bsds_ids(n_images):
        gt = read_bsds_mat(_BSDS / "groundTruth" / f"{name}.mat")
        img = read_image(_BSDS / "images" / f"{name}.jpg").pixels
        human = list(gt.segmentations)
        row = {"image": name}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            cached = Path(cache) / f"{name}.npz" if cache else None
            if cached is not None and cached.exists():
                z = np.load(cached)
                single, row["single_cpu"] = z["labels"], float(z["cpu"])
            else:
                c = time.process_time()
                single = imgcut.segment(img, n_regions, method="kway", scale="single", seed=0)
                single = single.labels
                row["single_cpu"] = time.process_time() - c
                if cached is not None:
                    cached.parent.mkdir(parents=True, exist_ok=True)
                    np.savez_compressed(cached, labels=single, cpu=row["single_cpu"])
            c = time.process_time()
            res = imgcut.segment(
                img, n_regions, method="kway", scale="multi", seed=0, tol=tol, maxiter=maxiter
            )
            row["multi_cpu"] = time.process_time() - c
            row["multi_residual"] = float(res.residuals.max())
            multi = res.labels
        for label, lab in (("single", single), ("multi", multi)):
            row[f"{label}_covering"] = float(segmentation_covering(lab, human))
            row[f"{label}_F"] = float(boundary_scores(lab, human).f)
            row[f"{label}_regions"] = int(lab.max())
        print(json.dumps({k: round(v, 4) if isinstance(v, float) else v for k, v in row.items()}))
        rows.append(row)
    if rows:
        for key in ("covering", "F", "cpu"):
            a = np.mean([r[f"single_{key}"] for r in rows])
            b = np.mean([r[f"multi_{key}"] for r in rows])
            print(
                f"mean {key} over {len(rows)} images: single {a:.3f}  multi {b:.3f}  "
                f"difference {b - a:+.3f}"
            )
        res = np.array([r["multi_residual"] for r in rows])
        print(f"multiscale residuals: median {np.median(res):.1e}, max {res.max():.1e}")
    return rows


def matmul_check(n: int = 4_000_000, m: int = 7) -> None:
    """One-call ``X @ Z`` against :func:`imgcut._linalg.tall_matmul` on a tall block."""
    from imgcut._linalg import tall_matmul

    rng = np.random.default_rng(0)
    X, Z = rng.standard_normal((n, m)), rng.standard_normal((m, m))
    for name, f in (("X @ Z", lambda: X @ Z), ("tall_matmul", lambda: tall_matmul(X, Z))):
        ts = []
        for _ in range(3):
            t = time.perf_counter()
            f()
            ts.append(time.perf_counter() - t)
        print(f"{name:>12} ({n} x {m}) @ ({m} x {m}): " + ", ".join(f"{v:.3f}" for v in ts) + " s")


def transfer_check(sizes=((481, 321), (2048, 2048)), m: int = 8, repeats: int = 5) -> None:
    """Grid transfers and Galerkin aggregation against the plain sparse-matrix products.

    Same run, same data: ``_Grid.block_sum`` / ``add_expanded`` against ``P.T @ x`` /
    ``x + P @ z`` with ``P`` from :func:`imgcut.multiscale.prolongation`, and
    :func:`imgcut.multiscale.galerkin_graph` against ``P.T @ W @ P`` on the radius-1.5 graph
    of the synthetic field; prints best-of-``repeats`` times, ratios and the largest
    difference.
    """
    from functools import partial

    from imgcut.features import compute_features
    from imgcut.graph import affinity_graph
    from imgcut.multiscale import _Grid, galerkin_graph, prolongation

    def best(f):
        ts = []
        for _ in range(repeats):
            t = time.perf_counter()
            out = f()
            ts.append(time.perf_counter() - t)
        return min(ts), out

    for h, w in sizes:
        grid, P = _Grid((h, w)), prolongation((h, w), 2).tocsr()
        PT = P.T.tocsr()
        rng = np.random.default_rng(0)
        x = rng.standard_normal((h * w, m))
        z = rng.standard_normal((P.shape[1], m))
        W = affinity_graph(compute_features(micrograph(h, w)), radius=1.5).weights

        def expand(x=x, z=z, grid=grid):
            y = x.copy()
            grid.add_expanded(y, z)
            return y

        rows = [
            ("block sum P^T x", partial(grid.block_sum, x), partial(PT.__matmul__, x)),
            ("expand x + P z", expand, lambda x=x, z=z, P=P: x + P @ z),
            ("Galerkin P^T W P", partial(galerkin_graph, W, (h, w)),
             lambda W=W, P=P, PT=PT: PT @ W @ P),
        ]  # fmt: skip
        for name, ours, ref in rows:
            t_ours, a = best(ours)
            t_ref, b = best(ref)
            diff = abs(a - b).max() if hasattr(a, "tocsr") else np.abs(a - b).max()
            print(
                f"{h}x{w} {name:>18}: imgcut {t_ours * 1e3:8.2f} ms, sparse product "
                f"{t_ref * 1e3:8.2f} ms, ratio {t_ref / t_ours:5.1f}x, max difference {diff:.1e}"
            )


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


def _scaled_pencil(prob):
    """``(A^, B^)`` = ``D^-1/2 (A, B) D^-1/2`` with ``D = diag(B)`` as LinearOperators.

    For ``v = D^1/2 y`` the residual ``||A^ v - lam B^ v|| / ||v||`` is the library's
    reported residual, so every solver below is asked for, and measured in, the same norm.
    """
    import scipy.sparse.linalg as spla

    n = prob.shapes[0][0] * prob.shapes[0][1]
    s = 1.0 / np.sqrt(prob.diagonal(0, mass=True))

    def make(mass):
        def mm(V):
            V = np.asarray(V, dtype=np.float64)
            one = V.ndim == 1
            V = V.reshape(n, -1)
            out = s[:, None] * prob.apply(0, s[:, None] * V, mass=mass)
            return out[:, 0] if one else out

        return spla.LinearOperator((n, n), matvec=mm, matmat=mm, dtype=np.float64)

    return make(False), make(True), s


def _rel_residuals(Ah, Bh, V, lam) -> np.ndarray:
    R = Ah.matmat(V) - Bh.matmat(V) * lam[None, :]
    return np.linalg.norm(R, axis=0) / np.linalg.norm(V, axis=0)


def pencil_baselines(k: int = 8, arpack_restarts: int = 1000, name: str = "101085") -> list[dict]:
    """Same pencil, same run: imgcut's multiscale solver against general-purpose solvers.

    The multiscale pencil ``A y = lam B y`` of one BSDS photo (481 x 321) is handed, as
    operators, to

    * ``imgcut`` -- :func:`imgcut.multiscale.multiscale_eigenpairs` with its defaults;
    * ``lobpcg-sa`` -- scipy ``lobpcg`` on the scaled pencil, preconditioned by a pyamg
      smoothed-aggregation V-cycle built on the explicit full-resolution part
      ``L(W_0) + 0.01 D_0`` (the coarse terms have no sparse matrix of their own);
    * ``arpack`` -- scipy ``eigsh`` in generalised mode on the largest eigenvalues of
      ``(2 B^ - A^, B^)`` (``2 - lam``, the normalized-cut spectrum lies in [0, 2]), with
      ``B^-1`` applied by conjugate gradients, at most ``arpack_restarts`` restarts;

    each asked for the residual imgcut reached (equal residual). The reference eigenvalues
    come from imgcut's own LOBPCG continued at full resolution toward residual 1e-7 (its
    reached residual is printed; ``--check`` compares against LAPACK where the whole pencil
    fits). Ratios use CPU time.
    """
    import warnings

    import pyamg
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    from imgcut.features import compute_features
    from imgcut.multiscale import multiscale_eigenpairs, multiscale_problem

    prob = multiscale_problem(compute_features(photo(name)))
    Ah, Bh, s = _scaled_pencil(prob)
    n = Ah.shape[0]
    rows = []

    def record(method, lam, V, cpu, note):
        res = _rel_residuals(Ah, Bh, V, lam)
        rows.append(
            {
                "method": method,
                "cpu": cpu,
                "values": np.sort(lam),
                "res": float(res.max()),
                "note": note,
            }
        )
        print(f"  {method}: {cpu:.2f} s CPU, max residual {res.max():.1e}, {note}", flush=True)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        c = time.process_time()
        ep = multiscale_eigenpairs(None, k, problem=prob, maxiter=0, tol=3e-2, seed=0)
        record(
            "imgcut",
            ep.values,
            ep.vectors / s[:, None],
            time.process_time() - c,
            f"levels {ep.info['level_iterations']}",
        )
        target = max(rows[0]["res"], 1e-12)

        c = time.process_time()
        ref = multiscale_eigenpairs(None, k, problem=prob, maxiter=2000, tol=1e-7, seed=0)
        ref_cpu = time.process_time() - c
        print(
            f"  reference: imgcut LOBPCG to 1e-7: {ref_cpu:.1f} s CPU, max residual "
            f"{ref.residuals.max():.1e}, values {np.array2string(ref.values, precision=3)}"
        )

        G = prob._levels[0].G
        d0 = np.asarray(G.sum(axis=1)).ravel()
        L0 = sp.csr_matrix(sp.diags(1.01 * d0) - G)
        S = sp.diags(1.0 / s)  # the scaled problem's preconditioner acts on D^1/2-scaled vectors
        c = time.process_time()
        ml = pyamg.smoothed_aggregation_solver(sp.csr_matrix(S @ L0 @ S))
        X0 = np.random.default_rng(0).standard_normal((n, k))
        X0[:, 0] = 1.0 / s
        lam, V, hist = spla.lobpcg(
            Ah,
            X0,
            B=Bh,
            M=ml.aspreconditioner(),
            tol=target,
            maxiter=500,
            largest=False,
            retResidualNormsHistory=True,
        )
        record("lobpcg-sa", lam, V, time.process_time() - c, f"{len(hist) - 1} iterations")

        Op = spla.LinearOperator(
            (n, n), matvec=lambda v: 2.0 * Bh.matvec(v) - Ah.matvec(v), dtype=np.float64
        )
        Binv = spla.LinearOperator(
            (n, n), matvec=lambda v: spla.cg(Bh, v, rtol=1e-10, maxiter=500)[0], dtype=np.float64
        )
        c = time.process_time()
        try:
            mu, V = spla.eigsh(
                Op,
                k=k,
                M=Bh,
                Minv=Binv,
                which="LA",
                tol=target / 2,
                v0=np.random.default_rng(0).standard_normal(n),
                maxiter=arpack_restarts,
            )
            record("arpack", 2.0 - mu, V, time.process_time() - c, "eigsh mode 2, B^-1 by CG")
        except spla.ArpackNoConvergence as err:
            cpu = time.process_time() - c
            print(f"  arpack: no convergence after {cpu:.0f} s CPU ({len(err.eigenvalues)} pairs)")
            rows.append(
                {
                    "method": "arpack",
                    "cpu": cpu,
                    "values": None,
                    "res": np.inf,
                    "note": "did not converge",
                }
            )

    base = rows[0]["cpu"]
    print(
        f"\nSame pencil (481x321 photo {name}, k = {k}); equal residual {target:.1e}; "
        f"reference = imgcut LOBPCG to 1e-7 ({ref.residuals.max():.1e})"
    )
    print("| method | CPU s | max residual | max rel. eigenvalue error | CPU / imgcut | notes |")
    print("|---|---|---|---|---|---|")
    for r in rows:
        if r["values"] is None:
            err = "-"
        else:
            v = r["values"][1:]
            err = f"{np.max(np.abs(v - ref.values[1:]) / ref.values[1:]):.1e}"
        print(
            f"| {r['method']} | {r['cpu']:.2f} | {r['res']:.1e} | {err} | "
            f"{r['cpu'] / base:.1f} | {r['note']} |"
        )
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="321x481,724x724,1024x1024,2048x2048,4096x4096")
    ap.add_argument("--tol", type=float, default=None, help="default: the library's")
    ap.add_argument("--maxiter", type=int, default=None, help="default: the library's")
    ap.add_argument("--timeout", type=float, default=1800)
    ap.add_argument("--single", action="store_true", help="also time the single-scale path")
    ap.add_argument("--photo", action="store_true", help="also time a 481x321 BSDS photograph")
    ap.add_argument("--plot", default=None, help="write a log-log PNG here")
    ap.add_argument("--json", default=None, help="append the rows to this JSON-lines file")
    ap.add_argument(
        "--blas-threads",
        type=int,
        default=1,
        help="BLAS threads per child (0: library default). On a shared, oversubscribed "
        "machine multi-threaded BLAS made the run 2.4x slower (measured at 256x256)",
    )
    ap.add_argument(
        "--numpy-hugepage",
        choices=("numpy", "off"),
        default="numpy",
        help="'off': children run with NUMPY_MADVISE_HUGEPAGE=0, as the imgcut command line "
        "does (docs/performance.md); 'numpy': NumPy's own default",
    )
    ap.add_argument("--check", action="store_true", help="eigenvalues against LAPACK")
    ap.add_argument("--matmul", action="store_true", help="tall block products, one call vs rows")
    ap.add_argument(
        "--transfers", action="store_true", help="grid transfers and aggregation vs sparse products"
    )
    ap.add_argument("--bsds", type=int, default=0, help="quality on this many BSDS val images")
    ap.add_argument("--cache", default=None, help="folder for the single-scale BSDS labels")
    ap.add_argument(
        "--pencil", action="store_true", help="same pencil: imgcut vs ARPACK and LOBPCG + SA"
    )
    args = ap.parse_args(argv)
    if args.bsds:
        bsds_quality(args.bsds, args.tol, args.maxiter, cache=args.cache)
        return 0
    if args.pencil:
        pencil_baselines()
        return 0
    if args.check:
        reference_check()
        return 0
    if args.matmul:
        matmul_check()
        return 0
    if args.transfers:
        transfer_check()
        return 0
    sizes = [tuple(int(v) for v in s.split("x")) for s in args.sizes.split(",")]
    rows = []
    print(
        f"{'size':>11} {'MP':>6} {'mode':>6} {'wall s':>7} {'CPU s':>7} {'peak GB':>8} "
        f"{'max res':>8} {'levels':>6} {'relaxed':>7} {'LOBPCG its (fine..)':>20} {'load':>5}"
    )
    jobs = [(h, w, "multi") for h, w in sizes]
    if args.single:
        jobs += [(h, w, "single") for h, w in sizes if h * w <= 400_000]
    if args.photo:
        jobs = [(321, 481, "photo")] + jobs
    for h, w, mode in jobs:
        t = time.perf_counter()
        r = _run(
            h, w, args.tol, args.maxiter, mode, args.timeout, args.blas_threads,
            args.numpy_hugepage,
        )  # fmt: skip
        r["wall"] = time.perf_counter() - t
        rows.append(r)
        if args.json:
            with open(args.json, "a") as fh:
                fh.write(json.dumps(r) + "\n")
        if "error" in r:
            print(f"{h:>5}x{w:<5} {h * w / 1e6:6.2f} {mode:>6} failed: {r['error']}")
            continue
        print(
            f"{r['h']:>5}x{r['w']:<5} {r['h'] * r['w'] / 1e6:6.2f} {mode:>6} "
            f"{r['seconds']:7.1f} {r['cpu_seconds']:7.1f} {r['peak_gb']:8.2f} "
            f"{r['max_residual']:8.1e} {r['levels']:>6} {r['relaxed']:>7} "
            f"{str(r['iterations']):>20} {r['load']:5.1f}",
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
            fig.suptitle("imgcut.segment(kway, scale='multi'), 8 regions, one core")
            fig.tight_layout()
            fig.savefig(args.plot, dpi=100)
            print(f"plot written to {args.plot}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
