"""Write the demo images in ``sample_images/`` (our own synthetic scenes, seeded).

``scene.png``  240×320 RGB: textured shapes (disc, rectangle, triangle, ellipse) on a
               graded sky above striped ground; each part differs from its neighbours
               in colour and texture, so a good segmentation has about 6–8 regions.
``nuclei.tif`` 256×256 uint16, 12 significant bits: a fluorescence field of 24 nuclei,
               several touching, with chromatin texture, optical blur, uneven background,
               photon (Poisson) and camera read noise.

Run from the repository root::

    python scripts/make_sample_images.py            # writes sample_images/
    python scripts/make_sample_images.py --check    # verifies the committed files

The generators are importable (``make_scene``, ``make_nuclei``) and deterministic for a seed;
``make_nuclei`` also returns the true nucleus labels for tests.
"""

from __future__ import annotations

import argparse
import io
import sys
from pathlib import Path

import numpy as np
from scipy import ndimage as ndi

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "sample_images"
SEED = 20001  # fixed: the committed files are made with it


def make_scene(seed: int = SEED, shape: tuple[int, int] = (240, 320)) -> np.ndarray:
    """A colour scene of textured shapes, (H, W, 3) uint8."""
    rng = np.random.default_rng(seed)
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    y, x = rr / h, cc / w  # unit coordinates

    # sky: vertical gradient, fine grain
    top, bottom = np.array([70.0, 120.0, 200.0]), np.array([170.0, 200.0, 230.0])
    img = top + (bottom - top) * y[..., None]
    img += rng.normal(0, 4, (h, w, 1))

    # ground: lower 28 %, warm brown with horizontal stripes of 6 px period
    ground = y > 0.72 + 0.03 * np.sin(2 * np.pi * x * 1.5)
    stripes = 14 * np.sign(np.sin(2 * np.pi * rr / 6.0))
    img[ground] = np.array([140.0, 100.0, 60.0]) + stripes[ground][:, None]

    def paint(mask: np.ndarray, colour: tuple[float, float, float], texture: np.ndarray) -> None:
        img[mask] = np.asarray(colour) + texture[mask][:, None]

    # disc: orange, speckle
    disc = (x - 0.22) ** 2 * (w / h) ** 2 + (y - 0.38) ** 2 < 0.19**2
    paint(disc, (235, 140, 40), rng.normal(0, 12, (h, w)))
    # rectangle: green, checkerboard of 8 px squares
    rect = (np.abs(x - 0.56) < 0.13) & (np.abs(y - 0.50) < 0.24)
    checker = 18 * (((rr // 8) + (cc // 8)) % 2 * 2 - 1)
    paint(rect, (60, 160, 70), checker)
    # triangle: purple, diagonal stripes of 7 px period
    apex, left, right = (0.12, 0.84), (0.62, 0.70), (0.62, 0.98)

    def side(p: tuple[float, float], q: tuple[float, float]) -> np.ndarray:
        return (q[1] - p[1]) * (y - p[0]) - (q[0] - p[0]) * (x - p[1])

    s1, s2, s3 = side(apex, left), side(left, right), side(right, apex)
    tri = ((s1 >= 0) & (s2 >= 0) & (s3 >= 0)) | ((s1 <= 0) & (s2 <= 0) & (s3 <= 0))
    diag = 16 * np.sign(np.sin(2 * np.pi * (rr + cc) / 7.0))
    paint(tri, (130, 60, 150), diag)
    # ellipse on the ground: teal, blotchy (blurred noise)
    ell = ((x - 0.40) / 0.16) ** 2 + ((y - 0.86) / 0.09) ** 2 < 1.0
    blotch = ndi.gaussian_filter(rng.normal(0, 1, (h, w)), 2.0)
    blotch *= 20 / blotch.std()
    paint(ell, (40, 170, 170), blotch)

    img += rng.normal(0, 3, (h, w, 3))  # sensor noise everywhere
    return np.clip(np.round(img), 0, 255).astype(np.uint8)


def make_nuclei(
    seed: int = SEED, shape: tuple[int, int] = (256, 256), n: int = 24
) -> tuple[np.ndarray, np.ndarray]:
    """A 16-bit fluorescence field of nuclei and its true labels.

    Returns
    -------
    image : (H, W) uint16, values within 0..4095 (a 12-bit camera in a 16-bit file)
    truth : (H, W) int32, 0 background, nuclei 1..n (overlaps go to the later nucleus)
    """
    rng = np.random.default_rng(seed)
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    truth = np.zeros(shape, np.int32)
    signal = np.zeros(shape)
    centres: list[tuple[float, float, float]] = []
    k = 0
    attempts = 0
    while k < n and attempts < 5000:
        attempts += 1
        a = rng.uniform(9, 15)  # semi-axes in pixels
        b = a * rng.uniform(0.65, 0.95)
        if centres and k % 3 == 1:
            # touching pair: place next to the previous nucleus
            pr, pc, pa = centres[-1]
            ang = rng.uniform(0, 2 * np.pi)
            dist = (pa + a) * 0.85
            r0, c0 = pr + dist * np.sin(ang), pc + dist * np.cos(ang)
        else:
            r0, c0 = rng.uniform(a + 4, h - a - 4), rng.uniform(a + 4, w - a - 4)
        if not (a + 2 < r0 < h - a - 2 and a + 2 < c0 < w - a - 2):
            continue
        # keep a nucleus from swallowing another: centres at least 1.3 radii apart
        if any(np.hypot(r0 - pr, c0 - pc) < 1.3 * max(a, pa) for pr, pc, pa in centres):
            continue
        t = rng.uniform(0, np.pi)
        dr, dc = rr - r0, cc - c0
        u = (dr * np.cos(t) + dc * np.sin(t)) / a
        v = (-dr * np.sin(t) + dc * np.cos(t)) / b
        inside = u**2 + v**2 < 1.0
        k += 1
        truth[inside] = k
        brightness = rng.uniform(1400, 3000)
        signal[inside] = brightness * (1.0 - 0.25 * (u[inside] ** 2 + v[inside] ** 2))
        centres.append((r0, c0, a))
    chromatin = 1.0 + 0.18 * ndi.gaussian_filter(rng.normal(0, 1, shape), 1.2) / 0.25
    signal = ndi.gaussian_filter(signal * np.clip(chromatin, 0.5, 1.5), 1.5)  # optical blur
    background = 180 + 60 * (rr / h) + 40 * (cc / w)  # uneven illumination
    photons = rng.poisson(np.clip(signal + background, 0, None))
    image = photons + rng.normal(0, 12, shape)  # camera read noise
    return np.clip(np.round(image), 0, 4095).astype(np.uint16), truth


def _png_bytes(image: np.ndarray) -> bytes:
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(image).save(buf, format="PNG", compress_level=9)
    return buf.getvalue()


def _tiff_bytes(image: np.ndarray) -> bytes:
    import tifffile

    buf = io.BytesIO()
    tifffile.imwrite(
        buf,
        image,
        photometric="minisblack",
        compression="zlib",
        metadata=None,
        software="imgcut scripts/make_sample_images.py",
    )
    return buf.getvalue()


def sample_files(seed: int = SEED) -> dict[str, bytes]:
    """File name → bytes of every sample image."""
    return {
        "scene.png": _png_bytes(make_scene(seed)),
        "nuclei.tif": _tiff_bytes(make_nuclei(seed)[0]),
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=OUT, help="folder to write (sample_images/)")
    parser.add_argument(
        "--check",
        action="store_true",
        help="verify that the files in --out equal freshly generated ones",
    )
    args = parser.parse_args(argv)
    files = sample_files()
    if args.check:
        stale = [
            n
            for n, d in files.items()
            if not (args.out / n).is_file() or (args.out / n).read_bytes() != d
        ]
        for name in stale:
            print(f"{args.out / name}: differs from the generator output", file=sys.stderr)
        return 1 if stale else 0
    args.out.mkdir(parents=True, exist_ok=True)
    for name, data in files.items():
        (args.out / name).write_bytes(data)
        print(f"{args.out / name}: {len(data) / 1024:.0f} KiB")
    return 0


if __name__ == "__main__":
    sys.exit(main())
