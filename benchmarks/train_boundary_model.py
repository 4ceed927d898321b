"""Fit the ``photo`` preset's boundary model on BSDS500 *train* (never val).

How ``imgcut/models/photo-bsds500-train.json`` was made (see ``docs/benchmarks.md``, "Session
7").  For every training image, from the cue cache of ``tune_bsds.py`` (all 17 cue scales):

1. the preset's hand-weighted combined tensor sets the orientation, and
   :func:`imgcut.boundary_model.oriented_features` gives 35 inputs per pixel;
2. the target of a pixel is the fraction of the human segmentations with a boundary within
   1 px (8-neighbourhood); pixels 2–3 px from every human boundary are left out (their
   features look like an edge, their label says none), and of the pixels further away a
   random 10 % are kept with weight 10;
3. a fixed random ``--rows-per-image`` × images of those rows fit the network
   (:func:`imgcut.boundary_model.fit_boundary_model`, 16 tanh units, L-BFGS);
4. the strength map (:func:`imgcut.boundary_model.fit_strength_map`) matches the model's
   probabilities to the hand-weighted strength over every pixel of every 4th training image.

Every random choice is seeded, so the same cache gives the same model.

Usage::

    OMP_NUM_THREADS=1 python benchmarks/train_boundary_model.py --cache /tmp/bsds_cues \\
        --out imgcut/models/photo-bsds500-train.json --overwrite

``--half subset`` / ``--half rest`` fit on the fixed random 100 train images of
``docs/benchmarks.md`` or on the other 100 (for cross-fitted scores of the model on train).
"""

from __future__ import annotations

import argparse
import datetime
import time
from pathlib import Path

import numpy as np
import tune_bsds as T
from scipy import ndimage

from imgcut.boundary_model import (
    BoundaryModel,
    apply_boundary_model,
    boundary_probability,
    fit_boundary_model,
    fit_strength_map,
    oriented_features,
    save_boundary_model,
)
from imgcut.cues import CueTensors, boundary_strength
from imgcut.presets import get_preset


def human_targets(segs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Fraction of humans with a boundary within 1 px, and the distance to any human boundary.

    A pixel is on a human boundary when its right or lower neighbour has another label (not
    :func:`imgcut.metrics.boundary.label_boundaries`, which also looks at the diagonal; after
    the 1-px dilation the two differ little, and this one reproduces the packaged model).
    """
    shape = segs.shape[1:]
    frac = np.zeros(shape)
    anyb = np.zeros(shape, bool)
    for g in segs:
        b = np.zeros(shape, bool)
        b[:, :-1] |= g[:, :-1] != g[:, 1:]
        b[:-1, :] |= g[:-1, :] != g[1:, :]
        anyb |= b
        frac += ndimage.binary_dilation(b, np.ones((3, 3), bool))
    return frac / len(segs), ndimage.distance_transform_edt(~anyb)


def _features(image_id, cache, preset, cue_names):
    tensors, names, segs, _ = T._cues(image_id, cache)
    combined = T._combine(tensors, names, preset)
    index = {n: i for i, n in enumerate(names)}
    return oriented_features(tensors[[index[n] for n in cue_names]], combined), combined, segs


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cache", required=True, help="cue cache folder of tune_bsds.py")
    ap.add_argument("--out", required=True, help="model JSON file to write")
    ap.add_argument("--half", choices=("all", "subset", "rest"), default="all")
    ap.add_argument("--hidden", type=int, default=16)
    ap.add_argument("--rows-per-image", type=int, default=4000)
    ap.add_argument("--negative-rate", type=float, default=0.1)
    ap.add_argument("--name", default="photo-bsds500-train")
    ap.add_argument("--overwrite", action="store_true", help="replace an existing --out file")
    args = ap.parse_args(argv)
    if Path(args.out).exists() and not args.overwrite:
        raise SystemExit(f"{args.out}: exists; pass --overwrite to replace it")
    cache = Path(args.cache)
    preset = get_preset("photo", boundary_model="")
    cue_names = tuple(
        f"{cue}@{s:g}"
        for cue, family in (
            ("brightness", "brightness"),
            ("colour_a", "colour"),
            ("colour_b", "colour"),
            ("texture", "texture"),
        )
        for s in preset._sigmas(family)
    )
    ids = sorted(p.stem for p in (T.DATA / "train" / "images").glob("*.jpg"))
    subset = sorted(np.random.default_rng(12345).choice(ids, 100, replace=False))
    if args.half == "subset":
        ids = subset
    elif args.half == "rest":
        ids = [i for i in ids if i not in set(subset)]
    t0 = time.perf_counter()
    rng = np.random.default_rng(0)
    xs, ys, ws = [], [], []
    for image_id in ids:
        feats, _, segs = _features(image_id, cache, preset, cue_names)
        frac, dist = human_targets(segs)
        pos = frac > 0
        neg = (dist > 3) & (rng.random(frac.shape) < args.negative_rate)
        keep = pos | neg
        xs.append(feats[keep])
        ys.append(frac[keep])
        ws.append(np.where(pos[keep], 1.0, 1.0 / args.negative_rate))
    x, y, w = np.concatenate(xs), np.concatenate(ys), np.concatenate(ws)
    rows = np.random.default_rng(1).choice(len(x), args.rows_per_image * len(ids), replace=False)
    print(f"{len(x)} candidate rows from {len(ids)} images, fitting on {len(rows)}", flush=True)
    model = fit_boundary_model(
        x[rows], y[rows], w[rows], cue_names=cue_names, n_hidden=args.hidden, name=args.name
    )
    probs, strengths = [], []
    for image_id in ids[::4]:
        feats, combined, _ = _features(image_id, cache, preset, cue_names)
        probs.append(boundary_probability(model, feats).ravel())
        strengths.append(boundary_strength(combined).ravel())
    kp, ke = fit_strength_map(np.concatenate(probs), np.concatenate(strengths))
    model = BoundaryModel(
        **{
            **model.__dict__,
            "map_probability": kp,
            "map_strength": ke,
            "provenance": {
                **model.provenance,
                "split": "BSDS500 train",
                "images": len(ids),
                "half": args.half,
                "rows": len(rows),
                "hidden": args.hidden,
                "negative_rate": args.negative_rate,
                "preset": "photo (hand weights set the orientation)",
                "script": "benchmarks/train_boundary_model.py",
                "date": datetime.date.today().isoformat(),
            },
        }
    )
    save_boundary_model(model, args.out, overwrite=args.overwrite)
    # a check that the written model applies to the cached cues
    tensors, names, _, _ = T._cues(ids[0], cache)
    cues = CueTensors(names, tensors, None)
    apply_boundary_model(model, cues, T._combine(tensors, names, preset))
    print(
        f"wrote {args.out}: loss {model.provenance['loss']:.5f}, {time.perf_counter() - t0:.0f} s",
        flush=True,
    )


if __name__ == "__main__":
    main()
