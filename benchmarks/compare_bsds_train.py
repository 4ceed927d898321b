"""Compare boundary presets on BSDS500 *train* from the cue cache: region ODS, boundary F, time.

For deciding whether a preset change is adopted before val is looked at (``docs/benchmarks.md``,
"Session 5").  Every configuration is a dict of :class:`imgcut.presets.BoundaryPreset` fields
overriding ``"photo"`` (``"ensemble": "photo"`` stands for :data:`imgcut.presets.PHOTO_ENSEMBLE`).
All configurations run in one process on the same images, interleaved per image (the order
rotates), from the cue cache of ``tune_bsds.py``, so the time per image is that of the hierarchy
stage alone (contrast normalisation, watershed, merging, and for an ensemble every member plus
the final merge).  ``--end-to-end N`` instead times the whole ``image_hierarchy`` (cues
included) of N images per configuration, again interleaved.

Each hierarchy is scored at the union of two level sweeps over 0.300 … 0.900: the preset's
``level_sweep`` (step 0.025) and a fine sweep (step 0.01).  Region measures (covering, PRI, VoI)
as in ``tune_bsds.py``; boundary F as in ``bench_bsds.py``: a tolerance-only sweep, then the exact
one-to-one matcher (:func:`imgcut.metrics.boundary.boundary_counts`) at the ``--exact`` best
levels of that sweep, against the human ``Boundaries`` maps; the reported F is the best exact
value.  ODS everywhere: one level for all images, per measure.

Usage::

    OMP_NUM_THREADS=1 python benchmarks/compare_bsds_train.py --cache /tmp/bsds_cues \\
        --configs '{"current": {}, "ensemble": {"ensemble": "photo"}}' --out /tmp/cmp.json
"""

from __future__ import annotations

import argparse
import json
import pickle
import time
from pathlib import Path

import bench_bsds as B
import numpy as np
import tune_bsds as T
from scipy import ndimage

from imgcut.metrics.boundary import boundary_counts, label_boundaries
from imgcut.presets import PHOTO_ENSEMBLE, get_preset


def _preset(overrides: dict):
    ov = dict(overrides)
    if ov.get("ensemble") == "photo":
        ov["ensemble"] = PHOTO_ENSEMBLE
    elif "ensemble" in ov:  # JSON lists -> the preset's nested tuples
        ov["ensemble"] = tuple((tuple(map(tuple, o)), float(r)) for o, r in ov["ensemble"])
    if "model_sigmas" in ov:
        ov["model_sigmas"] = tuple((f, tuple(s)) for f, s in ov["model_sigmas"])
    return get_preset("photo", **ov)


def _summary(reg, fb, exact, levels, grid, tm) -> dict:
    idx = np.array([int(np.flatnonzero(np.isclose(levels, g))[0]) for g in grid])
    s = T.ods_scores(reg[:, idx], grid)
    fp, fr, ff = B._prf(fb[:, idx].sum(0))
    best = None
    for t, counts in exact.items():
        if not np.any(np.isclose(grid, t)):
            continue
        p, r, f = B._prf(np.sum(counts, axis=0))
        if best is None or f > best[3]:
            best = (float(t), float(p), float(r), float(f))
    s.update(
        fast_f=float(ff.max()),
        fast_f_level=float(grid[int(ff.argmax())]),
        boundary_f=best[3],
        boundary_f_level=best[0],
        boundary_p=best[1],
        boundary_r=best[2],
        cpu_s_median=float(np.median(tm)),
        cpu_s_mean=float(np.mean(tm)),
    )
    return s


def _end_to_end(ids, configs, n_images, out):
    """Median CPU time of the whole ``image_hierarchy`` per image, configurations interleaved."""
    from imgcut.hierarchy import image_hierarchy

    pick = ids[:: max(1, len(ids) // n_images)][:n_images]
    names = list(configs)
    tm = {k: [] for k in names}
    for n, image_id in enumerate(pick):
        img, _, _ = B._load("train", image_id)
        for k in names[n % len(names) :] + names[: n % len(names)]:
            c0 = time.process_time()
            image_hierarchy(img, preset=configs[k], seed=0)
            tm[k].append(time.process_time() - c0)
    base = np.median(tm[names[0]])
    res = {k: {"cpu_s_median": float(np.median(v)), "cpu_s": v} for k, v in tm.items()}
    with open(out, "w") as fh:
        json.dump({"n_images": len(pick), "ids": list(pick), "results": res}, fh, indent=1)
    print(f"image_hierarchy CPU time per image, {len(pick)} train images, median")
    for k in names:
        m = res[k]["cpu_s_median"]
        print(f"  {k:12s} {m:.3f} s ({m / base:.2f}x)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cache", required=True, help="cue cache folder of tune_bsds.py")
    ap.add_argument("--configs", required=True, help="JSON dict label -> preset overrides")
    ap.add_argument("--subset", type=int, default=0, help="fixed random subset (0: all 200)")
    ap.add_argument(
        "--rest",
        action="store_true",
        help="with --subset: the train images outside the fixed subset instead",
    )
    ap.add_argument("--limit", type=int, default=0, help="first N images (development)")
    ap.add_argument("--exact", type=int, default=3, help="exact-matched levels per sweep")
    ap.add_argument("--out", required=True, help="JSON file for the results")
    ap.add_argument(
        "--end-to-end",
        type=int,
        default=0,
        help="only time image_hierarchy (cues included, no cache) on N train images spread "
        "over the split, all configurations interleaved; no scores",
    )
    args = ap.parse_args(argv)
    cache = Path(args.cache)
    configs = {k: _preset(v) for k, v in json.loads(args.configs).items()}
    ids = sorted(p.stem for p in (T.DATA / "train" / "images").glob("*.jpg"))
    if args.subset:  # the fixed subset of docs/benchmarks.md
        subset = sorted(np.random.default_rng(12345).choice(ids, args.subset, replace=False))
        ids = [i for i in ids if i not in set(subset)] if args.rest else subset
    if args.limit:
        ids = ids[: args.limit]
    if args.end_to_end:
        _end_to_end(ids, configs, args.end_to_end, args.out)
        return
    coarse = np.round(np.arange(0.3, 0.9 + 1e-9, 0.025), 3)
    fine = np.round(np.arange(0.3, 0.9 + 1e-9, 0.01), 3)
    levels = np.unique(np.concatenate([coarse, fine]))
    names = list(configs)
    reg = {k: [] for k in names}
    fb = {k: [] for k in names}
    tm = {k: [] for k in names}
    hier = {k: [] for k in names}
    t_start = time.perf_counter()
    for n, image_id in enumerate(ids):
        tensors, cue_names, segs, tex = T._cues(image_id, cache)
        img, _, human_b = B._load("train", image_id)
        tol = 0.0075 * float(np.hypot(*img.shape[:2]))
        near_any = np.zeros(img.shape[:2], bool)
        for g in human_b:
            near_any |= ndimage.distance_transform_edt(~g) <= tol
        for k in names[n % len(names) :] + names[: n % len(names)]:  # rotate the order
            c0 = time.process_time()
            h = T.hierarchy_from_cues(image_id, tensors, cue_names, tex, configs[k])
            tm[k].append(time.process_time() - c0)
            reg[k].append(T._sweep_scores(h, T._tables(h.base_labels, segs), levels))
            fb[k].append([B._fast_boundary(h.labels_at(t), near_any, human_b, tol) for t in levels])
            hier[k].append(h)
        if n % 20 == 0:
            print(f"{n + 1}/{len(ids)} images, {time.perf_counter() - t_start:.0f} s", flush=True)
    results = {}
    for k in names:
        r, f = np.array(reg[k]), np.array(fb[k], dtype=float)
        todo = set()
        for grid in (coarse, fine):
            idx = np.array([int(np.flatnonzero(np.isclose(levels, g))[0]) for g in grid])
            _, _, ff = B._prf(f[:, idx].sum(0))
            todo |= {float(grid[i]) for i in np.argsort(ff)[::-1][: args.exact]}
        exact = {t: [] for t in sorted(todo)}
        for image_id, h in zip(ids, hier[k], strict=True):
            _, _, human_b = B._load("train", image_id)
            for t in exact:
                c = boundary_counts(label_boundaries(h.labels_at(t)), human_b)
                exact[t].append((c.matched_machine, c.machine, c.matched_human, c.human))
        results[k] = {
            "overrides": json.loads(args.configs)[k],
            "step_0.025": _summary(r, f, exact, levels, coarse, tm[k]),
            "step_0.01": _summary(r, f, exact, levels, fine, tm[k]),
        }
        with open(Path(args.out).with_suffix(".pkl"), "wb") as fh:
            pickle.dump({"ids": ids, "levels": levels, "reg": reg, "fb": fb, "tm": tm}, fh)
    report = {
        "n_images": len(ids),
        "wall_time_s": time.perf_counter() - t_start,
        "results": results,
    }
    with open(args.out, "w") as fh:
        json.dump(report, fh, indent=1)
    base = results[names[0]]
    print(f"BSDS500 train, {len(ids)} images, ODS per measure (F: exact matcher)")
    for step in ("step_0.025", "step_0.01"):
        print(step)
        for k in names:
            s = results[k][step]
            print(
                f"  {k:12s} covering {s['covering']:.4f}@{s['covering_level']:.3f} "
                f"PRI {s['pri']:.4f}@{s['pri_level']:.3f} VoI {s['voi']:.3f}@{s['voi_level']:.3f} "
                f"F {s['boundary_f']:.4f}@{s['boundary_f_level']:.3f} "
                f"time {s['cpu_s_median']:.3f} s "
                f"({s['cpu_s_median'] / base[step]['cpu_s_median']:.2f}x)"
            )


if __name__ == "__main__":
    main()
