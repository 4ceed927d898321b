"""One region hierarchy from the contour maps of several hierarchies (a hierarchy ensemble).

Several variants of a boundary preset (different contrast normalisation, border power mean or
region-appearance weight) each give an ultrametric contour map of the same image from the same
local cues.  Each map is put on a common level scale (divided by the level at which that
variant segments best on the tuning images), widened by a small grey dilation so borders that
sit a pixel apart in different variants overlap, and the maps are averaged.  The mean map is
over-segmented by watershed and merged greedily by plain mean border strength
(:mod:`imgcut.hierarchy`), which gives one nested family of segmentations again.  Combining the
ultrametric contour maps of several hierarchies into one by averaging follows multiscale
combinatorial grouping (Arbeláez, Pont-Tuset, Barron, Marques & Malik 2014), which combines the
maps of several image scales; here the members are preset variants at one scale.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np
from scipy import ndimage

from .hierarchy import RegionHierarchy, merge_regions, oversegment

if TYPE_CHECKING:
    from .presets import BoundaryPreset

__all__ = [
    "member_presets",
    "combine_ultrametric_maps",
    "ensemble_hierarchy",
    "ensemble_image_hierarchy",
]

#: Preset fields that set the local cues themselves; every member shares the base preset's cues,
#: so members may not override them.
SHARED_CUE_FIELDS = frozenset(
    {
        "colour_space",
        "brightness_sigmas",
        "colour_sigmas",
        "texture_sigmas",
        "model_sigmas",
        "n_bins",
        "n_textons",
    }
)


def member_presets(preset="photo") -> tuple[tuple[BoundaryPreset, float], ...]:
    """The member presets of an ensemble preset with their reference levels.

    Parameters
    ----------
    preset : str or BoundaryPreset, default "photo"
        A preset whose ``ensemble`` field lists ``(overrides, reference_level)`` pairs.

    Returns
    -------
    tuple of (BoundaryPreset, float)
        Each member: the preset with ``ensemble`` emptied and the member's overrides applied,
        and its reference level.  Empty when the preset has no ensemble.

    Raises
    ------
    ValueError
        If a member overrides a cue field (:data:`SHARED_CUE_FIELDS`), an ensemble field or an
        unknown field, or a reference level is not a finite number > 0.

    Examples
    --------
    >>> from imgcut.presets import get_preset
    >>> p = get_preset("photo", ensemble=(((), 0.5), ((("strength_power", 1.0),), 0.5)))
    >>> [(m.strength_power, r) for m, r in member_presets(p)]
    [(0.5, 0.5), (1.0, 0.5)]
    """
    from .presets import get_preset

    p = get_preset(preset)
    base = replace(p, ensemble=())
    out = []
    for k, member in enumerate(p.ensemble):
        try:
            overrides, ref = member
            overrides = dict(overrides)
        except (TypeError, ValueError):
            raise ValueError(
                f"ensemble member {k} must be a pair (overrides as (field, value) pairs, "
                f"reference level); got {member!r}"
            ) from None
        bad = sorted(set(overrides) & (SHARED_CUE_FIELDS | {"ensemble", "ensemble_level"}))
        if bad:
            raise ValueError(
                f"ensemble member {k} may not override {bad}: the members share the base "
                "preset's cues and ensemble settings"
            )
        ref = float(ref)
        if not (np.isfinite(ref) and ref > 0):
            raise ValueError(f"ensemble member {k}: reference level must be > 0; got {ref}")
        out.append((get_preset(base, **overrides), ref))
    return tuple(out)


def combine_ultrametric_maps(
    maps: Sequence[np.ndarray] | np.ndarray,
    references: Sequence[float],
    *,
    level: float = 0.5,
    dilation: int = 3,
) -> np.ndarray:
    """Mean of several contour maps, each rescaled to a common level and dilated.

    Parameters
    ----------
    maps : sequence of ndarray, shape (H, W), or ndarray, shape (K, H, W)
        Ultrametric contour maps (:meth:`imgcut.hierarchy.RegionHierarchy.ultrametric_map`)
        of ``K ≥ 1`` hierarchies of one image.
    references : sequence of float, length K
        Reference level ``r_k > 0`` of each map: the level at which its hierarchy segments best
        on the tuning images.
    level : float, default 0.5
        Where every reference level lands on the common scale.
    dilation : int, default 3
        Side of the square grey dilation applied to each rescaled map (odd, ≥ 1; 1: none).

    Returns
    -------
    ndarray, shape (H, W), float64
        ``M = (1/K) Σ_k dilate(U_k · level / r_k)``.

    Raises
    ------
    ValueError
        For an empty list, maps of different shapes, non-finite values, a reference count
        that does not match, references ≤ 0 or an even / non-positive ``dilation``.

    Notes
    -----
    Dividing each map by its reference level puts "the level this variant would be cut at"
    at the same value for every member, so no member dominates the mean by its scale alone
    (the maps of multiscale combinatorial grouping are likewise brought to a common scale
    before they are combined; Arbeláez et al. 2014, §3, from memory).  The 3 × 3 dilation
    lets borders that two members place one pixel apart overlap in the mean instead of
    giving two weak parallel ridges.  The mean is taken over the values sorted per pixel, so
    the result is bit-for-bit the same for every order of the members.

    References
    ----------
    P. Arbeláez, J. Pont-Tuset, J. T. Barron, F. Marques, J. Malik, "Multiscale combinatorial
    grouping", CVPR 2014, 328–335 (section and page numbers from memory).

    Examples
    --------
    >>> import numpy as np
    >>> u = np.zeros((5, 5)); u[:, 2] = 0.4
    >>> combine_ultrametric_maps([u, 2 * u], [0.4, 0.8], level=0.5, dilation=1)[0, 2]
    np.float64(0.5)
    """
    arrays = [np.asarray(m, dtype=np.float64) for m in maps]
    shapes = sorted({a.shape for a in arrays})
    if not arrays or len(shapes) != 1 or len(shapes[0]) != 2:
        raise ValueError(f"maps must be K >= 1 arrays of one shape (H, W); got shapes {shapes}")
    stack = np.stack(arrays)
    if not np.all(np.isfinite(stack)):
        raise ValueError("maps contain NaN or inf")
    refs = np.asarray(references, dtype=np.float64).ravel()
    if refs.shape != (stack.shape[0],):
        raise ValueError(f"references must hold one level per map ({stack.shape[0]}); got {refs}")
    if not np.all(np.isfinite(refs) & (refs > 0)):
        raise ValueError(f"references must be finite levels > 0; got {refs.tolist()}")
    if not (np.isfinite(level) and level > 0):
        raise ValueError(f"level must be a finite number > 0; got {level}")
    d = int(dilation)
    if d != dilation or d < 1 or d % 2 == 0:
        raise ValueError(f"dilation must be an odd integer >= 1; got {dilation}")
    stack *= (float(level) / refs)[:, None, None]
    if d > 1:  # per map (size 1 along the member axis), all maps in one call
        stack = ndimage.grey_dilation(stack, size=(1, d, d), mode="nearest")
    stack.sort(axis=0)  # order-free summation (see Notes)
    return stack.sum(axis=0) / stack.shape[0]


def ensemble_hierarchy(
    maps: Sequence[np.ndarray] | np.ndarray,
    references: Sequence[float],
    *,
    level: float = 0.5,
    dilation: int = 3,
    smooth: float = 1.0,
    default_level: float | None = None,
) -> RegionHierarchy:
    """One hierarchy from the mean of several contour maps: watershed, then mean-strength merging.

    Parameters
    ----------
    maps, references, level, dilation
        See :func:`combine_ultrametric_maps`.
    smooth : float, default 1.0
        σ of the smoothing before the watershed (:func:`imgcut.hierarchy.oversegment`).
    default_level : float, optional
        Stored in the result for :meth:`~imgcut.hierarchy.RegionHierarchy.labels_at`.

    Returns
    -------
    RegionHierarchy
        Over the watershed regions of the mean map ``M``, borders merged greedily by their
        plain mean of ``M`` (no size, power or appearance term); ``boundary`` is ``M``.

    Raises
    ------
    ValueError
        As :func:`combine_ultrametric_maps`.

    Notes
    -----
    The mean of ultrametrics is in general not an ultrametric, so the mean map is turned back
    into a hierarchy: watershed from its regional minima, then greedy merging of the weakest
    border (mean of ``M`` along it) first, as for a single boundary map (Arbelaez, Maire,
    Fowlkes & Malik 2011, §4.2).  With a single member and ``level`` equal to its reference,
    ``M`` is that member's dilated contour map and the regions at a level ``t`` are those of
    the member at ``t`` up to borders thinner than the dilation.

    References
    ----------
    P. Arbeláez, J. Pont-Tuset, J. T. Barron, F. Marques, J. Malik, "Multiscale combinatorial
    grouping", CVPR 2014 (from memory).
    P. Arbelaez, M. Maire, C. Fowlkes, J. Malik, "Contour detection and hierarchical image
    segmentation", IEEE TPAMI 33(5):898–916, 2011.

    Examples
    --------
    >>> import numpy as np
    >>> u = np.zeros((20, 30)); u[:, 9:11] = 0.3; u[:, 19:21] = 0.7
    >>> h = ensemble_hierarchy([u, u], [0.5, 0.5])
    >>> [h.n_regions_at(t) for t in (0.1, 0.5, 0.9)]
    [3, 2, 1]
    """
    mean_map = combine_ultrametric_maps(maps, references, level=level, dilation=dilation)
    h = merge_regions(oversegment(mean_map, smooth=smooth), mean_map)
    return replace(h, boundary=mean_map, default_level=default_level)


def _boundary_key(p) -> tuple:
    """The preset fields that decide the boundary map computed from shared cues."""
    return (
        p.cue_weights,
        p.scale_weights,
        p.boundary_model,
        p.contrast_percentile,
        p.contrast_power,
        p.contrast_reference,
        p.spectral_weight,
        p.spectral_vectors,
        p.spectral_radius,
        p.spectral_downsample,
    )


def ensemble_image_hierarchy(
    image: np.ndarray,
    *,
    preset="photo",
    seed: None | int | np.random.Generator = 0,
) -> RegionHierarchy:
    """Region hierarchy of an image from an ensemble preset (shared cues, one map per member).

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, C)
        Any image accepted by :func:`imgcut.hierarchy.image_hierarchy`.
    preset : str or BoundaryPreset, default "photo"
        A preset with a non-empty ``ensemble`` (see :func:`member_presets`).
    seed : None, int or numpy.random.Generator, default 0
        Seeds the textons (and any spectral term), once for all members.

    Returns
    -------
    RegionHierarchy
        From :func:`ensemble_hierarchy` with the preset's ``ensemble_level``,
        ``ensemble_dilation``, ``watershed_smooth`` and ``default_level``.

    Raises
    ------
    ValueError
        For invalid images, a preset without an ensemble or an invalid member.

    Notes
    -----
    The local cues (the expensive part) are computed once; every member re-combines them with
    its weights and contrast normalisation and runs its own watershed and greedy merging
    (:func:`imgcut.hierarchy.image_hierarchy` without the cues), so the cost over a single
    hierarchy is about one merge stage per member plus one final merge.  Members with the
    same boundary map share it, its watershed and the region channels.

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.presets import PHOTO_ENSEMBLE, get_preset
    >>> img = np.zeros((40, 40)); img[:, 20:] = 1.0
    >>> h = ensemble_image_hierarchy(img, preset=get_preset("photo", ensemble=PHOTO_ENSEMBLE))
    >>> int(h.labels_at().max())
    2
    """
    from .cues import local_cues, quantised_channels
    from .hierarchy import _hierarchy_from_boundary
    from .presets import get_preset
    from .spectral_boundary import _boundary_from_cues, _local_tensor

    p = get_preset(preset)
    members = member_presets(p)
    if not members:
        raise ValueError(f"preset {p.name!r} has no ensemble members (its ensemble is empty)")
    rng = np.random.default_rng(seed)
    cues = local_cues(image, seed=rng, **p.cue_options())
    # members whose boundary map (or watershed, or region channels) cannot differ share it
    locals_: dict = {}
    boundaries: dict = {}
    bases: dict = {}
    channels: dict = {}
    maps = []
    for member, _ in members:
        key = _boundary_key(member)
        if key not in boundaries:
            lkey = key[:3]  # cue weights, scale weights, boundary model
            if lkey not in locals_:
                locals_[lkey] = _local_tensor(cues, member)
            boundaries[key] = _boundary_from_cues(cues, member, rng, local=locals_[lkey])
        gb = boundaries[key]
        wkey = (key, member.watershed_smooth)
        if wkey not in bases:
            bases[wkey] = oversegment(gb.strength, smooth=member.watershed_smooth)
        features = None
        if member.similarity_weight > 0:
            ckey = (member.colour_space, member.similarity_bins)
            if ckey not in channels:
                channels[ckey] = quantised_channels(
                    image, gb.texton_labels, colour_space=ckey[0], n_bins=ckey[1]
                )
            features = channels[ckey]
        h = _hierarchy_from_boundary(image, gb, member, base=bases[wkey], features=features)
        maps.append(h.ultrametric_map())
    return ensemble_hierarchy(
        maps,
        [ref for _, ref in members],
        level=p.ensemble_level,
        dilation=p.ensemble_dilation,
        smooth=p.watershed_smooth,
        default_level=p.default_level,
    )
