"""Region hierarchies of large photographs at a working size, mapped back to full resolution.

The cue scales and merge score of the ``"photo"`` preset were fitted on BSDS500 photographs of
about 0.15 megapixels.  On a camera photograph of several megapixels the same pixel scales see
only fine texture, and the cues, watershed and merging cost time and memory in proportion to
the pixels.  :func:`imgcut.hierarchy.image_hierarchy` therefore builds the hierarchy of a
photograph larger than the preset's ``working_pixels`` on an anti-aliased copy of about that
many pixels, and this module maps the result back: the base regions are upsampled, their
borders are moved onto the strongest full-resolution colour edge within the resampling
uncertainty (a marker-controlled watershed), and the hierarchy's levels are kept, so the
segmentation at any level is the working-size one with full-resolution borders.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy import ndimage

from .hierarchy import RegionHierarchy, _border_pairs

__all__ = ["working_scale", "downsample_image", "edge_guide", "upsample_hierarchy"]

#: Shortest side, in pixels, of a working-size image (long thin strips are not shrunk below it).
MIN_SIDE = 32


def working_scale(shape: tuple[int, ...], working_pixels: int) -> float:
    """Resampling factor that brings an image to about ``working_pixels`` pixels (≤ 1).

    Parameters
    ----------
    shape : tuple of int
        Image shape ``(H, W)`` or ``(H, W, C)``.
    working_pixels : int
        Target pixel count; 0 (or any value ≥ ``H · W``) means no resampling.

    Returns
    -------
    float
        ``s = sqrt(working_pixels / (H · W))`` when the image is larger, else 1.0; never so
        small that the shorter side drops below :data:`MIN_SIDE` pixels.

    Raises
    ------
    ValueError
        If ``working_pixels`` is negative.

    Examples
    --------
    >>> round(working_scale((2000, 3000, 3), 150_000), 4)
    0.1581
    >>> working_scale((321, 481), 200_000)
    1.0
    """
    if working_pixels < 0:
        raise ValueError(f"working_pixels must be >= 0; got {working_pixels}")
    n = int(shape[0]) * int(shape[1])
    if working_pixels == 0 or n <= working_pixels:
        return 1.0
    # never thinner than MIN_SIDE pixels: a long strip keeps (more of) its resolution
    floor = min(1.0, MIN_SIDE / max(1, min(int(shape[0]), int(shape[1]))))
    return float(max(np.sqrt(working_pixels / n), floor))


def downsample_image(image: np.ndarray, scale: float) -> np.ndarray:
    """Anti-aliased copy of an image at ``scale`` (< 1) of its size, in the same value range.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, C)
        Any real image.
    scale : float
        Factor in (0, 1].

    Returns
    -------
    ndarray
        Shape ``(round(H · scale), round(W · scale)[, C])``, at least 1 × 1.  Integer images
        stay integer (rounded and clipped to the dtype), so the cues read them exactly as the
        original; float images stay float64.

    Raises
    ------
    ValueError
        If ``scale`` is not in (0, 1].

    Notes
    -----
    Gaussian pre-filtering (σ = (1/s − 1)/2, scikit-image's default for ``anti_aliasing``)
    followed by linear interpolation (:func:`skimage.transform.rescale`).

    Examples
    --------
    >>> import numpy as np
    >>> img = np.full((40, 60, 3), 200, dtype=np.uint8)
    >>> small = downsample_image(img, 0.5)
    >>> small.shape, small.dtype, int(small.max())
    ((20, 30, 3), dtype('uint8'), 200)
    """
    from skimage.transform import rescale

    if not (0 < scale <= 1):
        raise ValueError(f"scale must be in (0, 1]; got {scale}")
    img = np.asarray(image)
    if scale == 1:
        return img
    channel_axis = -1 if img.ndim == 3 else None
    out = rescale(
        img.astype(np.float64),
        scale,
        order=1,
        anti_aliasing=True,
        channel_axis=channel_axis,
        preserve_range=True,
    )
    if np.issubdtype(img.dtype, np.integer):
        info = np.iinfo(img.dtype)
        out = np.clip(np.round(out), info.min, info.max).astype(img.dtype)
    return out


def edge_guide(image: np.ndarray) -> np.ndarray:
    """Full-resolution edge map that upsampled borders are snapped to.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, C)
        Any real image.

    Returns
    -------
    ndarray, shape (H, W), float64
        Euclidean norm over channels of the Sobel gradient magnitude, every channel first
        scaled to its 1st–99th percentile range (so no channel dominates by its units), then
        smoothed with a Gaussian of σ = 1 pixel.

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((10, 10)); img[:, 5:] = 1.0
    >>> g = edge_guide(img)
    >>> int(np.argmax(g[5]))
    4
    """
    from skimage.filters import sobel

    f = np.asarray(image, dtype=np.float64)
    chans = [f] if f.ndim == 2 else [f[..., c] for c in range(f.shape[2])]
    total = np.zeros(chans[0].shape, dtype=np.float64)
    for ch in chans:
        step = max(1, int(np.sqrt(ch.size / 250_000)))  # a regular sample is plenty
        lo, hi = np.percentile(ch[::step, ::step], [1.0, 99.0])
        span = hi - lo if hi > lo else max(float(ch.max() - ch.min()), 1.0)
        total += sobel(ch / span) ** 2
    return ndimage.gaussian_filter(np.sqrt(total), 1.0)


def _join_levels(n: int, edges: np.ndarray, levels: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """Level at which each pair of base regions first lies in one region (the ultrametric).

    Kruskal's replay of the merges in level order with a union-find over the ``n`` base
    regions (a loop over merges, not pixels); every component keeps its pending pairs, and when
    two components join, the pairs of the smaller one that now have both ends inside are
    answered with the merge's level (smaller-into-larger, so each pair moves O(log q) times).
    Pairs never joined get ``inf``.
    """
    from scipy.cluster.hierarchy import DisjointSet

    out = np.full(len(pairs), np.inf)
    if len(pairs) == 0:
        return out
    sets = DisjointSet(range(n))
    pending: dict[int, list[int]] = {}
    for q, (a, b) in enumerate(pairs.tolist()):
        pending.setdefault(a, []).append(q)
        pending.setdefault(b, []).append(q)
    pa, pb = pairs[:, 0].tolist(), pairs[:, 1].tolist()
    for k in np.argsort(levels, kind="stable").tolist():
        a, b = sets[int(edges[k, 0])], sets[int(edges[k, 1])]
        if not sets.merge(a, b):
            continue
        root = sets[a]
        la, lb = pending.pop(a, []), pending.pop(b, [])
        if len(la) < len(lb):
            la, lb = lb, la
        level = float(levels[k])
        for q in lb:  # the smaller list: answered if both ends are now in one set
            if out[q] == np.inf and sets.connected(pa[q], pb[q]):
                out[q] = level
            elif out[q] == np.inf:
                la.append(q)
        pending[root] = la
    return out


def _kruskal(n: int, edges: np.ndarray, levels: np.ndarray):
    """Levels at which the edges, replayed in level order, join two sets (Kruskal)."""
    from scipy.cluster.hierarchy import DisjointSet

    sets = DisjointSet(range(n))
    order = np.argsort(levels, kind="stable").tolist()
    joins = [float(levels[k]) for k in order if sets.merge(int(edges[k, 0]), int(edges[k, 1]))]
    return np.asarray(joins, dtype=np.float64)


def _drop_empty_regions(h: RegionHierarchy) -> RegionHierarchy:
    """Contract base regions without pixels into the region they join first.

    A region without pixels only connects its neighbours; contracting it along its lowest
    edge (a group of empty regions along the group's lowest outside edge) leaves the pixels of
    every segmentation, at every level, unchanged, and makes the region count exact again.
    """
    n = max(int(h.base_labels.max()), int(h.edges.max()) + 1 if len(h.edges) else 0)
    present = np.zeros(n, dtype=bool)
    present[h.base_labels.ravel() - 1] = True
    if present.all():
        return h
    edges, levels, strength = h.edges, h.edge_levels, h.edge_strength
    rep = np.arange(n)  # representative of every region after contraction
    while True:
        while True:  # resolve chains (the contraction graph has no cycles, see below)
            nxt = rep[rep]
            if np.array_equal(nxt, rep):
                break
            rep = nxt
        a, b = rep[edges[:, 0]], rep[edges[:, 1]]
        cross = np.flatnonzero(a != b)
        order = cross[np.argsort(levels[cross], kind="stable")]  # a strict order of the edges
        ga, gb = a[order], b[order]
        ea, eb = ~present[ga], ~present[gb]
        if not (ea.any() or eb.any()):
            break
        rank = np.arange(len(order))
        group = np.concatenate([ga[ea], gb[eb]])
        other = np.concatenate([gb[ea], ga[eb]])
        first = np.lexsort((np.concatenate([rank[ea], rank[eb]]), group))
        group, other = group[first], other[first]
        head = np.ones(len(group), dtype=bool)
        head[1:] = group[1:] != group[:-1]
        g, p = group[head], other[head]  # every empty group and the end of its lowest edge
        # Under a strict edge order each group's lowest edge forms a forest except for pairs
        # that chose the same edge (Boruvka's argument); of such a pair only one contracts.
        best = np.full(n, -1)
        best[g] = p
        mutual = best[p] == g
        go = ~mutual | (g > p)
        rep[g[go]] = p[go]
    a, b = rep[edges[:, 0]], rep[edges[:, 1]]
    keep = a != b
    new_id = np.cumsum(present) - 1  # compact numbering of the regions that keep pixels
    lo, hi = np.minimum(a[keep], b[keep]), np.maximum(a[keep], b[keep])
    key = new_id[lo].astype(np.int64) * n + new_id[hi]
    levels, strength = levels[keep], strength[keep]
    order = np.lexsort((levels, key))  # parallel edges: keep the lowest (the ultrametric)
    first = np.ones(len(order), dtype=bool)
    first[1:] = key[order][1:] != key[order][:-1]
    sel = order[first]
    edges = np.stack([key[sel] // n, key[sel] % n], axis=1).astype(h.edges.dtype)
    levels, strength = levels[sel], strength[sel]
    base = (new_id[rep[h.base_labels - 1]] + 1).astype(np.int32)
    merges = _kruskal(int(present.sum()), edges, levels)
    return replace(
        h,
        base_labels=base,
        edges=edges,
        edge_levels=levels,
        edge_strength=strength,
        merge_levels=merges,
    )


def upsample_hierarchy(
    h: RegionHierarchy, shape: tuple[int, int], *, guide: np.ndarray | None = None
) -> RegionHierarchy:
    """A hierarchy built on a downsampled image, on the full-resolution pixel grid.

    Parameters
    ----------
    h : RegionHierarchy
        Hierarchy of the downsampled image.
    shape : tuple of int
        Full-resolution ``(H, W)``, at least the size of ``h.base_labels``.
    guide : ndarray, shape (H, W), optional
        Full-resolution edge strength (:func:`edge_guide`).  When given, every border is
        re-drawn on its crest within the band that the resampling leaves uncertain; without
        it the base regions are only upsampled (nearest neighbour, staircase borders).

    Returns
    -------
    RegionHierarchy
        The base regions of ``h`` (less those the band swallows, see Notes), the same
        default level; ``base_labels`` at full
        resolution; ``boundary`` upsampled linearly.  Pairs of base regions that become
        adjacent only at full resolution get the level at which they join in ``h``, so the
        regions at every level are those of ``h`` with re-drawn borders, and
        :meth:`~imgcut.hierarchy.RegionHierarchy.ultrametric_map` stays defined.

    Raises
    ------
    ValueError
        If ``shape`` is smaller than the hierarchy's grid or ``guide`` has another shape.

    Notes
    -----
    The band is every pixel within ``r = ⌈1/s⌉`` pixels (chessboard distance) of a pixel of
    another upsampled region, with ``s`` the smaller of the two resampling factors: there the
    working-size border can be off by up to one working pixel.  Outside the band the regions
    are kept; inside, a watershed of ``guide`` from those markers (Beucher & Meyer 1993,
    :func:`skimage.segmentation.watershed`) gives each pixel to the region it is reached from
    without crossing an edge, so borders settle on the strongest local edge.  A base region
    that lies entirely inside the band (thinner than about two working pixels) is flooded by
    its neighbours and keeps no pixels; it is then contracted into the region it joins first
    (its lowest border), which changes no segmentation at any level, because a region without
    pixels only connects its neighbours, and keeps region counts exact.

    References
    ----------
    S. Beucher, F. Meyer, "The morphological approach to segmentation: the watershed
    transformation", in *Mathematical Morphology in Image Processing*, 1993, 433–481.

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.hierarchy import boundary_hierarchy
    >>> e = np.zeros((20, 30)); e[:, 14:16] = 1.0
    >>> h = boundary_hierarchy(e)
    >>> big = upsample_hierarchy(h, (40, 60))
    >>> big.base_labels.shape, big.n_base == h.n_base
    ((40, 60), True)
    """
    from skimage.segmentation import watershed
    from skimage.transform import resize

    small = h.base_labels
    shape = (int(shape[0]), int(shape[1]))
    if shape[0] < small.shape[0] or shape[1] < small.shape[1]:
        raise ValueError(f"shape {shape} is smaller than the hierarchy's grid {small.shape}")
    rows = (np.arange(shape[0]) * small.shape[0]) // shape[0]  # nearest-neighbour upsampling
    cols = (np.arange(shape[1]) * small.shape[1]) // shape[1]
    up = small[np.ix_(rows, cols)]
    if guide is not None:
        guide = np.asarray(guide, dtype=np.float64)
        if guide.shape != shape:
            raise ValueError(f"guide has shape {guide.shape}; expected {shape}")
        s = min(small.shape[0] / shape[0], small.shape[1] / shape[1])
        r = int(np.ceil(1.0 / s))
        size = 2 * r + 1
        band = ndimage.maximum_filter(up, size=size) != ndimage.minimum_filter(up, size=size)
        markers = np.where(band, 0, up)
        if markers.max() > 0:  # flood the band only (plus its rim of markers)
            mask = ndimage.binary_dilation(band, structure=np.ones((3, 3), bool))
            flooded = watershed(guide, markers=markers, mask=mask)
            # a band pixel no marker reaches (none in practice) keeps its upsampled label
            up = np.where(band & (flooded > 0), flooded, up).astype(np.int32)
    up = up.astype(np.int32, copy=False)
    edges, levels, strength = h.edges, h.edge_levels, h.edge_strength
    la, lb = _border_pairs(up)[:2]
    if len(la):
        lo_, hi_ = np.minimum(la, lb) - 1, np.maximum(la, lb) - 1
        n = h.n_base
        keys = np.unique(lo_.astype(np.int64) * n + hi_)
        known = edges[:, 0].astype(np.int64) * n + edges[:, 1]
        new = keys[~np.isin(keys, known)]
        if len(new):
            pairs = np.stack([new // n, new % n], axis=1)
            lev = _join_levels(n, edges, levels, pairs)
            ok = np.isfinite(lev)
            edges = np.concatenate([edges, pairs[ok]])
            levels = np.concatenate([levels, lev[ok]])
            strength = np.concatenate([strength, lev[ok]])  # no border of their own at h
    boundary = None
    if h.boundary is not None:
        boundary = resize(np.asarray(h.boundary, dtype=np.float64), shape, order=1)
    out = replace(
        h,
        base_labels=up,
        edges=edges,
        edge_levels=levels,
        edge_strength=strength,
        boundary=boundary,
    )
    return _drop_empty_regions(out)
