"""Eigensolver benchmark: imgcut's default solver against general-purpose solvers.

Same affinity graph W, same run: the k smallest eigenpairs of the normalised Laplacian
``L = I - D^-1/2 W D^-1/2`` from

* ``imgcut``    -- :func:`imgcut.spectral.laplacian_eigenpairs` with ``solver="auto"`` and
  the coarse aggregates :func:`imgcut.segment.segment` builds from the image (watershed
  basins of the edge map cut into tiles), so the two-level backend runs; the time includes
  building the aggregates;
* ``imgcut-lanczos`` -- the same without aggregates (the tuned Lanczos backend, the
  default for a bare W);
* ``arpack``    -- ``scipy.sparse.linalg.eigsh`` on the largest eigenvalues of
  ``D^-1/2 W D^-1/2`` (the baseline of every ratio);
* ``lobpcg-sa`` -- ``scipy.sparse.linalg.lobpcg`` preconditioned by a pyamg
  smoothed-aggregation V-cycle built on ``L + 1e-5 I`` of the full W;
* ``sklearn-amg`` -- ``sklearn.manifold.spectral_embedding(eigen_solver="amg")`` when
  scikit-learn is installed (its vectors are Rayleigh-Ritz projected to get values).

For every method the table gives wall and CPU seconds, the largest residual
``||L v - lambda v||``, whether the k eigenvalues match a tight ARPACK reference
(``tol=1e-10``, computed once and cached in the temporary directory), and the CPU-time
ratio against ``arpack``. CPU time is the fairer clock on a shared machine. Nothing here
gates CI.

Usage::

    python benchmarks/bench_eigensolver.py                 # BSDS val image, r = 5, k = 8
    python benchmarks/bench_eigensolver.py --scale 0.5     # half-size image, quicker
    python benchmarks/bench_eigensolver.py --write-docs    # also update docs/performance.md
    python benchmarks/bench_eigensolver.py --methods imgcut --segment   # + whole segment calls
"""

from __future__ import annotations

import argparse
import hashlib
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from imgcut.features import compute_features
from imgcut.graph import affinity_graph
from imgcut.hierarchy import oversegment
from imgcut.segment import segment
from imgcut.spectral import laplacian_eigenpairs, normalized_laplacian
from imgcut.twolevel import tile_aggregates

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT.parent / "shared" / "data" / "bsds500" / "val" / "images"
DOCS = ROOT / "docs" / "performance.md"
BEGIN = "<!-- bench_eigensolver:begin -->"
END = "<!-- bench_eigensolver:end -->"


def load_image(path: str | None, scale: float) -> tuple[np.ndarray, str]:
    from PIL import Image

    if path is None:
        files = sorted(DATA.glob("*.jpg")) if DATA.is_dir() else []
        if files:
            path = str(files[0])
    if path is None:
        from skimage import data

        img, name = data.chelsea(), "skimage chelsea"
        pil = Image.fromarray(img)
    else:
        pil = Image.open(path).convert("RGB")
        name = Path(path).name
    if scale != 1.0:
        pil = pil.resize((round(pil.width * scale), round(pil.height * scale)), Image.BILINEAR)
    return np.asarray(pil), name


def graph_key(W: sp.csr_matrix, k: int) -> str:
    h = hashlib.sha1()
    for a in (W.indptr, W.indices, W.data):
        h.update(np.ascontiguousarray(a).tobytes())
    h.update(str(k).encode())
    return h.hexdigest()[:16]


def arpack(W: sp.csr_matrix, k: int, tol: float, ncv: int | None = None, seed: int = 0):
    """k smallest eigenpairs of L from the k largest of S = D^-1/2 W D^-1/2 (eigsh 'LA')."""
    d = np.asarray(W.sum(axis=1)).ravel()
    s = 1.0 / np.sqrt(d)
    S = sp.csr_matrix(sp.diags(s) @ W @ sp.diags(s))
    v0 = np.random.default_rng(seed).standard_normal(W.shape[0])
    mu, V = spla.eigsh(S, k=k, which="LA", tol=tol, ncv=ncv, v0=v0)
    order = np.argsort(-mu)
    return 1.0 - mu[order], V[:, order]


def reference(W: sp.csr_matrix, k: int) -> np.ndarray:
    path = Path(tempfile.gettempdir()) / f"imgcut_eig_ref_{graph_key(W, k)}.npy"
    if path.exists():
        return np.load(path)
    lam, _ = arpack(W, k, 1e-10, ncv=max(40, 4 * k))
    np.save(path, lam)
    return lam


def ritz(L: sp.csr_matrix, V: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Rayleigh-Ritz values and residual norms of L on span(V)."""
    Q, _ = np.linalg.qr(V)
    H = Q.T @ (L @ Q)
    lam, Z = np.linalg.eigh((H + H.T) / 2)
    X = Q @ Z
    return lam, np.linalg.norm(L @ X - X * lam, axis=0)


def run_imgcut(W, k, tol, seed, edges=None, nodes=None):
    agg = None
    if edges is not None:
        agg = tile_aggregates(oversegment(edges, smooth=1.0), nodes=nodes)
    ep = laplacian_eigenpairs(W, k, tol=tol, seed=seed, aggregates=agg)
    note = f"{ep.solver}, {ep.iterations} it"
    if "coarse_size" in ep.info:
        note += f", coarse {ep.info['coarse_size']}"
    if "twolevel_fallback" in ep.info:
        note += f", fallback: {ep.info['twolevel_fallback']}"
    return ep.values, ep.residuals, note


def plot_vectors(img, feats, graph, k, tol, seed, path: Path) -> None:
    """The image with the nodes that form aggregates of their own (low degree), and the
    generalised eigenvectors y_2 … y_k of the two-level solve; vectors concentrated on a few
    pixels are circled."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from imgcut.twolevel import LOW_DEGREE, _coarse_space

    h, w = img.shape[:2]
    agg = tile_aggregates(oversegment(feats.edges, smooth=1.0), nodes=graph.nodes)
    ep = laplacian_eigenpairs(graph.weights, k, tol=tol, seed=seed, aggregates=agg)
    d = np.asarray(graph.weights.sum(axis=1)).ravel()
    _, s, n_low = _coarse_space(normalized_laplacian(graph.weights), d, agg)
    shown = np.asarray(img, dtype=float)
    shown = (shown - shown.min()) / max(float(np.ptp(shown)), 1e-12)
    if shown.ndim == 2:
        shown = np.dstack([shown] * 3)
    shown = 0.6 * shown
    low = (d < LOW_DEGREE * np.median(d)).reshape(h, w)
    shown[low] = (1.0, 0.85, 0.0)
    cols = 4
    rows = -(-k // cols)
    fig, axes = plt.subplots(rows, cols, figsize=(2.6 * cols, 2.6 * rows * h / w + 0.4))
    axes = np.atleast_1d(axes).ravel()
    axes[0].imshow(shown)
    axes[0].set_title(
        f"yellow: {n_low} low-degree nodes\n(coarse space {s} aggregates)", fontsize=7
    )
    for j in range(1, k):
        v = ep.vectors[:, j] * np.sqrt(d)  # D^1/2 y: the mass the eigenvector puts on pixels
        mass = np.sort(v**2)[::-1].cumsum() / max(float((v**2).sum()), 1e-300)
        support = int(np.searchsorted(mass, 0.9)) + 1
        img_v = ep.vectors[:, j].reshape(h, w)
        lim = float(np.abs(img_v).max()) or 1.0
        axes[j].imshow(img_v, cmap="RdBu_r", vmin=-lim, vmax=lim)
        title = f"y{j + 1}, λ = {ep.values[j]:.3g}"
        if support <= 50:
            r, c = divmod(int(np.argmax(v**2)), w)
            axes[j].add_patch(plt.Circle((c, r), 12, fill=False, color="k", lw=1.2))
            title += f"\n90 % of its mass on {support} px"
        axes[j].set_title(title, fontsize=7)
    for a in axes:
        a.axis("off")
    fig.suptitle(
        f"two-level LOBPCG: {ep.iterations} iterations, max residual {ep.residuals.max():.1e}",
        fontsize=8,
    )
    fig.tight_layout()
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, dpi=90)
    plt.close(fig)
    print(f"wrote {path}")


def run_arpack(W, k, tol, seed, L):
    lam, V = arpack(W, k, tol, seed=seed)
    return lam, np.linalg.norm(L @ V - V * lam, axis=0), "eigsh LA"


def run_lobpcg_sa(W, k, tol, seed, L):
    import pyamg

    n = W.shape[0]
    d = np.asarray(W.sum(axis=1)).ravel()
    ml = pyamg.smoothed_aggregation_solver(sp.csr_matrix(L + 1e-5 * sp.identity(n)))
    X = np.random.default_rng(seed).standard_normal((n, k))
    X[:, 0] = np.sqrt(d)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lam, V, hist = spla.lobpcg(
            L,
            X,
            M=ml.aspreconditioner(),
            tol=tol,
            maxiter=200,
            largest=False,
            retResidualNormsHistory=True,
        )
    order = np.argsort(lam)
    lam, V = lam[order], V[:, order]
    return lam, np.linalg.norm(L @ V - V * lam, axis=0), f"{len(hist) - 1} it"


def run_sklearn(W, k, tol, seed, L):
    from sklearn.manifold import spectral_embedding

    d = np.asarray(W.sum(axis=1)).ravel()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        emb = spectral_embedding(
            W,
            n_components=k,
            eigen_solver="amg",
            random_state=seed,
            eigen_tol=tol,
            norm_laplacian=True,
            drop_first=False,
        )
    lam, res = ritz(L, emb * np.sqrt(d)[:, None])  # embedding = v / sqrt(d)
    return lam, res, "Ritz values of its vectors"


def timed(fn, *args):
    t_cpu, t_wall = time.process_time(), time.perf_counter()
    out = fn(*args)
    return out, time.perf_counter() - t_wall, time.process_time() - t_cpu


def matches(lam, ref) -> tuple[bool, float]:
    # Same set: every value within 1 % (plus 1e-7 absolute) of the reference; the small
    # eigenvalues of image graphs differ by tens of percent, so a wrong set fails this.
    err = np.abs(np.asarray(lam) - ref)
    return bool(np.all(err <= 1e-2 * np.abs(ref) + 1e-7)), float(err.max())


def main(argv=None) -> str:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--image", default=None)
    ap.add_argument("--scale", type=float, default=1.0)
    ap.add_argument("--radius", type=float, default=5.0)
    ap.add_argument("--k", type=int, default=8)
    ap.add_argument("--tol", type=float, default=1e-5)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument(
        "--methods",
        default="imgcut,imgcut-lanczos,arpack,lobpcg-sa,sklearn-amg",
        help="comma-separated subset of imgcut, imgcut-lanczos, arpack, lobpcg-sa, sklearn-amg",
    )
    ap.add_argument("--write-docs", action="store_true")
    ap.add_argument(
        "--segment",
        action="store_true",
        help="also time whole imgcut.segment calls (8 regions, this radius) on the image: "
        "method auto, and k-way / recursive on the single-scale graph",
    )
    ap.add_argument(
        "--plot",
        default=None,
        metavar="PNG",
        help="write a picture of the two-level coarse space and the eigenvectors it found",
    )
    args = ap.parse_args(argv)

    img, name = load_image(args.image, args.scale)
    t = time.perf_counter()
    feats = compute_features(img)
    graph = affinity_graph(feats, radius=args.radius)
    W = graph.weights
    t_graph = time.perf_counter() - t
    L = normalized_laplacian(W)
    x = np.ones(W.shape[0])
    t = time.perf_counter()
    for _ in range(5):
        W @ x
    t_mv = (time.perf_counter() - t) / 5
    print(
        f"{name} {img.shape}, radius {args.radius:g}: n = {W.shape[0]}, nnz = {W.nnz}, "
        f"graph {t_graph:.1f} s, W x {1e3 * t_mv:.0f} ms"
    )
    t = time.perf_counter()
    ref = reference(W, args.k)
    print(f"reference (ARPACK tol 1e-10, cached): {time.perf_counter() - t:.1f} s; values {ref}")

    runners = {
        "imgcut": lambda: run_imgcut(W, args.k, args.tol, args.seed, feats.edges, graph.nodes),
        "imgcut-lanczos": lambda: run_imgcut(W, args.k, args.tol, args.seed),
        "arpack": lambda: run_arpack(W, args.k, args.tol, args.seed, L),
        "lobpcg-sa": lambda: run_lobpcg_sa(W, args.k, args.tol, args.seed, L),
        "sklearn-amg": lambda: run_sklearn(W, args.k, args.tol, args.seed, L),
    }
    rows = []
    for meth in args.methods.split(","):
        if meth == "sklearn-amg":
            try:
                import sklearn  # noqa: F401
            except ImportError:
                print("scikit-learn not installed: skipping sklearn-amg")
                continue
        (lam, res, note), wall, cpu = timed(runners[meth])
        ok, err = matches(lam, ref)
        rows.append((meth, wall, cpu, float(np.max(res)), ok, err, note))
        print(
            f"  {meth}: wall {wall:.2f} s, cpu {cpu:.2f} s, max res {np.max(res):.1e}, "
            f"match {ok} ({err:.1e}) [{note}]",
            flush=True,
        )

    base = {r[0]: r for r in rows}.get("arpack")
    lines = [
        f"Image `{name}` {img.shape[1]}x{img.shape[0]}, radius {args.radius:g}, "
        f"n = {W.shape[0]}, nnz = {W.nnz}, k = {args.k}, tol = {args.tol:g}; "
        f"one W x = {1e3 * t_mv:.0f} ms in this run.",
        "",
        "| method | wall s | CPU s | max residual | same k eigenvalues as reference "
        "| max abs error | speed-up vs arpack (CPU) | notes |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for meth, wall, cpu, res, ok, err, note in rows:
        ratio = f"{base[2] / cpu:.2f}" if base and cpu > 0 else "-"
        lines.append(
            f"| {meth} | {wall:.2f} | {cpu:.2f} | {res:.1e} | {'yes' if ok else 'NO'} "
            f"| {err:.1e} | {ratio} | {note} |"
        )
    if args.plot:
        plot_vectors(img, feats, graph, args.k, args.tol, args.seed, Path(args.plot))
    if args.segment:
        lines += ["", "| `segment` call | wall s | CPU s | method used | scale used | regions |"]
        lines.append("|---|---|---|---|---|---|")
        for kwargs in ({}, {"method": "kway", "scale": "single"}, {"method": "recursive"}):
            res, wall, cpu = timed(lambda kw=kwargs: segment(img, 8, radius=args.radius, **kw))
            label = ", ".join(f"{k}={v!r}" for k, v in kwargs.items()) or "defaults"
            lines.append(
                f"| {label} | {wall:.2f} | {cpu:.2f} | {res.params['method']} "
                f"| {res.params['scale_used']} | {res.n_regions} |"
            )
            print(f"  segment({label}): wall {wall:.2f} s, cpu {cpu:.2f} s", flush=True)
    table = "\n".join(lines)
    print()
    print(table)
    if args.write_docs:
        write_docs(table)
    return table


def write_docs(table: str) -> None:
    text = DOCS.read_text() if DOCS.exists() else "# Performance\n"
    block = f"{BEGIN}\n{table}\n{END}"
    if BEGIN in text and END in text:
        head, rest = text.split(BEGIN, 1)
        text = head + block + rest.split(END, 1)[1]
    else:
        text = text.rstrip() + "\n\n## Eigensolver\n\n" + block + "\n"
    DOCS.write_text(text)
    print(f"updated {DOCS}")


if __name__ == "__main__":
    main()
