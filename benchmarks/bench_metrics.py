"""Time to score one 481×321 segmentation against 5 human segmentations.

Target (issue 5): all region measures (covering, PRI, VoI) plus boundary P/R/F at one
threshold in under 1 s on one core. Timings are CPU seconds of this process
(``time.process_time``) with BLAS/OpenMP pools limited to one thread, so other jobs on the
machine disturb them less than wall time; the best of ``--repeat`` runs is reported.
Baseline measured in the same run: one ``skimage.metrics.variation_of_information`` call
on one (segmentation, human) pair, a general-purpose reference for "one contingency-table
measure"; the ratio column is each row's time over that baseline.

Inputs: a BSDS500 val image with at least 5 humans (``../shared/data/bsds500/val``) when
present, the segmentation being SLIC superpixels (scikit-image) at ``--segments`` regions,
a stand-in for an imgcut result with realistic boundaries; without the data, 5 synthetic
"humans" (random Voronoi partitions) of a 321×481 grid.

    python benchmarks/bench_metrics.py [--repeat 5] [--segments 100]
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parents[1]
VAL = ROOT.parent / "shared" / "data" / "bsds500" / "val"


def _voronoi(shape, n, rng):
    pts = rng.random((n, 2)) * np.array(shape)
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    best = np.full(shape, np.inf)
    lab = np.zeros(shape, np.int32)
    for k, (py, px) in enumerate(pts):
        d = (yy - py) ** 2 + (xx - px) ** 2
        closer = d < best
        best[closer] = d[closer]
        lab[closer] = k + 1
    return lab


def _inputs(n_segments: int):
    from skimage.segmentation import slic

    from imgcut.groundtruth import read_bsds_mat

    if VAL.is_dir():
        for f in sorted((VAL / "groundTruth").glob("*.mat")):
            gt = read_bsds_mat(f)
            if gt.n_humans >= 5:
                from imgcut.io import read_image

                img = read_image(VAL / "images" / f"{f.stem}.jpg").pixels
                seg = slic(img, n_segments=n_segments, start_label=1)
                return f"BSDS500 val {f.stem}", seg, gt.segmentations[:5]
    rng = np.random.default_rng(0)
    shape = (321, 481)
    humans = tuple(_voronoi(shape, int(rng.integers(8, 40)), rng) for _ in range(5))
    return "synthetic 321x481", _voronoi(shape, n_segments, rng), humans


def _best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.process_time()
        fn()
        times.append(time.process_time() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--segments", type=int, default=100)
    args = ap.parse_args()

    from skimage.metrics import variation_of_information
    from skimage.morphology import thin

    from imgcut.evaluation import score_image
    from imgcut.groundtruth import GroundTruth
    from imgcut.metrics import boundary_counts, label_boundaries, region_scores

    source, seg, humans = _inputs(args.segments)
    truth = GroundTruth(tuple(humans))
    hb = [thin(label_boundaries(h)) for h in humans]
    mb = label_boundaries(seg)
    cases = [
        ("baseline: skimage VoI, 1 pair", lambda: variation_of_information(humans[0], seg)),
        ("region_scores, 5 humans", lambda: region_scores(seg, humans)),
        ("boundary_counts, 5 humans", lambda: boundary_counts(mb, hb)),
        ("score_image (all, incl. human boundaries)", lambda: score_image(seg, truth)),
    ]
    with threadpool_limits(limits=1):
        rows = [(name, _best(fn, args.repeat)) for name, fn in cases]
    base = rows[0][1]
    print(f"input: {source}, segmentation with {len(np.unique(seg))} regions, 5 humans")
    print(f"{'operation':<44} {'CPU s':>8} {'x baseline':>11}")
    for name, t in rows:
        print(f"{name:<44} {t:8.3f} {t / base:11.1f}")
    total = rows[-1][1]
    print(f"target < 1 s for score_image: {'met' if total < 1.0 else 'NOT met'} ({total:.3f} s)")


if __name__ == "__main__":
    main()
