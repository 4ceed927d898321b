"""Tune the hierarchy stage of a boundary preset on BSDS500 *train* (never val).

How the ``"photo"`` preset's contrast normalisation and merge score were fitted (see
``docs/benchmarks.md``, "How the preset was chosen").  The expensive part of the pipeline, the
local cue tensors, is computed once per image and cached (float16) in ``--cache``; each
configuration then only re-combines the tensors, normalises the contrast, runs the watershed
and the greedy merging (:mod:`imgcut.hierarchy`), and scores every level of the sweep from one
contingency table of the over-segmentation per human (the same formulas as
:func:`imgcut.metrics.region.region_scores`).  One process, so it can share a busy machine.

Usage::

    python benchmarks/tune_bsds.py --cache /tmp/bsds_cues --subset 100 \\
        --configs '[{}, {"strength_power": 1.0, "size_scale": 0.0, "min_area": 0}]'

Each configuration is a dict of :class:`imgcut.presets.BoundaryPreset` fields overriding the
``--preset`` (the ``"photo"`` preset is a hierarchy ensemble since session 5; ``{"ensemble":
[]}`` gives its single hierarchy; JSON lists of members become the preset's tuples).  The
output is one line per configuration with the ODS covering, PRI and VoI (each at its own best
level) and the mean of the per-image best coverings (OIS).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
import scipy.io as sio
from PIL import Image
from scipy import sparse
from scipy.sparse.csgraph import connected_components

from imgcut.boundary_model import apply_preset_model
from imgcut.cues import CueTensors, combine_cues, local_cues, quantised_channels
from imgcut.ensemble import ensemble_hierarchy, member_presets
from imgcut.hierarchy import merge_regions, oversegment
from imgcut.presets import get_preset
from imgcut.spectral_boundary import _contrast_normalise

DATA = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "bsds500"
# every scale any configuration may ask for (the cache holds all of them)
SIGMAS = {"brightness": (1, 2, 4, 8, 16), "colour": (2, 4, 8, 16), "texture": (2, 4, 8, 16)}


def _cues(image_id: str, cache: Path):
    path = cache / f"{image_id}.npz"
    if not path.exists():
        root = DATA / "train"
        img = np.asarray(Image.open(root / "images" / f"{image_id}.jpg"))
        gt = sio.loadmat(root / "groundTruth" / f"{image_id}.mat", simplify_cells=True)
        gt = gt["groundTruth"]
        gt = [gt] if isinstance(gt, dict) else list(gt)
        c = local_cues(
            img,
            brightness_sigmas=SIGMAS["brightness"],
            colour_sigmas=SIGMAS["colour"],
            texture_sigmas=SIGMAS["texture"],
            seed=np.random.default_rng(0),  # as image_hierarchy(seed=0)
        )
        tmp = cache / f"{image_id}.tmp.npz"
        np.savez(
            tmp,
            tensors=c.tensors.astype(np.float16),
            names=np.array(c.names),
            segs=np.stack([g["Segmentation"].astype(np.int16) for g in gt]),
            textons=c.texton_labels.astype(np.uint8),
        )
        tmp.rename(path)
    z = np.load(path)
    tex = z["textons"] if "textons" in z.files else None
    return z["tensors"], tuple(str(n) for n in z["names"]), z["segs"].astype(np.int64), tex


def _combine(tensors, names, preset):
    """The preset's weighted tensor from the cached superset of scales."""
    wanted = set()
    for cue, sig in (
        ("brightness", preset.brightness_sigmas),
        ("colour_a", preset.colour_sigmas),
        ("colour_b", preset.colour_sigmas),
        ("texture", preset.texture_sigmas),
    ):
        wanted |= {f"{cue}@{s:g}" for s in sig}
    keep = [k for k, n in enumerate(names) if n in wanted]
    if len(keep) != len(wanted):
        raise SystemExit(f"cache lacks some scales of {sorted(wanted)}")
    sub = CueTensors(tuple(names[k] for k in keep), tensors[keep].astype(np.float32), None)
    return combine_cues(sub, preset.weights())


def _tables(base, segs):
    """Contingency (base region x human region) per human: rows, cols, counts, n_cols."""
    b = base.ravel() - 1
    out = []
    for g in segs:
        g = g.ravel()
        keep = g > 0  # human label 0 = unlabelled
        _, lg = np.unique(g[keep], return_inverse=True)
        nb = int(lg.max()) + 1
        u, c = np.unique(b[keep] * nb + lg, return_counts=True)
        out.append((u // nb, u % nb, c.astype(np.float64), nb))
    return out


def _sweep_scores(h, tables, levels):
    """(covering overlap, covering area, PRI, VoI) per level, from the base-region tables."""
    n = h.n_base
    res = []
    for t in levels:
        e = h.edges[h.edge_levels <= t]
        g = sparse.coo_matrix((np.ones(len(e)), (e[:, 0], e[:, 1])), shape=(n, n))
        comp = connected_components(g, directed=False)[1]
        nc = int(comp.max()) + 1
        num = den = 0.0
        ri, vi = [], []
        for rows, cols, cnt, nb in tables:
            u, inv = np.unique(comp[rows] * nb + cols, return_inverse=True)
            c = np.bincount(inv, weights=cnt)
            r, k = u // nb, u % nb
            rs = np.bincount(r, weights=c, minlength=nc)
            cs = np.bincount(k, weights=c, minlength=nb)
            total = c.sum()
            best = np.zeros(nb)
            np.maximum.at(best, k, c / (rs[r] + cs[k] - c))  # Arbelaez et al. 2011, eq. (4)
            num += float(cs @ best)
            den += float(cs.sum())
            dis = 0.5 * ((rs**2).sum() + (cs**2).sum()) - (c**2).sum()  # Rand 1971
            ri.append(1.0 - dis / (total * (total - 1) / 2.0))
            pz = c / total  # Meila 2007: H(S|G) + H(G|S), bits
            vi.append(-np.sum(pz * np.log2(c / cs[k])) - np.sum(pz * np.log2(c / rs[r])))
        res.append((num, den, np.mean(ri), np.mean(vi)))
    return np.array(res)


def _single(image_id, tensors, names, tex, preset):
    """The preset's hierarchy of one image from its cached cues (as ``image_hierarchy``)."""
    combined = apply_preset_model(
        preset, CueTensors(names, tensors, None), _combine(tensors, names, preset)
    )
    local, strength = _contrast_normalise(combined, preset)
    base = oversegment(strength, smooth=preset.watershed_smooth)
    features = None
    if preset.similarity_weight > 0:
        if tex is None:
            raise SystemExit("the cue cache predates texton maps; rebuild it")
        img = np.asarray(Image.open(DATA / "train" / "images" / f"{image_id}.jpg"))
        features = quantised_channels(
            img, tex, colour_space=preset.colour_space, n_bins=preset.similarity_bins
        )
    return merge_regions(
        base,
        strength,
        tensor=local if preset.oriented else None,
        features=features,
        **preset.merge_options(),
    )


def hierarchy(image_id, preset, cache: Path):
    """(hierarchy, human segmentations) of one train image from the cue cache.

    An ensemble preset (non-empty ``ensemble``) builds every member's hierarchy from the same
    cached cues and combines their contour maps as :func:`imgcut.ensemble.ensemble_hierarchy`.
    """
    tensors, names, segs, tex = _cues(image_id, cache)
    return hierarchy_from_cues(image_id, tensors, names, tex, preset), segs


def hierarchy_from_cues(image_id, tensors, names, tex, preset):
    """The hierarchy stage of ``image_hierarchy`` (single or ensemble) on cached cues."""
    members = member_presets(preset)
    if not members:
        return _single(image_id, tensors, names, tex, preset)
    maps = [_single(image_id, tensors, names, tex, m).ultrametric_map() for m, _ in members]
    return ensemble_hierarchy(
        maps,
        [ref for _, ref in members],
        level=preset.ensemble_level,
        dilation=preset.ensemble_dilation,
        smooth=preset.watershed_smooth,
        default_level=preset.default_level,
    )


def ods_scores(r, levels) -> dict:
    """ODS/OIS region scores from per-image sweep rows ``r`` (images, levels, 4)."""
    r = np.asarray(r)
    cov = r[..., 0].sum(0) / r[..., 1].sum(0)
    pri, voi = r[..., 2].mean(0), r[..., 3].mean(0)
    return {
        "covering": float(cov.max()),
        "covering_level": float(levels[cov.argmax()]),
        "pri": float(pri.max()),
        "pri_level": float(levels[pri.argmax()]),
        "voi": float(voi.min()),
        "voi_level": float(levels[voi.argmin()]),
        "ois_covering": float((r[..., 0] / r[..., 1]).max(1).mean()),
    }


def evaluate(ids, preset, cache: Path, levels) -> dict:
    """ODS/OIS region scores of one preset over train images (one hierarchy per image)."""
    rows = []
    for image_id in ids:
        h, segs = hierarchy(image_id, preset, cache)
        rows.append(_sweep_scores(h, _tables(h.base_labels, segs), levels))
    return ods_scores(rows, levels)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cache", required=True, help="folder for the per-image cue tensors")
    ap.add_argument("--preset", default="photo")
    ap.add_argument("--configs", default="[{}]", help="JSON list of preset-field overrides")
    ap.add_argument("--subset", type=int, default=0, help="fixed random subset size (0: all)")
    ap.add_argument("--level-min", type=float, default=0.2, help="lowest level of the sweep")
    args = ap.parse_args(argv)
    cache = Path(args.cache)
    cache.mkdir(parents=True, exist_ok=True)
    ids = sorted(p.stem for p in (DATA / "train" / "images").glob("*.jpg"))
    if args.subset:  # the fixed subset of docs/benchmarks.md
        ids = sorted(np.random.default_rng(12345).choice(ids, args.subset, replace=False))
    levels = np.round(np.arange(args.level_min, 1.0001, 0.025), 3)
    for overrides in json.loads(args.configs):
        t0 = time.perf_counter()
        fields = dict(overrides)
        if "ensemble" in fields:  # JSON lists -> nested tuples (a preset stays hashable)
            fields["ensemble"] = tuple(
                (tuple(map(tuple, o)), float(r)) for o, r in fields["ensemble"]
            )
        s = evaluate(ids, get_preset(args.preset, **fields), cache, levels)
        print(
            f"{json.dumps(overrides):60s} covering {s['covering']:.4f}@{s['covering_level']:.3f} "
            f"PRI {s['pri']:.4f}@{s['pri_level']:.3f} VoI {s['voi']:.3f}@{s['voi_level']:.3f} "
            f"OIS {s['ois_covering']:.4f} ({time.perf_counter() - t0:.0f} s, {len(ids)} images)",
            flush=True,
        )


if __name__ == "__main__":
    main()
