"""Photo hierarchies of large images: working size against full resolution (quality, time, memory).

BSDS500 *train* photographs (481 × 321) are enlarged by ``--factor`` (bicubic, Pillow) and
their human segmentations with them (nearest neighbour), so the humans still score the
enlarged image.  Each mode runs in its own Python process over the same images, so
``ru_maxrss`` is that mode's peak resident memory:

- ``full``: ``image_hierarchy(big, preset=get_preset("photo", working_pixels=0))``, every stage
  at full resolution (imgcut before the working size existed);
- ``working``: the ``"photo"`` preset as shipped (hierarchy at about ``working_pixels`` pixels,
  borders re-drawn at full resolution, :mod:`imgcut.working_scale`);
- ``native``: the photograph at its own 481 × 321 size against the original humans (the size
  the preset was fitted at; reference only).

Scores: covering, PRI and VoI (:func:`imgcut.metrics.region_scores`, the mean over images) at
the preset's default level, and ODS over the preset's ``level_sweep``; CPU seconds of
``image_hierarchy`` per image.  Train images only (the tuning split), so val stays untouched.

``--scene H,W`` instead segments the project's own synthetic scene
(``scripts/make_sample_images.make_scene``) drawn at ``H × W``: its textures keep their pixel
periods (stripes of 6 px, checks of 8 px) while the objects grow, as in a camera photograph.
Both modes run with ``imgcut.segment``'s boundary path at the preset's default level, each in
its own process; ``--plot PATH`` writes the two overlays side by side.

Usage::

    OMP_NUM_THREADS=1 python benchmarks/bench_working_scale.py --images 20 --factor 2
    OMP_NUM_THREADS=1 python benchmarks/bench_working_scale.py --scene 1800,2400 \
        --plot docs/images/working_scale.png
    OMP_NUM_THREADS=1 python benchmarks/bench_working_scale.py --scene 1926,2886 --end-to-end

``--end-to-end`` times the ``imgcut segment`` command itself on the scene saved as a PNG, with
and without ``--working-pixels 0`` (wall seconds, peak resident memory of the command).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "bsds500"

_CHILD = r"""
import json, resource, sys, time
import numpy as np
import scipy.io as sio
from PIL import Image
from imgcut.hierarchy import image_hierarchy
from imgcut.metrics import region_scores
from imgcut.presets import get_preset
mode, factor, root = sys.argv[1], int(sys.argv[2]), sys.argv[3]
ids = json.loads(sys.argv[4])
preset = get_preset("photo", working_pixels=0) if mode == "full" else get_preset("photo")
levels = list(preset.level_sweep)
rows, cpu = [], []
for iid in ids:
    im = Image.open(f"{root}/images/{iid}.jpg")
    gt = sio.loadmat(f"{root}/groundTruth/{iid}.mat", simplify_cells=True)["groundTruth"]
    gt = [gt] if isinstance(gt, dict) else list(gt)
    segs = [g["Segmentation"].astype(np.int32) for g in gt]
    if mode != "native":
        im = im.resize((im.width * factor, im.height * factor), Image.BICUBIC)
        segs = [np.kron(s, np.ones((factor, factor), dtype=np.int32)) for s in segs]
    img = np.asarray(im)
    c0 = time.process_time()
    h = image_hierarchy(img, preset=preset, seed=0)
    cpu.append(time.process_time() - c0)
    per = []
    for t in [preset.default_level] + levels:
        s = region_scores(h.labels_at(t), segs)
        per.append((float(s.covering), float(s.pri), float(s.voi.total)))
    rows.append(per)
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
print(json.dumps({"rows": rows, "cpu": cpu, "peak_mb": peak, "levels": levels,
                  "shape": list(img.shape[:2])}))
"""


_SCENE_CHILD = r"""
import json, resource, sys, time
import numpy as np
sys.path.insert(0, sys.argv[4])
from make_sample_images import make_scene
from imgcut.hierarchy import image_hierarchy
from imgcut.presets import get_preset
mode, h, w = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
img = make_scene(shape=(h, w))
preset = get_preset("photo", working_pixels=0) if mode == "full" else get_preset("photo")
c0 = time.process_time()
tree = image_hierarchy(img, preset=preset, seed=0)
labels = tree.labels_at()
cpu = time.process_time() - c0
np.save(sys.argv[5], labels)
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
print(json.dumps({"cpu": cpu, "peak_mb": peak, "regions": int(labels.max())}))
"""


_COMMAND_CHILD = r"""
import json, resource, subprocess, sys, time
t0 = time.perf_counter()
done = subprocess.run(sys.argv[1:], capture_output=True, text=True)
wall = time.perf_counter() - t0
peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
print(json.dumps({"rc": done.returncode, "wall": wall, "peak_mb": peak, "err": done.stderr[-500:]}))
"""


def _end_to_end(shape: tuple[int, int]) -> None:
    """The ``imgcut segment`` command on the scene saved as PNG: wall time and peak memory.

    Each mode runs in a fresh wrapper process, so its peak resident memory is that of the one
    command it started (``RUSAGE_CHILDREN``); the command is the installed ``imgcut`` entry
    point, with its own process settings, reading, segmenting, drawing and writing.
    """
    import shutil
    import tempfile

    from PIL import Image

    root = Path(__file__).resolve().parents[1]
    sys.path.insert(0, str(root / "scripts"))
    from make_sample_images import make_scene

    exe = shutil.which("imgcut")
    if exe is None:
        raise SystemExit("the imgcut command is not installed (pip install -e .)")
    with tempfile.TemporaryDirectory() as tmp:
        image = Path(tmp) / "scene.png"
        Image.fromarray(make_scene(shape=shape)).save(image)
        for mode, extra in (("working", []), ("full", ["--working-pixels", "0"])):
            cmd = [exe, "segment", str(image), "--out", str(Path(tmp) / mode), "-q", *extra]
            out = subprocess.run(
                [sys.executable, "-c", _COMMAND_CHILD, *cmd], capture_output=True, text=True
            )
            r = json.loads(out.stdout.strip().splitlines()[-1])
            if r["rc"]:
                raise SystemExit(f"imgcut segment ({mode}) failed: {r['err']}")
            record = json.loads((Path(tmp) / mode / "scene.json").read_text())
            print(
                f"imgcut segment, {mode:8s} {shape[0]}x{shape[1]}: "
                f"{record['segmentation']['n_regions']} regions, {r['wall']:.1f} s wall, "
                f"peak {r['peak_mb']:.0f} MB",
                flush=True,
            )


def _scene(shape: tuple[int, int], plot: str | None) -> None:
    """Both modes on the synthetic scene at ``shape``: time, memory, regions, picture."""
    import tempfile

    root = Path(__file__).resolve().parents[1]
    found = {}
    with tempfile.TemporaryDirectory() as tmp:
        for mode in ("working", "full"):
            path = Path(tmp) / f"{mode}.npy"
            out = subprocess.run(
                [
                    sys.executable,
                    "-c",
                    _SCENE_CHILD,
                    mode,
                    str(shape[0]),
                    str(shape[1]),
                    str(root / "scripts"),
                    str(path),
                ],
                capture_output=True,
                text=True,
            )
            if out.returncode:
                raise SystemExit(f"mode {mode} failed:\n{out.stderr[-2000:]}")
            found[mode] = json.loads(out.stdout.strip().splitlines()[-1])
            found[mode]["labels"] = np.load(path)
            r = found[mode]
            print(
                f"{mode:8s} {shape[0]}x{shape[1]}: {r['regions']} regions, "
                f"{r['cpu']:.1f} s CPU, peak {r['peak_mb']:.0f} MB",
                flush=True,
            )
    if plot:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        sys.path.insert(0, str(root / "scripts"))
        from make_sample_images import make_scene

        from imgcut.export import render_overlay

        img = make_scene(shape=shape)
        fig, axes = plt.subplots(1, 2, figsize=(12, 4.8))
        for ax, mode, title in zip(
            axes, ("full", "working"), ("full resolution", "working size (default)"), strict=True
        ):
            r = found[mode]
            ax.imshow(render_overlay(img, r["labels"]))
            ax.set_title(
                f"{title}: {r['regions']} regions, {r['cpu']:.0f} s CPU, "
                f"{r['peak_mb'] / 1024:.1f} GB",
                fontsize=10,
            )
            ax.set_axis_off()
        fig.suptitle(
            f"photo preset on a {shape[0]} × {shape[1]} synthetic scene "
            "(textures of 6–8 px periods), default level",
            fontsize=11,
        )
        fig.tight_layout()
        fig.savefig(plot, dpi=80)
        print(f"wrote {plot}")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--images", type=int, default=20, help="train images (every k-th id)")
    ap.add_argument("--factor", type=int, default=2, help="integer enlargement factor")
    ap.add_argument("--modes", default="native,working,full")
    ap.add_argument("--out", help="write the results as JSON here")
    ap.add_argument("--scene", help="H,W: the synthetic scene at this size instead of BSDS")
    ap.add_argument("--plot", help="with --scene: write the two overlays to this PNG")
    ap.add_argument(
        "--end-to-end",
        action="store_true",
        help="with --scene: time the imgcut segment command itself (wall, peak memory)",
    )
    args = ap.parse_args(argv)
    if args.scene:
        h, w = (int(v) for v in args.scene.split(","))
        if args.end_to_end:
            _end_to_end((h, w))
        else:
            _scene((h, w), args.plot)
        return
    root = DATA / "train"
    if not root.exists():
        raise SystemExit(f"BSDS500 train not found at {root}")
    ids = sorted(p.stem for p in (root / "images").glob("*.jpg"))
    ids = ids[:: max(1, len(ids) // args.images)][: args.images]
    results = {}
    for mode in args.modes.split(","):
        out = subprocess.run(
            [sys.executable, "-c", _CHILD, mode, str(args.factor), str(root), json.dumps(ids)],
            capture_output=True,
            text=True,
        )
        if out.returncode:
            raise SystemExit(f"mode {mode} failed:\n{out.stderr[-2000:]}")
        r = json.loads(out.stdout.strip().splitlines()[-1])
        a = np.array(r["rows"])  # images, 1 + levels, (covering, pri, voi)
        mean = a.mean(0)
        sweep = mean[1:]
        results[mode] = {
            "shape": r["shape"],
            "default_level": {"covering": mean[0, 0], "pri": mean[0, 1], "voi": mean[0, 2]},
            "ods": {
                "covering": float(sweep[:, 0].max()),
                "pri": float(sweep[:, 1].max()),
                "voi": float(sweep[:, 2].min()),
            },
            "cpu_s_median": float(np.median(r["cpu"])),
            "peak_mb": r["peak_mb"],
        }
        d, o = results[mode]["default_level"], results[mode]["ods"]
        print(
            f"{mode:8s} {r['shape'][0]}x{r['shape'][1]}  default level: covering "
            f"{d['covering']:.3f} PRI {d['pri']:.3f} VoI {d['voi']:.3f} | ODS: covering "
            f"{o['covering']:.3f} PRI {o['pri']:.3f} VoI {o['voi']:.3f} | "
            f"{results[mode]['cpu_s_median']:.2f} s CPU/image, peak {r['peak_mb']:.0f} MB",
            flush=True,
        )
    if {"working", "full"} <= set(results):
        print(
            "working / full: time "
            f"{results['working']['cpu_s_median'] / results['full']['cpu_s_median']:.2f}x, "
            f"peak memory {results['working']['peak_mb'] / results['full']['peak_mb']:.2f}x"
        )
    if args.out:
        Path(args.out).write_text(json.dumps(results, indent=1, default=float))


if __name__ == "__main__":
    main()
