"""The public pipeline: image -> features -> affinity graph -> eigenvectors -> regions.

``segment(image, n_regions=8)`` runs every stage of imgcut and returns a
:class:`Segmentation` with the label image and everything needed to inspect the run:
eigenvalues, residuals, eigenvector pictures, per-split cut records, the split hierarchy,
the parameters actually used and the time spent per stage.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from imgcut.features import compute_features
from imgcut.graph import DEFAULT_MEMORY_BUDGET, affinity_graph
from imgcut.hierarchy import oversegment
from imgcut.multiscale import AUTO_MULTISCALE_PIXELS, multiscale_eigenpairs, multiscale_problem
from imgcut.partition import Hierarchy, SplitRecord, kway_ncut, recursive_ncut
from imgcut.regions import enforce_connectivity, pair_weights, renumber_raster
from imgcut.spectral import _AUTO_DENSE_NODES, SOLVERS, laplacian_eigenpairs
from imgcut.twolevel import tile_aggregates

__all__ = ["segment", "Segmentation", "METHODS", "KWAY_METHODS", "auto_scale"]

#: Valid values of ``method``.
METHODS = ("auto", "recursive", "kway")
#: Valid values of ``kway_method``.
KWAY_METHODS = ("discretize", "kmeans")
_CUES = ("combined", "intensity", "contour")

#: Default smallest region, as a fraction of the segmented pixels (see ``segment``).
MIN_AREA_FRACTION = 0.001
#: Eigenpairs solved on the whole image by default for ``method="recursive"``.
RECURSIVE_EIGENVECTORS = 3
#: Valid values of ``scale``.
SCALES = ("auto", "single", "multi")
#: Default ``tol`` of the single-scale path.
SINGLE_SCALE_TOL = 1e-5
#: Default ``tol`` of the multiscale path: above the full-resolution residual its coarse-to-fine
#: refinement (LOBPCG on the levels up to 100 000 pixels, compatible relaxation and one
#: Rayleigh-Ritz step above) leaves on BSDS500 photographs and synthetic micrographs
#: (docs/multiscale.md), so the default run does not warn.
MULTISCALE_TOL = 3e-2
#: Default full-resolution LOBPCG iterations on the multiscale path: none (relaxation and
#: Rayleigh-Ritz only); the regions are decided on the coarse levels (docs/multiscale.md).
MULTISCALE_MAXITER = 0
#: Radius of the full-resolution graph on the multiscale path (8 neighbours).
MULTISCALE_RADIUS_FINE = 1.5


def auto_scale(shape: tuple[int, ...], method: str, *, masked: bool = False) -> str:
    """The scale ``segment(scale="auto")`` uses for an image of ``shape``.

    Parameters
    ----------
    shape : tuple of int
        ``(H, W)`` of the image.
    method : str
        The region method (only ``"kway"`` can use the multiscale path).
    masked : bool, default False
        Whether a mask restricts the graph (the multiscale path has none).

    Returns
    -------
    str
        ``"multi"`` above ``AUTO_MULTISCALE_PIXELS`` pixels for an unmasked k-way cut of an
        image at least 16 pixels in each dimension (a narrower strip halves to one row and
        has no coarse levels), else ``"single"``.

    Examples
    --------
    >>> auto_scale((2048, 2048), "kway"), auto_scale((2048, 2048), "recursive")
    ('multi', 'single')
    >>> auto_scale((3, 200_000), "kway")
    'single'
    """
    h, w = (int(v) for v in shape[:2])
    big = h * w > AUTO_MULTISCALE_PIXELS
    return "multi" if big and min(h, w) >= 16 and method == "kway" and not masked else "single"


def _auto_method(shape, scale, mask, max_ncut, n_regions, n_eigenvectors) -> str:
    """``method="auto"``: k-way where it takes the multiscale path, else recursive."""
    if len(shape) < 2 or max_ncut is not None:
        return "recursive"
    if isinstance(n_eigenvectors, int | np.integer) and n_eigenvectors < n_regions:
        return "recursive"
    if scale == "multi":
        return "kway"
    if scale == "auto" and auto_scale(shape[:2], "kway", masked=mask is not None) == "multi":
        return "kway"
    return "recursive"


@dataclass(frozen=True, eq=False)
class Segmentation:
    """Result of :func:`segment`.

    Attributes
    ----------
    labels : ndarray of int32, shape (H, W)
        Regions ``1..K`` numbered in raster order of their first pixel; 0 only outside the mask.
    eigenvalues : ndarray of float64, shape (k,)
        Smallest eigenvalues of ``(D - W) y = lambda D y`` on the whole image, ascending.
    residuals : ndarray of float64, shape (k,)
        Relative residuals ``||L v - lambda v|| / ||v||`` of those eigenpairs.
    eigenvectors : ndarray of float32, shape (H, W, k)
        The generalised eigenvectors ``y`` as pictures (D-normalised, sign fixed); NaN
        outside the mask.
    splits : list of SplitRecord
        One record per two-way split (``method="recursive"``); empty for ``"kway"``.
    hierarchy : Hierarchy or None
        The split order (``method="recursive"``), giving :meth:`labels_at`.
    params : dict
        Every parameter used, defaults and derived values included (σ's, ``min_area``,
        solver chosen, image shape and dtype).
    timings : dict
        Seconds per stage: ``features``, ``graph``, ``eigensolve``, ``partition``,
        ``postprocess`` and ``total``; for ``method="recursive"`` also
        ``partition_eigensolve``, the part of ``partition`` spent solving the regions'
        eigenproblems (details per solve in ``hierarchy.solves``).
    """

    labels: np.ndarray = field(repr=False)
    eigenvalues: np.ndarray
    residuals: np.ndarray
    eigenvectors: np.ndarray = field(repr=False)
    splits: list[SplitRecord] = field(repr=False)
    hierarchy: Hierarchy | None = field(repr=False)
    params: dict[str, Any]
    timings: dict[str, float]
    _nodes: np.ndarray = field(repr=False, default=None)
    _pair_weights: np.ndarray | None = field(repr=False, default=None)

    @property
    def n_regions(self) -> int:
        """Number of regions ``K`` in :attr:`labels`."""
        return int(self.labels.max()) if self.labels.size else 0

    def labels_at(self, n_regions: int) -> np.ndarray:
        """Label image after the first ``n_regions - 1`` splits of the hierarchy.

        The node labels of that level go through the same post-processing as
        :attr:`labels` (connected regions, fragments under ``min_area`` merged, raster
        numbering), so ``labels_at(levels)`` equals :attr:`labels`; the region count may
        differ from ``n_regions`` after that post-processing.

        Parameters
        ----------
        n_regions : int
            Level ``1 <= n_regions <= len(splits) + 1``.

        Returns
        -------
        ndarray of int32, shape (H, W)

        Raises
        ------
        ValueError
            Without a hierarchy (``method="kway"``) or for a level out of range.
        """
        if self.hierarchy is None:
            raise ValueError(
                "labels_at needs the split hierarchy of method='recursive'; this result "
                f"was made with method={self.params.get('method')!r}"
            )
        node_labels = self.hierarchy.labels_at(n_regions)
        return _postprocess(
            node_labels,
            self._nodes,
            self.labels.shape,
            min_area=int(self.params["min_area"]),
            pair_w=self._pair_weights,
            connected=bool(self.params["connected"]),
        )

    @property
    def levels(self) -> int:
        """Number of levels of :meth:`labels_at` (1 for ``method="kway"``)."""
        return 1 if self.hierarchy is None else self.hierarchy.n_regions

    def to_record(self) -> dict[str, Any]:
        """JSON-serialisable summary (plain Python types only; no label image).

        Returns
        -------
        dict
            ``shape``, ``n_regions``, ``region_areas`` (pixels of regions 1..K),
            ``eigenvalues``, ``residuals``, ``splits`` (list of dicts), ``params`` and
            ``timings``.
        """
        areas = np.bincount(self.labels.ravel(), minlength=self.n_regions + 1)[1:]
        return {
            "shape": [int(s) for s in self.labels.shape],
            "n_regions": self.n_regions,
            "region_areas": [int(a) for a in areas],
            "eigenvalues": [float(v) for v in self.eigenvalues],
            "residuals": [float(v) for v in self.residuals],
            "splits": [rec.to_dict() for rec in self.splits],
            "params": _plain(self.params),
            "timings": {str(k): float(v) for k, v in self.timings.items()},
        }


def _plain(value: Any) -> Any:
    """Convert numpy scalars/arrays inside dicts and lists to plain Python values."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def _postprocess(
    node_labels: np.ndarray,
    nodes: np.ndarray,
    shape: tuple[int, int],
    *,
    min_area: int,
    pair_w: np.ndarray | None,
    connected: bool,
) -> np.ndarray:
    image_labels = np.zeros(shape[0] * shape[1], dtype=np.int32)
    image_labels[nodes] = node_labels
    image_labels = image_labels.reshape(shape)
    if not connected:
        return renumber_raster(image_labels)
    return enforce_connectivity(image_labels, min_area=min_area, weights=pair_w)


def _check_int(name: str, value: Any, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
        raise ValueError(f"{name} must be an integer >= {low}, got {value!r}")
    return int(value)


def _check_choice(name: str, value: Any, valid: tuple[str, ...]) -> str:
    if value not in valid:
        raise ValueError(f"unknown {name} {value!r}; valid values: {', '.join(valid)}")
    return value


def segment(
    image: Any,
    n_regions: int = 8,
    *,
    method: str = "auto",
    kway_method: str = "discretize",
    radius: float = 5,
    cue: str = "combined",
    sigma_feature: float | None = None,
    sigma_distance: float | None = None,
    sigma_edge: float | None = None,
    max_ncut: float | None = None,
    min_area: int | None = None,
    connected: bool = True,
    solver: str = "auto",
    tol: float | None = None,
    maxiter: int | None = None,
    seed: None | int | np.random.Generator = 0,
    mask: Any = None,
    n_eigenvectors: int | None = None,
    memory_budget: int | None = DEFAULT_MEMORY_BUDGET,
    scale: str = "auto",
) -> Segmentation:
    """Segment an image into regions by normalized cuts.

    Parameters
    ----------
    image : array_like
        ``(H, W)`` gray, ``(H, W, 3)`` RGB (compared in CIE Lab) or ``(H, W, C)``
        multichannel; any real dtype (8/16-bit, float). Intensities are percentile-normalised.
    n_regions : int, default 8
        Number of normalized-cut classes wanted (>= 1). The result can have fewer (when
        ``max_ncut`` or ``min_area`` stop the splitting, or there are too few pixels) or more
        (a class made of separate patches becomes one region per patch, see ``connected``).
    method : {"auto", "recursive", "kway"}, default "auto"
        ``"recursive"``: repeated two-way cuts, cheapest first, re-solving the eigenproblem on
        every region (Shi & Malik 2000, section 3.1); gives a hierarchy. ``"kway"``: one
        eigensolve with ``n_regions`` eigenvectors and a simultaneous partition
        (``kway_method``); faster for many regions. ``"auto"``: ``"kway"`` when it would take
        the multiscale path (``scale="multi"``, or ``scale="auto"`` on an unmasked image above
        :data:`imgcut.multiscale.AUTO_MULTISCALE_PIXELS` pixels) and neither ``max_ncut`` nor
        an ``n_eigenvectors`` below ``n_regions`` asks for recursive cuts; else
        ``"recursive"``. On 20 grey BSDS photographs of 481×321 the multiscale k-way cut
        matched the recursive one in covering and beat it in boundary F and PRI at 1/25 of
        the time (docs/multiscale.md). ``params["method"]`` records the one used.
    kway_method : {"discretize", "kmeans"}, default "discretize"
        Yu & Shi (2003) discretisation or k-means on the eigenvectors (``method="kway"``).
    radius : float, default 5
        Pixels within this Euclidean distance are linked (> 0). Memory and time grow with
        ``radius**2``: about 80 neighbours per pixel at 5.
    cue : {"combined", "intensity", "contour"}, default "combined"
        Affinity: intensity/colour similarity and distance (Shi & Malik), intervening contour
        (Malik et al. 2001), or their product.
    sigma_feature, sigma_distance, sigma_edge : float, optional
        Scales of the affinity; derived from the image when None
        (see :func:`imgcut.graph.affinity_graph`); the values used are in ``params``.
    max_ncut : float, optional
        ``method="recursive"`` only: do not make a cut whose Ncut value is ``>= max_ncut``.
        None: no threshold, stop at ``n_regions``.
    min_area : int, optional
        Smallest region in pixels (>= 1): no cut leaves a smaller side and smaller
        fragments are merged into their most strongly connected neighbour. None:
        ``max(1, floor(0.001 * n))`` for ``n`` segmented pixels (0.1 %; a choice of this
        project, not a published value).
    connected : bool, default True
        Make every region one 4-connected patch (split patches, merge small fragments).
        False returns the normalized-cut classes as they are.
    solver : {"auto", "twolevel", "lobpcg-amg", "arpack", "dense"}, default "auto"
        Eigensolver backend (see :func:`imgcut.spectral.laplacian_eigenpairs`). On the
        single-scale path ``"auto"`` and ``"twolevel"`` build the two-level solver's coarse
        space from the image (watershed basins of the edge map cut into 10-pixel tiles,
        :mod:`imgcut.twolevel`), for the whole image and every recursive re-solve.
    tol : float, optional
        Residual tolerance of every eigensolve. None: ``SINGLE_SCALE_TOL`` (1e-5) on the
        single-scale path, ``MULTISCALE_TOL`` (3e-2) on the multiscale path.
    maxiter : int, optional
        Iteration limit of the iterative eigensolver (the backend's default when None; on the
        multiscale path the full-resolution LOBPCG iterations, ``MULTISCALE_MAXITER``).
    seed : None, int or numpy.random.Generator, default 0
        Seeds every random start (eigensolver blocks, discretisation, k-means); the same
        image, options and integer seed give the same labels.
    mask : array_like of bool, shape (H, W), optional
        Segment only the True pixels; the others get label 0.
    n_eigenvectors : int, optional
        Eigenpairs solved on the whole image (kept as ``eigenvectors``). None: ``n_regions``
        for ``"kway"``, 3 for ``"recursive"`` (which solves every region again).
    memory_budget : int or None, default 4 GiB
        Refuse graphs whose estimated peak memory exceeds this many bytes
        (:class:`~imgcut._errors.GraphTooLargeError`); None: no limit.
    scale : {"auto", "single", "multi"}, default "auto"
        ``"single"``: one pixel graph of the given ``radius``. ``"multi"``: the multiscale
        pencil of :mod:`imgcut.multiscale` (Cour, Benezit & Shi 2005): a radius-1.5 graph at
        full resolution plus long-range links (``radius``) on block-averaged coarse levels,
        solved coarse to fine; much less time and memory on large images, partitioned with
        ``method="kway"`` (required), no ``mask``. ``"auto"``: ``"multi"`` for
        ``method="kway"`` without a mask on images of more than
        :data:`imgcut.multiscale.AUTO_MULTISCALE_PIXELS` pixels and at least 16 pixels in
        each dimension, else ``"single"``.
        ``memory_budget`` guards the single-scale graph only (the multiscale path's peak
        memory is measured in ``docs/multiscale.md``).
    Returns
    -------
    Segmentation
        Labels, eigenpairs, split records, hierarchy, parameters and timings.

    Raises
    ------
    ValueError
        Invalid image (empty, 4-D, boolean, NaN/inf), mask, or option (the message lists the
        valid values).
    GraphTooLargeError
        The affinity graph would exceed ``memory_budget``.

    Warns
    -----
    EigenConvergenceWarning
        An eigensolve stopped above ``tol``.

    Notes
    -----
    The pipeline: features (:func:`~imgcut.features.compute_features`), the sparse affinity
    ``W`` (:func:`~imgcut.graph.affinity_graph`), the smallest eigenpairs of
    ``(D - W) y = lambda D y`` (Shi & Malik 2000, eq. (6)-(8)), a partition
    (:func:`~imgcut.partition.recursive_ncut` or :func:`~imgcut.partition.kway_ncut`), then
    :func:`~imgcut.regions.enforce_connectivity` and raster renumbering.

    Trivial inputs are answered without a partition: an image with a single pixel (or a
    mask selecting one) and a *constant* image (every segmented pixel has the same value)
    give one region. A constant image has no preferred cut: every cut of its grid graph
    depends only on geometry, so splitting it would invent structure (this is a choice of
    this project). Its eigenpairs are still computed and reported.

    References
    ----------
    J. Shi and J. Malik, "Normalized cuts and image segmentation", IEEE TPAMI 22(8), 2000.
    S. X. Yu and J. Shi, "Multiclass spectral clustering", ICCV 2003.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> img = np.zeros((24, 32))
    >>> img[:, 16:] = 1.0
    >>> img += 0.05 * rng.standard_normal(img.shape)
    >>> result = segment(img, n_regions=2, radius=3)
    >>> result.labels.shape, result.n_regions
    ((24, 32), 2)
    >>> bool((result.labels[:, :16] == 1).all() and (result.labels[:, 16:] == 2).all())
    True
    """
    t_start = time.perf_counter()
    n_regions = _check_int("n_regions", n_regions, 1)
    _check_choice("method", method, METHODS)
    _check_choice("scale", scale, SCALES)
    method_asked = method
    if method == "auto":
        method = _auto_method(np.shape(image), scale, mask, max_ncut, n_regions, n_eigenvectors)
    _check_choice("kway_method", kway_method, KWAY_METHODS)
    _check_choice("cue", cue, _CUES)
    _check_choice("solver", solver, SOLVERS)
    if isinstance(radius, bool) or not isinstance(radius, int | float | np.integer | np.floating):
        raise ValueError(f"radius must be a number > 0 (pixels), got {radius!r}")
    if not (math.isfinite(radius) and radius > 0):
        raise ValueError(f"radius must be finite and > 0 (pixels), got {radius!r}")
    if max_ncut is not None and not (isinstance(max_ncut, int | float) and max_ncut > 0):
        raise ValueError(f"max_ncut must be a number > 0 or None, got {max_ncut!r}")
    if min_area is not None:
        min_area = _check_int("min_area", min_area, 1)
    if n_eigenvectors is not None:
        n_eigenvectors = _check_int("n_eigenvectors", n_eigenvectors, 1)
        if method == "kway" and n_eigenvectors < n_regions:
            raise ValueError(
                f"method='kway' needs n_eigenvectors >= n_regions ({n_regions}), "
                f"got {n_eigenvectors}"
            )
        if method == "recursive" and n_eigenvectors < 2:
            raise ValueError(f"method='recursive' needs n_eigenvectors >= 2, got {n_eigenvectors}")
    if not isinstance(connected, bool | np.bool_):
        raise ValueError(f"connected must be True or False, got {connected!r}")
    scale_asked = scale
    if scale == "auto":
        scale = auto_scale(np.shape(image)[:2], method, masked=mask is not None)
    if tol is None:
        tol = MULTISCALE_TOL if scale == "multi" else SINGLE_SCALE_TOL
    if maxiter is None and scale == "multi":
        maxiter = MULTISCALE_MAXITER
    if scale == "multi" and method != "kway":
        raise ValueError(
            "scale='multi' needs method='kway' (recursive re-solves would drop the coarse levels)"
        )
    if scale == "multi" and mask is not None:
        raise ValueError("scale='multi' does not support a mask; use scale='single'")
    rng = np.random.default_rng(seed)
    timings: dict[str, float] = {}

    t = time.perf_counter()
    feats = compute_features(image)
    timings["features"] = time.perf_counter() - t

    t = time.perf_counter()
    problem = None
    if scale == "multi":
        problem = multiscale_problem(
            feats,
            radius_fine=MULTISCALE_RADIUS_FINE,
            radius_coarse=radius,
            cue=cue,
            sigma_feature=sigma_feature,
            sigma_edge=sigma_edge,
        )
        graph = problem.fine_graph
    else:
        graph = affinity_graph(
            feats,
            radius=radius,
            cue=cue,
            sigma_feature=sigma_feature,
            sigma_distance=sigma_distance,
            sigma_edge=sigma_edge,
            mask=mask,
            memory_budget=memory_budget,
        )
    timings["graph"] = time.perf_counter() - t
    shape = graph.shape
    nodes = graph.nodes
    n = int(nodes.size)
    if min_area is None:
        min_area = max(1, int(MIN_AREA_FRACTION * n))
    if n_eigenvectors is None:
        n_eigenvectors = n_regions if method == "kway" else RECURSIVE_EIGENVECTORS
    k = min(n_eigenvectors, n)

    t = time.perf_counter()
    aggregates = None
    if problem is None and (solver == "twolevel" or (solver == "auto" and n > _AUTO_DENSE_NODES)):
        # Coarse space of the two-level eigensolver: watershed basins of the edge map cut
        # into tiles (imgcut.twolevel; docs/performance.md).
        aggregates = tile_aggregates(oversegment(feats.edges, smooth=1.0), nodes=nodes)
    if problem is not None:
        ep = multiscale_eigenpairs(None, k, problem=problem, tol=tol, maxiter=maxiter, seed=rng)
    else:
        ep = laplacian_eigenpairs(
            graph.weights,
            k,
            solver=solver,
            tol=tol,
            maxiter=maxiter,
            seed=rng,
            aggregates=aggregates,
        )
    timings["eigensolve"] = time.perf_counter() - t

    values = feats.values.reshape(-1, feats.values.shape[-1])[nodes]
    constant = bool(n < 2 or np.all(values == values[0]))

    t = time.perf_counter()
    hierarchy = None
    if constant or n_regions == 1:
        node_labels = np.ones(n, dtype=np.int32)
    elif method == "recursive":
        hierarchy = recursive_ncut(
            graph.weights,
            n_regions=n_regions,
            max_ncut=max_ncut,
            min_size=min_area,
            solver=solver,
            tol=tol,
            maxiter=maxiter,
            seed=rng,
            eigenpairs=ep if ep.k >= 2 else None,
            aggregates=aggregates,
        )
        node_labels = hierarchy.labels
    else:
        node_labels = kway_ncut(ep, min(n_regions, ep.k), method=kway_method, seed=rng)
    timings["partition"] = time.perf_counter() - t
    if hierarchy is not None:  # the share of "partition" spent re-solving region eigenproblems
        timings["partition_eigensolve"] = float(sum(x["seconds"] for x in hierarchy.solves))

    t = time.perf_counter()
    pair_w = pair_weights(graph) if connected and min_area > 1 else None
    labels = _postprocess(
        node_labels, nodes, shape, min_area=min_area, pair_w=pair_w, connected=connected
    )
    vectors = np.full((shape[0] * shape[1], ep.k), np.nan, dtype=np.float32)
    vectors[nodes] = ep.vectors
    timings["postprocess"] = time.perf_counter() - t
    timings["total"] = time.perf_counter() - t_start

    params = {
        "n_regions": n_regions,
        "method": method,
        "method_asked": method_asked,
        "kway_method": kway_method,
        "radius": float(radius),
        "radius_full_resolution": float(graph.radius),
        "cue": graph.cue,
        "sigma_feature": graph.sigmas.get("feature"),
        "sigma_distance": graph.sigmas.get("distance"),
        "sigma_edge": graph.sigmas.get("edge"),
        "max_ncut": None if max_ncut is None else float(max_ncut),
        "min_area": int(min_area),
        "connected": bool(connected),
        "solver": solver,
        "solver_used": ep.solver,
        "tol": float(tol),
        "maxiter": maxiter,
        "seed": seed if seed is None or isinstance(seed, int | np.integer) else "generator",
        "mask": mask is not None,
        "n_eigenvectors": int(ep.k),
        "memory_budget": memory_budget,
        "scale": scale_asked,
        "scale_used": scale,
        "image_shape": [int(s) for s in np.shape(image)],
        "image_dtype": str(np.asarray(image).dtype),
        "feature_kind": feats.kind,
        "n_nodes": n,
        "nnz": int(graph.weights.nnz),
        "constant_image": constant,
        "n_eigensolves": 1 + (hierarchy.n_eigensolves if hierarchy is not None else 0),
    }
    if problem is not None:
        params["multiscale"] = {
            "shapes": ep.info.get("shapes"),
            "radii": ep.info.get("radii"),
            "relaxed_levels": ep.info.get("relaxed_levels"),
            "level_iterations": ep.info.get("level_iterations"),
        }
    return Segmentation(
        labels=labels,
        eigenvalues=np.asarray(ep.values, dtype=np.float64),
        residuals=np.asarray(ep.residuals, dtype=np.float64),
        eigenvectors=vectors.reshape(shape[0], shape[1], ep.k),
        splits=list(hierarchy.splits) if hierarchy is not None else [],
        hierarchy=hierarchy,
        params=params,
        timings=timings,
        _nodes=nodes,
        _pair_weights=pair_w,
    )
