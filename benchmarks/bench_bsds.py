"""Berkeley benchmark (BSDS500) for imgcut's region hierarchy against scikit-image baselines.

Protocol: parameters were tuned on ``../shared/data/bsds500/train`` only; this script reports on
``val`` by default.  Every method is swept over one parameter list shared by all images (imgcut:
the hierarchy level; ``felzenszwalb``: ``scale``; ``slic``: ``n_segments``), and the optimal
dataset scale (ODS) is the single parameter value that is best for the pooled dataset score;
OIS picks the best value per image.  Everything is measured in the same run, so ratios between
methods are meaningful even on a busy machine.

Region measures (covering, PRI, VoI) use :mod:`imgcut.metrics` at every parameter value, against
the human ``Segmentation`` maps; boundary measures match against the human ``Boundaries`` maps
distributed with the data (the benchmark's own boundary drawings).  The
one-to-one boundary matching of :mod:`imgcut.metrics.boundary` costs seconds per segmentation,
so the boundary sweep is first scored with a fast tolerance test (a pixel counts as matched when
a partner lies within the tolerance, without the one-to-one constraint; it can only
overestimate), and the exact matcher is then run at the ``--exact-levels`` best values of that
sweep (default 1); the reported boundary F is the best exact value.

Usage::

    python benchmarks/bench_bsds.py --split val --jobs 2 --out docs
    python benchmarks/bench_bsds.py --split train --limit 20      # development loop

Writes ``<out>/bsds_<split>.json`` (all numbers), ``<out>/images/bsds_pr_<split>.png`` and, with
``--gallery N``, ``<out>/images/bsds_gallery_<k>.png`` (image, imgcut result, one human).
"""

from __future__ import annotations

import argparse
import json
import os
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import scipy.io as sio
from PIL import Image
from scipy import ndimage

from imgcut.hierarchy import image_hierarchy
from imgcut.metrics.boundary import boundary_counts, label_boundaries
from imgcut.metrics.region import region_scores
from imgcut.presets import get_preset

DATA = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "bsds500"
FELZ_SCALES = (100, 300, 500, 800, 1200, 2000)
SLIC_SEGMENTS = (8, 16, 32, 64, 128, 256)
METHODS = ("imgcut", "felzenszwalb", "slic")


def _load(split: str, image_id: str):
    img = np.asarray(Image.open(DATA / split / "images" / f"{image_id}.jpg"))
    gt = sio.loadmat(DATA / split / "groundTruth" / f"{image_id}.mat", simplify_cells=True)
    gt = gt["groundTruth"]
    gt = [gt] if isinstance(gt, dict) else list(gt)
    segs = [g["Segmentation"].astype(np.int32) for g in gt]
    # the benchmark's own human boundary maps, as distributed with the data
    bnds = [g["Boundaries"].astype(bool) for g in gt]
    return img, segs, bnds


def _params(method: str, preset) -> tuple:
    if method == "imgcut":
        return tuple(preset.level_sweep)
    return FELZ_SCALES if method == "felzenszwalb" else SLIC_SEGMENTS


def _segment(method: str, img, param, hier=None):
    from skimage.segmentation import felzenszwalb, slic

    if method == "imgcut":
        return hier.labels_at(param)
    if method == "felzenszwalb":
        return felzenszwalb(img, scale=param, sigma=0.8, min_size=20) + 1
    return slic(img, n_segments=param, start_label=1)


def _fast_boundary(seg, near_any, human_b, tol):
    """Tolerance-only boundary counts (no one-to-one matching; an upper bound)."""
    b = label_boundaries(seg)
    close = ndimage.distance_transform_edt(~b) <= tol
    return (
        int((near_any & b).sum()),
        int(b.sum()),
        int(sum((close & g).sum() for g in human_b)),
        int(sum(g.sum() for g in human_b)),
    )


def _cached(cache, name, compute):
    """Load a pickled result from ``cache/name`` or compute and store it (resumable runs)."""
    import pickle

    if cache is None:
        return compute()
    path = Path(cache) / name
    if path.exists():
        with open(path, "rb") as fh:
            return pickle.load(fh)
    out = compute()
    tmp = path.with_suffix(".tmp")
    with open(tmp, "wb") as fh:
        pickle.dump(out, fh)
    os.replace(tmp, path)
    return out


def _score_image(args):
    split, image_id, preset, cache, methods = args
    tag = "_".join(methods)
    name = f"score_{split}_{image_id}_{tag}.pkl"
    out = _cached(cache, name, lambda: _score(split, image_id, preset, methods))
    print(f"scored {image_id}", flush=True)
    return out


def _score(split, image_id, preset, methods=METHODS):
    img, gts, human_b = _load(split, image_id)
    tol = 0.0075 * float(np.hypot(*img.shape[:2]))
    near_any = np.zeros(img.shape[:2], bool)
    for g in human_b:
        near_any |= ndimage.distance_transform_edt(~g) <= tol
    out = {"id": image_id, "time": {}, "cpu_time": {}, "region": {}, "fast_boundary": {}}
    hier = None
    for method in methods:
        params = _params(method, preset)
        t0, c0 = time.perf_counter(), time.process_time()
        if method == "imgcut":
            hier = image_hierarchy(img, preset=preset, seed=0)
            segs = [hier.labels_at(p) for p in params]
        else:
            segs = [_segment(method, img, p) for p in params]
        elapsed = time.perf_counter() - t0
        cpu = time.process_time() - c0
        out["cpu_time"][method] = cpu if method == "imgcut" else cpu / len(params)
        # imgcut: one hierarchy gives the whole sweep; baselines: mean time per segmentation
        out["time"][method] = elapsed if method == "imgcut" else elapsed / len(params)
        reg, fb = [], []
        for s in segs:
            r = region_scores(s, gts)
            reg.append(
                (r.covering_overlap_sum, r.covering_area, r.pri, r.voi.total, len(np.unique(s)))
            )
            fb.append(_fast_boundary(s, near_any, human_b, tol))
        out["region"][method] = reg
        out["fast_boundary"][method] = fb
    out["hierarchy"] = hier
    return out


def _exact_image(args):
    split, image_id, hier, todo, cache = args
    img, gts, human_b = _load(split, image_id)
    res = {}
    for method, param in todo:

        def compute(method=method, param=param):
            seg = _segment(method, img, param, hier)
            c = boundary_counts(label_boundaries(seg), human_b)
            return (c.matched_machine, c.machine, c.matched_human, c.human)

        res[(method, param)] = _cached(
            cache, f"exact_{split}_{image_id}_{method}_{param}.pkl", compute
        )
    print(f"matched {image_id}", flush=True)
    return image_id, res


def _prf(counts):
    c = np.asarray(counts, dtype=float)
    p = c[..., 0] / np.maximum(c[..., 1], 1)
    r = c[..., 2] / np.maximum(c[..., 3], 1)
    f = 2 * p * r / np.maximum(p + r, 1e-12)
    return p, r, f


def _aggregate(results, method, params):
    reg = np.array([res["region"][method] for res in results])  # (N, P, 5)
    fb = np.array([res["fast_boundary"][method] for res in results])  # (N, P, 4)
    cov_img = reg[..., 0] / reg[..., 1]
    cov = reg[..., 0].sum(0) / reg[..., 1].sum(0)  # pooled over images (ODS)
    pri = reg[..., 2].mean(0)
    voi = reg[..., 3].mean(0)
    fp, fr, ff = _prf(fb.sum(0))
    return {
        "params": list(params),
        "covering": cov.tolist(),
        "pri": pri.tolist(),
        "voi": voi.tolist(),
        "n_regions_mean": reg[..., 4].mean(0).tolist(),
        "fast_precision": fp.tolist(),
        "fast_recall": fr.tolist(),
        "fast_f": ff.tolist(),
        "ods": {
            "covering": float(cov.max()),
            "covering_param": params[int(cov.argmax())],
            "pri": float(pri.max()),
            "pri_param": params[int(pri.argmax())],
            "voi": float(voi.min()),
            "voi_param": params[int(voi.argmin())],
        },
        "ois": {
            "covering": float(cov_img.max(1).mean()),
            "pri": float(reg[..., 2].max(1).mean()),
            "voi": float(reg[..., 3].min(1).mean()),
        },
        "time_per_image_s": float(np.median([res["time"][method] for res in results])),
        "cpu_time_per_image_s": float(np.median([res["cpu_time"][method] for res in results])),
    }


def _overlay(img, seg, colour=(255, 40, 40)):
    out = np.array(img, copy=True)
    if out.ndim == 2:
        out = np.stack([out] * 3, -1)
    b = label_boundaries(seg)
    out[b] = colour
    return out


def _gallery(split, ids, preset, level, out_dir):
    from skimage.color import label2rgb

    paths = []
    for k, image_id in enumerate(ids):
        img, gts, _ = _load(split, image_id)
        h = image_hierarchy(img, preset=preset, seed=0)
        seg = h.labels_at(level)
        mean_col = (label2rgb(seg, img, kind="avg", bg_label=-1)).astype(np.uint8)
        human = (label2rgb(gts[0], img, kind="avg", bg_label=-1)).astype(np.uint8)
        panels = [img, _overlay(mean_col, seg), _overlay(human, gts[0], (40, 200, 40))]
        gap = np.full((img.shape[0], 6, 3), 255, np.uint8)
        row = np.concatenate([panels[0], gap, panels[1], gap, panels[2]], axis=1)
        p = out_dir / f"bsds_gallery_{k + 1}.png"
        pic = Image.fromarray(row)  # half size: a figure, not a copy of the dataset images
        pic.resize((pic.width // 2, pic.height // 2), Image.LANCZOS).save(p, optimize=True)
        paths.append(str(p))
    return paths


def _pr_plot(summary, path, split):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(5.5, 5))
    grid = np.linspace(0.01, 1, 200)
    for f in np.arange(0.1, 1.0, 0.1):  # iso-F contours
        r = grid
        p = f * r / np.maximum(2 * r - f, 1e-9)
        ok = (p > 0) & (p <= 1)
        ax.plot(r[ok], p[ok], color="0.85", lw=0.8)
    styles = {"imgcut": "C3", "felzenszwalb": "C0", "slic": "C2"}
    for m, s in summary.items():
        r, p = np.array(s["fast_recall"]), np.array(s["fast_precision"])
        ok = r > 0  # a single region has no boundary: precision undefined
        ax.plot(r[ok], p[ok], "-o", ms=3, color=styles[m], label=m)
        ex = s.get("exact_ods")
        if ex:
            ax.plot(ex["recall"], ex["precision"], "*", ms=13, color=styles[m], markeredgecolor="k")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_xlabel("recall")
    ax.set_ylabel("precision")
    ax.set_title(
        f"BSDS500 {split}: boundary precision-recall\n(curves: tolerance test; ★ exact ODS)"
    )
    ax.legend(loc="lower left")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--split", default="val", choices=("train", "val"))
    ap.add_argument("--limit", type=int, default=None, help="first N images (sorted ids)")
    ap.add_argument("--step", type=int, default=1, help="take every STEP-th image")
    ap.add_argument("--jobs", type=int, default=1)
    ap.add_argument("--preset", default="photo")
    ap.add_argument(
        "--preset-overrides",
        default="{}",
        help="JSON dict of preset fields to override, e.g. '{\"similarity_weight\": 0.05}'",
    )
    ap.add_argument("--exact-levels", type=int, default=1)
    ap.add_argument("--cache", default=None, help="folder for per-image results (resumable)")
    ap.add_argument("--gallery", type=int, default=0, help="number of gallery images")
    ap.add_argument("--out", default="docs")
    ap.add_argument(
        "--methods",
        default=",".join(METHODS),
        help="comma-separated subset of " + ", ".join(METHODS),
    )
    ap.add_argument(
        "--baselines-from",
        default=None,
        help="earlier bsds_<split>.json whose entries are copied for methods not run now "
        "(marked as from an earlier run)",
    )
    args = ap.parse_args(argv)
    methods = tuple(m.strip() for m in args.methods.split(",") if m.strip())
    bad = sorted(set(methods) - set(METHODS))
    if bad or not methods:
        raise SystemExit(f"--methods must be a subset of {METHODS}; got {args.methods!r}")
    if not DATA.is_dir():
        raise SystemExit(f"BSDS500 not found at {DATA}")
    preset = get_preset(args.preset, **json.loads(args.preset_overrides))
    ids = sorted(p.stem for p in (DATA / args.split / "images").glob("*.jpg"))[:: args.step]
    ids = ids[: args.limit] if args.limit else ids
    out_dir = Path(args.out)
    cache = args.cache
    if cache:
        Path(cache).mkdir(parents=True, exist_ok=True)
    (out_dir / "images").mkdir(parents=True, exist_ok=True)
    t_start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=args.jobs) as pool:
        jobs = [(args.split, i, preset, cache, methods) for i in ids]
        results = list(pool.map(_score_image, jobs))
        summary = {m: _aggregate(results, m, _params(m, preset)) for m in methods}
        # exact boundary F at the best values of the fast sweep
        todo = []
        for m, s in summary.items():
            best = np.argsort(s["fast_f"])[::-1][: args.exact_levels]
            todo += [(m, s["params"][int(b)]) for b in best]
        jobs = [(args.split, r["id"], r["hierarchy"], todo, cache) for r in results]
        exact = dict(pool.map(_exact_image, jobs))
    for m, s in summary.items():
        best = None
        for mm, param in todo:
            if mm != m:
                continue
            counts = np.sum([exact[i][(mm, param)] for i in ids], axis=0)
            p, r, f = _prf(counts)
            if best is None or f > best["f"]:
                best = {"param": param, "precision": float(p), "recall": float(r), "f": float(f)}
        s["exact_ods"] = best
        s["ods"]["boundary_f"] = best["f"]
        s["ods"]["boundary_f_param"] = best["param"]
        s["ods"]["fast_boundary_f"] = float(max(s["fast_f"]))
    if args.baselines_from:
        with open(args.baselines_from) as fh:
            earlier = json.load(fh)
        if earlier.get("n_images") != len(ids) or earlier.get("split") != args.split:
            raise SystemExit("--baselines-from must hold the same split and image count")
        for m in METHODS:
            if m not in summary and m in earlier["methods"]:
                summary[m] = dict(earlier["methods"][m], from_earlier_run=True)
    report = {
        "split": args.split,
        "n_images": len(ids),
        "preset": preset.as_dict(),
        "cpu_count": os.cpu_count(),
        "jobs": args.jobs,
        "wall_time_s": time.perf_counter() - t_start,
        "methods": summary,
    }
    with open(out_dir / f"bsds_{args.split}.json", "w") as fh:
        json.dump(report, fh, indent=1)
    _pr_plot(summary, out_dir / "images" / f"bsds_pr_{args.split}.png", args.split)
    if args.gallery:
        pick = ids[:: max(1, len(ids) // args.gallery)][: args.gallery]
        # the preset's default level (chosen on train), not a level picked on this split
        _gallery(args.split, pick, preset, preset.default_level, out_dir / "images")
    base = summary.get("felzenszwalb", summary[methods[0]])["time_per_image_s"]
    print(f"BSDS500 {args.split}: {len(ids)} images, ODS (one parameter for the whole split)")
    head = ("method", "cover", "PRI", "VoI", "F", "s/img", "x felz")
    print(f"{head[0]:14s} " + " ".join(f"{h:>7s}" for h in head[1:]))
    for m, s in summary.items():
        o = s["ods"]
        t = s["time_per_image_s"]
        if s.get("from_earlier_run"):
            m = m + "*"
        print(
            f"{m:14s} {o['covering']:7.3f} {o['pri']:7.3f} {o['voi']:7.3f} "
            f"{o['boundary_f']:7.3f} {t:7.2f} {t / base:7.1f}"
        )


if __name__ == "__main__":
    main()
