"""Picture of the hand-weighted and the learned boundary strength on the project's sample scene.

Writes ``docs/images/boundary_model.png``: the image, the strength of the hand-weighted cue
combination (``get_preset("photo", boundary_model="")``) and the learned strength of the
``photo`` preset (:mod:`imgcut.boundary_model`), both on the scale the hierarchy uses (before
the per-image contrast normalisation).  The scene is our own synthetic image
(``sample_images/scene.png``), not benchmark data.

Usage::

    python benchmarks/plot_boundary_model.py --out docs/images/boundary_model.png
"""

from __future__ import annotations

import argparse
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402

from imgcut.boundary_model import apply_boundary_model, load_boundary_model  # noqa: E402
from imgcut.cues import boundary_strength, combine_cues, local_cues  # noqa: E402
from imgcut.presets import get_preset  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--image", default=str(ROOT / "sample_images" / "scene.png"))
    ap.add_argument("--out", default=str(ROOT / "docs" / "images" / "boundary_model.png"))
    args = ap.parse_args(argv)
    img = np.asarray(Image.open(args.image).convert("RGB"))
    p = get_preset("photo")
    cues = local_cues(img, seed=np.random.default_rng(0), **p.cue_options())
    hand = combine_cues(cues, p.weights())
    learned = apply_boundary_model(load_boundary_model(p.boundary_model), cues, hand)
    fig, axes = plt.subplots(1, 3, figsize=(12, 3.4))
    panels = (
        (img, "image (sample_images/scene.png)"),
        (boundary_strength(hand), "hand-weighted strength"),
        (boundary_strength(learned), "learned strength (photo preset)"),
    )
    for ax, (data, title) in zip(axes, panels, strict=True):
        if data.ndim == 2:
            ax.imshow(data, cmap="magma", vmin=0, vmax=1)
        else:
            ax.imshow(data)
        ax.set_title(title, fontsize=10)
        ax.set_axis_off()
    fig.tight_layout()
    fig.savefig(args.out, dpi=90)
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
