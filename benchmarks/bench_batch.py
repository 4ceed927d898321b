"""Batch throughput and memory: images per minute with 1 and 2 local workers.

A batch of at least 40 fields of 520×696 16-bit images is segmented with ``--workers 1`` and
``--workers 2``; the table gives images per minute, the speed-up against one worker measured in
the same run, the peak resident memory of each worker process, and how busy the workers' CPUs
were (child CPU time / (wall time × workers)), which shows how much other load interfered.
Targets (issue 4): ≥ 1.8× the one-worker throughput with 2 workers, < 1.5 GB per worker.

Inputs, written to a temporary folder that is deleted afterwards (nothing is copied into the
repository):

- ``synthetic`` (default): fluorescence fields of nuclei from our own generator
  (``scripts/make_sample_images.py``), 520×696 uint16, seeded;
- ``bbbc039``: the shared BBBC039 fields (``../shared/data/bbbc039/images``) by symbolic link,
  the first ones linked twice under other names when fewer than ``--images`` exist.

Run from the repository root::

    python benchmarks/bench_batch.py                       # 40 synthetic fields, objects mode
    python benchmarks/bench_batch.py --source bbbc039 --rounds 2
    python benchmarks/bench_batch.py --mode regions -k 4 --radius 2

Rounds alternate the order (1, 2 workers, then 2, 1, ...) so that drifting background load
does not favour one side; the table reports each run and the ratio of the summed throughputs.
"""

from __future__ import annotations

import argparse
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SHARED = ROOT.parent / "shared" / "data" / "bbbc039" / "images"
SHAPE = (520, 696)


def make_inputs(folder: Path, n: int, source: str, shape: tuple[int, int] = SHAPE) -> str:
    """Fill `folder` with `n` fields; return a description of what was used."""
    folder.mkdir(parents=True, exist_ok=True)
    if source == "bbbc039":
        files = sorted(SHARED.glob("*.tif"))
        if not files:
            raise SystemExit(f"no BBBC039 images found in {SHARED}")
        for i in range(n):
            target = files[i % len(files)]
            (folder / f"field{i:03d}_{target.stem[:20]}.tif").symlink_to(target)
        return f"{n} BBBC039 fields by link ({len(files)} distinct)"
    import tifffile

    sys.path.insert(0, str(ROOT / "scripts"))
    from make_sample_images import make_nuclei

    for i in range(n):
        image, _ = make_nuclei(seed=1000 + i, shape=shape, n=max(4, shape[0] * shape[1] // 6000))
        plate = folder / f"row{i // 10}"  # a small tree, mirrored by the batch
        plate.mkdir(exist_ok=True)
        tifffile.imwrite(plate / f"field{i:03d}.tif", image)
    return f"{n} synthetic nuclei fields {shape[0]}×{shape[1]} uint16 (make_nuclei, seeds 1000+)"


def run_once(src: Path, out: Path, options: object, workers: int) -> dict[str, float]:
    """One batch with `workers` processes into a fresh folder; measured numbers."""
    from imgcut.batch import run_batch

    load_before = os.getloadavg()[0]
    children_before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    report = run_batch(src, out, options, workers=workers, force=True, gallery=False)
    wall = time.perf_counter() - start
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (children.ru_utime - children_before.ru_utime) + (
        children.ru_stime - children_before.ru_stime
    )
    done = report.count("done")
    if report.count("failed"):
        first = next(r for r in report.results if r.status == "failed")
        print(f"  warning: {report.count('failed')} failed, e.g. {first.path}: {first.error}")
    seconds = sorted(r.seconds for r in report.results if r.status == "done")
    peaks = report.peak_memory_mb_per_worker
    return {
        "workers": workers,
        "images": done,
        "wall": wall,
        "per_minute": 60.0 * done / wall,
        "median_image_s": seconds[len(seconds) // 2] if seconds else float("nan"),
        "peak_mb": max(peaks.values()) if peaks else float("nan"),
        "n_processes": len(peaks),
        "cpu_busy": cpu / (wall * workers),
        "cpu_per_image": cpu / max(done, 1),
        "load": (load_before + os.getloadavg()[0]) / 2,
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--images", type=int, default=40, help="fields in the batch (≥ 40)")
    parser.add_argument("--source", choices=("synthetic", "bbbc039"), default="synthetic")
    parser.add_argument("--rounds", type=int, default=1, help="alternating 1/2-worker rounds")
    parser.add_argument("--mode", default="objects", help="segment mode (objects, regions)")
    parser.add_argument("-k", "--regions", type=int, default=8, help="regions (regions mode)")
    parser.add_argument("--radius", type=float, default=5.0, help="graph radius (regions mode)")
    parser.add_argument(
        "--shape",
        type=int,
        nargs=2,
        default=SHAPE,
        metavar=("H", "W"),
        help="synthetic field size (smoke tests only; the target is 520 696)",
    )
    args = parser.parse_args(argv)

    from imgcut import runner

    if args.mode not in runner.MODES:
        raise SystemExit(
            f"mode {args.mode!r} is not available in this imgcut (modes: {runner.MODES})"
        )
    options = runner.SegmentOptions(mode=args.mode, n_regions=args.regions, radius=args.radius)
    rows = []
    with tempfile.TemporaryDirectory(prefix="imgcut-bench-batch-") as tmp:
        tmp_path = Path(tmp)
        what = make_inputs(tmp_path / "in", args.images, args.source, tuple(args.shape))
        print(f"inputs: {what}; mode {args.mode}; {os.cpu_count()} CPU cores")
        order = []
        for r in range(args.rounds):
            order += [1, 2] if r % 2 == 0 else [2, 1]
        for i, workers in enumerate(order):
            row = run_once(tmp_path / "in", tmp_path / f"out{i}", options, workers)
            rows.append(row)
            print(
                f"  run {i + 1}/{len(order)}: {workers} worker(s) {row['images']} images in "
                f"{row['wall']:.1f} s (load average {row['load']:.1f})",
                flush=True,
            )

    base = sum(r["per_minute"] for r in rows if r["workers"] == 1) / args.rounds
    print()
    print(
        "| workers | images | wall s | images/min | ratio vs 1 worker | median s/image "
        "| CPU s/image | peak MiB per worker | worker CPU busy | load avg |"
    )
    print("|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
    for r in rows:
        print(
            f"| {r['workers']} | {r['images']} | {r['wall']:.1f} | {r['per_minute']:.1f} | "
            f"{r['per_minute'] / base:.2f} | {r['median_image_s']:.2f} | "
            f"{r['cpu_per_image']:.2f} | {r['peak_mb']:.0f} | {100 * r['cpu_busy']:.0f} % | "
            f"{r['load']:.1f} |"
        )
    two = sum(r["per_minute"] for r in rows if r["workers"] == 2) / args.rounds
    cpu1 = sum(r["cpu_per_image"] for r in rows if r["workers"] == 1) / args.rounds
    cpu2 = sum(r["cpu_per_image"] for r in rows if r["workers"] == 2) / args.rounds
    peak = max(r["peak_mb"] for r in rows)
    print()
    print(
        f"speed-up with 2 workers: {two / base:.2f}x wall clock (target >= 1.8x); "
        f"largest worker peak: {peak:.0f} MiB (target < 1536 MiB)"
    )
    # With a free core per worker, wall time per image is its CPU time, so this is the speed-up
    # two otherwise idle cores would give; unlike the wall clock it ignores other programs.
    print(
        f"CPU cost per image, 1 vs 2 workers: {cpu1:.2f} s vs {cpu2:.2f} s -> speed-up on two "
        f"idle cores about {2 * cpu1 / cpu2:.2f}x"
    )
    busy = min(r["cpu_busy"] for r in rows)
    if busy < 0.8:
        print(
            f"note: in some run the workers were on a CPU only {100 * busy:.0f} % of the time: "
            "other programs were competing, so the wall-clock ratio mostly measures them"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
