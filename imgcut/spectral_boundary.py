"""Spectral boundary: oriented gradients of Laplacian eigenvectors (Arbelaez et al. 2011).

The local boundary map defines an intervening-contour affinity graph; the first non-trivial
generalised eigenvectors of ``(D − W) y = λ D y`` vary smoothly inside coherent regions and
change across the boundaries that separate large regions.  Their oriented gradients, weighted by
``1/√λ`` so that the vectors of the coarsest partitions count most, form the "spectral"
boundary signal that is added to the local cues ("globalised probability of boundary").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from .cues import _lambda_max
from .features import Features
from .graph import affinity_graph
from .spectral import laplacian_eigenpairs

__all__ = ["SpectralBoundary", "spectral_boundary", "GlobalBoundary", "global_boundary"]


@dataclass(frozen=True)
class SpectralBoundary:
    """Result of :func:`spectral_boundary`.

    Attributes
    ----------
    tensor : ndarray, shape (3, H, W), float32
        ``(Txx, Txy, Tyy)`` of the spectral gradient, scaled so that ``sqrt(nᵀ T n)`` lies in
        [0, 1] (clipped at the ``normalise_percentile`` of the image).
    strength : ndarray, shape (H, W), float64
        Orientation-maximal spectral boundary strength ``sqrt(λ_max(T))`` in [0, 1].
    eigenvalues : ndarray, shape (k,)
        Eigenvalues of the vectors used, ascending (the first is the trivial 0).
    eigenvectors : ndarray, shape (h, w, k)
        The eigenvectors as images on the (possibly downsampled) grid of the graph.
    """

    tensor: np.ndarray
    strength: np.ndarray
    eigenvalues: np.ndarray
    eigenvectors: np.ndarray


def _downsample_max(e: np.ndarray, f: int) -> np.ndarray:
    """Max-pool by ``f`` (keeps one-pixel boundaries visible on the coarse grid)."""
    if f == 1:
        return e
    h, w = e.shape
    hp, wp = -(-h // f) * f, -(-w // f) * f
    pad = np.pad(e, ((0, hp - h), (0, wp - w)), mode="edge")
    return pad.reshape(hp // f, f, wp // f, f).max(axis=(1, 3))


def spectral_boundary(
    boundary: np.ndarray,
    *,
    n_vectors: int = 8,
    radius: float = 3.0,
    sigma_edge: float | None = None,
    downsample: int = 2,
    gradient_sigma: float = 1.0,
    normalise_percentile: float = 99.0,
    solver: str = "auto",
    seed: None | int | np.random.Generator = 0,
) -> SpectralBoundary:
    """Spectral boundary signal from the eigenvectors of an intervening-contour graph.

    Parameters
    ----------
    boundary : ndarray, shape (H, W)
        Local boundary strength in [0, 1] (e.g. :func:`imgcut.cues.boundary_strength`).
    n_vectors : int, default 8
        Number of non-trivial eigenvectors used (``n_vectors + 1`` are computed, the first being
        the trivial constant one).
    radius : float, default 3
        Graph radius in pixels of the (downsampled) grid.
    sigma_edge : float, optional
        σ_E of the intervening-contour weight ``exp(−max E² / σ_E²)``; default: the graph
        module's RMS-edge heuristic.
    downsample : int, default 2
        The graph is built on a grid ``downsample`` times coarser (max-pooled boundary map),
        which cuts the eigensolver cost by about ``downsample²``.
    gradient_sigma : float, default 1.0
        σ (coarse-grid pixels) of the Gaussian-derivative filters applied to the eigenvectors.
    normalise_percentile : float, default 99
        The strength is divided by this percentile of itself and clipped to 1.
    solver : str, default "auto"
        Eigensolver backend of :func:`imgcut.spectral.laplacian_eigenpairs`.
    seed : None, int or numpy.random.Generator, default 0
        Seeds the eigensolver's start block.

    Returns
    -------
    SpectralBoundary

    Raises
    ------
    ValueError
        For a non-2-D or non-finite boundary map or invalid options.

    Notes
    -----
    Arbelaez et al. (2011, eq. (12)) define ``sPb(x, θ) = Σ_k (1/√λ_k) ∇_θ v_k(x)`` with ``∇_θ``
    a Gaussian directional derivative.  Here each eigenvector ``v_k`` (rescaled to unit RMS over
    the pixels) contributes ``(1/λ_k) g_k g_kᵀ`` with ``g_k = ∇(G_σ * v_k)``, so
    ``nᵀ T n = Σ_k (∇_n v_k)² / λ_k``: the same weights, combined in the Euclidean norm rather
    than summed, which keeps the result a steerable 2 × 2 tensor like the local cues
    (:mod:`imgcut.cues`).  The trivial eigenvector is constant and contributes nothing; when the
    graph falls apart, the weight of (near-)zero eigenvalues is capped at that of the smallest
    positive one and pixels on the border between two components get the largest strength
    present (a disconnected graph is the limit of an infinitely strong contour).

    References
    ----------
    P. Arbelaez, M. Maire, C. Fowlkes, J. Malik, "Contour detection and hierarchical image
    segmentation", IEEE TPAMI 33(5):898–916, 2011, §3.2.
    J. Shi, J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8), 2000.

    Examples
    --------
    >>> import numpy as np
    >>> e = np.zeros((40, 60)); e[:, 29:31] = 1.0
    >>> sb = spectral_boundary(e, n_vectors=2, downsample=1)
    >>> bool(sb.strength[:, 28:32].mean() > 5 * sb.strength[:, :20].mean())
    True
    """
    b = np.asarray(boundary, dtype=np.float64)
    if b.ndim != 2 or b.size == 0:
        raise ValueError(f"boundary must have shape (H, W); got {b.shape}")
    if not np.all(np.isfinite(b)):
        raise ValueError("boundary contains NaN or inf")
    if int(n_vectors) < 1:
        raise ValueError(f"n_vectors must be >= 1; got {n_vectors}")
    if int(downsample) < 1:
        raise ValueError(f"downsample must be an integer >= 1; got {downsample}")
    if not 0 < normalise_percentile <= 100:
        raise ValueError(f"normalise_percentile must be in (0, 100]; got {normalise_percentile}")
    h, w = b.shape
    f = int(downsample)
    small = _downsample_max(b, f)
    hs, ws = small.shape
    feats = Features(
        values=np.zeros((hs, ws, 1)),
        edges=small,
        kind="gray",
        low=np.zeros(1),
        high=np.ones(1),
    )
    graph = affinity_graph(feats, radius=radius, cue="contour", sigma_edge=sigma_edge)
    n_nodes = hs * ws
    k = min(int(n_vectors) + 1, n_nodes)
    pairs = laplacian_eigenpairs(graph.weights, k, seed=seed, solver=solver)
    vals = np.asarray(pairs.values, dtype=np.float64)
    vecs = pairs.vectors
    # The trivial vector (constant on a connected graph) has zero gradient and drops out by
    # itself.  Eigenvalues at rounding level come from (nearly) separate pieces of the graph;
    # their 1/λ weight is capped at that of the smallest clearly positive eigenvalue.
    positive = vals[vals > 1e-9]
    floor = float(positive.min()) if positive.size else 1.0
    weights = 1.0 / np.maximum(vals, floor)  # (1/√λ)², Arbelaez et al. 2011, eq. (12)
    t = np.zeros((3, hs, ws), dtype=np.float64)
    imgs = np.zeros((hs, ws, len(vals)))
    for j in range(len(vals)):  # loop over a handful of eigenvectors, not pixels
        v = vecs[:, j].reshape(hs, ws)
        v = v / max(np.sqrt(np.mean(v * v)), 1e-12)  # unit RMS per pixel
        imgs[..., j] = v
        gx = ndimage.gaussian_filter(v, gradient_sigma, order=(0, 1))
        gy = ndimage.gaussian_filter(v, gradient_sigma, order=(1, 0))
        wgt = weights[j]
        t[0] += wgt * gx * gx
        t[1] += wgt * gx * gy
        t[2] += wgt * gy * gy
    if pairs.n_components > 1:  # borders between graph components: maximal boundary
        comp = np.asarray(pairs.component_labels).reshape(hs, ws)
        top = max(float(_lambda_max(t).max()), 1e-12)
        dxc = np.zeros((hs, ws))
        dyc = np.zeros((hs, ws))
        cx = comp[:, 1:] != comp[:, :-1]
        cy = comp[1:, :] != comp[:-1, :]
        dxc[:, 1:][cx] = dxc[:, :-1][cx] = 1.0
        dyc[1:, :][cy] = dyc[:-1, :][cy] = 1.0
        t[0] = np.maximum(t[0], top * dxc)
        t[2] = np.maximum(t[2], top * dyc)
    if f > 1:  # back to full resolution; derivatives were per coarse pixel
        yy = (np.arange(h) + 0.5) / f - 0.5
        xx = (np.arange(w) + 0.5) / f - 0.5
        grid = np.meshgrid(yy, xx, indexing="ij")
        t = np.stack([ndimage.map_coordinates(c, grid, order=1, mode="nearest") for c in t])

    lam = _lambda_max(t)
    ref = float(np.percentile(lam, normalise_percentile)) if lam.size else 0.0
    if ref > 0:
        t = t / ref
        lam = lam / ref
    strength = np.sqrt(np.clip(lam, 0.0, 1.0))
    return SpectralBoundary(
        tensor=np.clip(t, -1.0, 1.0).astype(np.float32),
        strength=strength,
        eigenvalues=vals,
        eigenvectors=imgs,
    )


def _contrast_normalise(local: np.ndarray, p) -> tuple[np.ndarray, np.ndarray]:
    """Per-image gain of a local tensor (see :func:`global_boundary`, Notes); (tensor, strength)."""
    strength = np.sqrt(np.clip(_lambda_max(local), 0.0, 1.0))
    if p.contrast_power > 0:
        q = float(np.percentile(strength, p.contrast_percentile))
        if q > 0:
            gain = (p.contrast_reference / q) ** p.contrast_power
            local = np.clip(local * np.float32(gain * gain), -1.0, 1.0)
            strength = np.sqrt(np.clip(_lambda_max(local), 0.0, 1.0))
    return local, strength


@dataclass(frozen=True)
class GlobalBoundary:
    """Boundary signal of an image under a preset: local cues plus, optionally, the spectral term.

    Attributes
    ----------
    tensor : ndarray, shape (3, H, W), float32
        Combined tensor ``(1 − β) T_local + β T_spectral``.
    strength : ndarray, shape (H, W), float64
        ``sqrt(λ_max(tensor))`` in [0, 1].
    local_strength : ndarray, shape (H, W), float64
        Strength of the local cues alone (after the preset's contrast normalisation).
    spectral : SpectralBoundary or None
        The spectral term (None when the preset's ``spectral_weight`` is 0).
    timings : dict
        Seconds per stage (``cues``, ``spectral``).
    texton_labels : ndarray, shape (H, W), int32, optional
        Texton index of every pixel (:attr:`imgcut.cues.CueTensors.texton_labels`), for region
        histograms in the hierarchy.
    """

    tensor: np.ndarray
    strength: np.ndarray
    local_strength: np.ndarray
    spectral: SpectralBoundary | None
    timings: dict
    texton_labels: np.ndarray | None = None


def global_boundary(
    image: np.ndarray,
    *,
    preset="photo",
    seed: None | int | np.random.Generator = 0,
) -> GlobalBoundary:
    """Boundary tensor and strength of an image with the cues and weights of a preset.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, C)
        Any image accepted by :func:`imgcut.cues.local_cues`.
    preset : str or BoundaryPreset, default "photo"
        See :mod:`imgcut.presets`.
    seed : None, int or numpy.random.Generator, default 0
        Seeds the textons and the eigensolver (normalised once with ``default_rng``).

    Returns
    -------
    GlobalBoundary

    Raises
    ------
    ValueError
        For invalid images or an unknown preset.

    Notes
    -----
    ``T = (1 − β) Σ_i w_i T_i / Σ_i w_i + β T_spectral`` (Arbelaez et al. 2011, eq. (13), a
    linear combination of the multiscale local cues and the spectral signal; the weights of the
    ``"photo"`` preset were chosen on BSDS500 train).

    With the preset's ``contrast_power`` α > 0 the local tensor is first rescaled per image so
    that strengths ``E = sqrt(λ_max(T))`` scale by ``(E_ref / E_q)^α``, with ``E_q`` the
    ``contrast_percentile`` of ``E`` over the image and ``E_ref`` the preset's
    ``contrast_reference`` (a gain control: low-contrast photographs get their borders
    raised towards the levels of typical ones, so one hierarchy level suits more images;
    α = 1 would equalise the percentile, α = 0.5 meets it half-way in log scale).

    Examples
    --------
    >>> import numpy as np
    >>> img = np.zeros((32, 32)); img[:, 16:] = 1.0
    >>> gb = global_boundary(img, preset="fluorescence")
    >>> bool(gb.strength[16, 15:17].mean() > 0.5 > gb.strength[16, :4].max())
    True
    """
    import time

    from .cues import local_cues
    from .presets import get_preset

    p = get_preset(preset)
    _check_contrast(p)
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    cues = local_cues(image, seed=rng, **p.cue_options())
    return _boundary_from_cues(cues, p, rng, t0)


def _check_contrast(p) -> None:
    """ValueError unless the preset's contrast-normalisation fields are valid."""
    if p.contrast_power < 0 or not 0 < p.contrast_percentile <= 100 or p.contrast_reference <= 0:
        raise ValueError(
            "contrast normalisation needs contrast_power >= 0, contrast_percentile in (0, 100] "
            f"and contrast_reference > 0; got {p.contrast_power}, {p.contrast_percentile}, "
            f"{p.contrast_reference}"
        )


def _local_tensor(cues, p) -> np.ndarray:
    """The preset's combined cue tensor, through its boundary model if it has one."""
    from .boundary_model import apply_preset_model
    from .cues import combine_cues

    return apply_preset_model(p, cues, combine_cues(cues, p.weights()))


def _boundary_from_cues(
    cues, p, rng: np.random.Generator, t0: float | None = None, local: np.ndarray | None = None
):
    """The part of :func:`global_boundary` after the local cues, for cues already computed.

    Presets that differ only in cue weights, contrast normalisation, spectral term or merge
    score share one :class:`imgcut.cues.CueTensors` (used by :mod:`imgcut.ensemble`);
    ``local``, when given, is the preset's :func:`_local_tensor` of those cues, computed once.
    """
    import time

    _check_contrast(p)
    if t0 is None:
        t0 = time.perf_counter()
    if local is None:
        local = _local_tensor(cues, p)
    local, local_strength = _contrast_normalise(local, p)
    t1 = time.perf_counter()
    spec = None
    tensor = local
    if p.spectral_weight > 0:
        spec = spectral_boundary(
            local_strength,
            n_vectors=p.spectral_vectors,
            radius=p.spectral_radius,
            downsample=p.spectral_downsample,
            seed=rng,
        )
        beta = np.float32(p.spectral_weight)
        tensor = (1 - beta) * local + beta * spec.tensor
    t2 = time.perf_counter()
    strength = np.sqrt(np.clip(_lambda_max(tensor), 0.0, 1.0))
    return GlobalBoundary(
        tensor=tensor.astype(np.float32),
        strength=strength,
        local_strength=local_strength,
        spectral=spec,
        timings={"cues": t1 - t0, "spectral": t2 - t1},
        texton_labels=cues.texton_labels,
    )
