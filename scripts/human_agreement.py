"""Human agreement on a BSDS500 split: each human scored against the others (leave one out).

Usage: python scripts/human_agreement.py [SPLIT_DIR] [--limit N]
SPLIT_DIR defaults to ../shared/data/bsds500/val beside the checkout. Prints a Markdown
table for docs/metrics.md.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from imgcut.evaluation import human_agreement
from imgcut.groundtruth import read_bsds_mat

DEFAULT = Path(__file__).resolve().parents[2] / "shared" / "data" / "bsds500" / "val"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("split_dir", nargs="?", type=Path, default=DEFAULT)
    ap.add_argument("--limit", type=int, default=None)
    args = ap.parse_args()
    files = sorted((args.split_dir / "groundTruth").glob("*.mat"))[: args.limit]
    t0 = time.perf_counter()
    a = human_agreement(read_bsds_mat(f) for f in files)
    dt = time.perf_counter() - t0
    print(f"{a.n_images} images, {a.n_comparisons} held-out humans, {dt:.0f} s")
    print("| measure | imgcut (leave one out) |")
    print("|---|---|")
    print(f"| covering | {a.covering:.3f} |")
    print(f"| PRI | {a.pri:.3f} |")
    print(
        f"| VoI (bits) | {a.voi:.3f} (false splits {a.voi_false_splits:.3f}, "
        f"false merges {a.voi_false_merges:.3f}) |"
    )
    print(
        f"| boundary P / R / F | {a.boundary_precision:.3f} / {a.boundary_recall:.3f} / "
        f"{a.boundary_f:.3f} |"
    )


if __name__ == "__main__":
    main()
