"""A learned boundary strength: a small neural network on the oriented cue responses.

The local cues (:func:`imgcut.cues.local_cues`) give one 2 × 2 tensor per cue and scale.  The
hand-weighted combination (:func:`imgcut.cues.combine_cues`) reads only their weighted sum
across the dominant orientation.  A boundary model instead reads, at every pixel, each cue's
response *across* the dominant orientation of the combined tensor and *along* it (a texture
interior answers in both directions, an edge in one), plus the combined tensor's smaller
eigenvalue, and maps them through a one-hidden-layer network fitted by logistic regression to
human boundaries (Martin, Fowlkes & Malik 2004 fitted the cue combination by logistic
regression and other classifiers; this is the same idea with orientation-aware inputs).  The
probability is mapped back to the scale of the hand-weighted strength by a monotone quantile
map fitted on the same images, and the combined tensor is rescaled pixel by pixel, so its
orientation (used by the oriented watershed arcs) is kept and every later stage, its
contrast normalisation and hierarchy levels, works on the same scale as before.

Models are plain JSON (weights, input names, provenance) in ``imgcut/models/``; the ``photo``
preset's model was fitted on the BSDS500 *train* split only by
``benchmarks/train_boundary_model.py``.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

from .cues import boundary_strength

__all__ = [
    "BoundaryModel",
    "oriented_features",
    "boundary_probability",
    "apply_boundary_model",
    "apply_preset_model",
    "model_applies",
    "fit_boundary_model",
    "fit_strength_map",
    "load_boundary_model",
    "model_digest",
    "save_boundary_model",
    "PACKAGED_MODELS",
]

MODEL_DIR = Path(__file__).resolve().parent / "models"
#: Names of the models shipped with the package (``imgcut/models/<name>.json``).
PACKAGED_MODELS = ("photo-bsds500-train",)


@dataclass(frozen=True, eq=False)
class BoundaryModel:
    """A fitted boundary model.

    Attributes
    ----------
    name : str
        Model name.
    cue_names : tuple of str
        Cue entries the model reads (:attr:`imgcut.cues.CueTensors.names`), in order.
    mean, scale : ndarray, shape (F,)
        Input standardisation, ``F = 2 · len(cue_names) + 1``.
    hidden_weights : ndarray, shape (F, H)
        First layer (``H = 0``: logistic regression on the inputs).
    hidden_bias : ndarray, shape (H,)
    output_weights : ndarray, shape (H,) or (F,) when ``H = 0``
    output_bias : float
    map_probability, map_strength : ndarray
        Increasing knots of the monotone map from probability to strength.
    provenance : dict
        How the model was fitted (split, images, samples, loss, script).
    """

    name: str
    cue_names: tuple[str, ...]
    mean: np.ndarray
    scale: np.ndarray
    hidden_weights: np.ndarray
    hidden_bias: np.ndarray
    output_weights: np.ndarray
    output_bias: float
    map_probability: np.ndarray
    map_strength: np.ndarray
    provenance: dict = field(default_factory=dict)

    @property
    def n_hidden(self) -> int:
        """Hidden units (0 for logistic regression)."""
        return int(self.hidden_weights.shape[1]) if self.hidden_weights.size else 0


def oriented_features(tensors: np.ndarray, combined: np.ndarray) -> np.ndarray:
    """Each cue's strength across and along the dominant orientation of the combined tensor.

    Parameters
    ----------
    tensors : ndarray, shape (K, 3, H, W)
        Cue tensors ``(Txx, Txy, Tyy)`` (:attr:`imgcut.cues.CueTensors.tensors`, or a subset).
    combined : ndarray, shape (3, H, W)
        Their combination (:func:`imgcut.cues.combine_cues`), which sets the orientation.

    Returns
    -------
    ndarray, shape (H, W, 2K + 1), float32
        ``sqrt(nᵀ T_k n)`` for every cue (``n`` the unit normal of the combined tensor's largest
        eigenvalue), then ``sqrt(mᵀ T_k m)`` with ``m ⟂ n``, then ``sqrt`` of the combined
        tensor's smaller eigenvalue; all clipped to [0, 1].

    Examples
    --------
    >>> import numpy as np
    >>> t = np.zeros((1, 3, 1, 1), np.float32); t[0, 0] = 0.25  # an edge with normal along x
    >>> oriented_features(t, t[0]).ravel().tolist()
    [0.5, 0.0, 0.0]
    """
    tensors = np.asarray(tensors, dtype=np.float32)
    combined = np.asarray(combined)
    if tensors.ndim != 4 or tensors.shape[1] != 3 or combined.shape != tensors.shape[1:]:
        raise ValueError(
            f"need tensors (K, 3, H, W) and combined (3, H, W); got {tensors.shape}, "
            f"{combined.shape}"
        )
    txx, txy, tyy = (combined[i].astype(np.float64) for i in range(3))
    theta = 0.5 * np.arctan2(2.0 * txy, txx - tyy)
    c, s = np.cos(theta), np.sin(theta)
    cc, cs2, ss = c * c, 2.0 * c * s, s * s
    k = tensors.shape[0]
    out = np.empty(combined.shape[1:] + (2 * k + 1,), np.float32)
    for i in range(k):
        t = tensors[i]
        out[..., i] = np.sqrt(np.clip(cc * t[0] + cs2 * t[1] + ss * t[2], 0.0, 1.0))
        out[..., k + i] = np.sqrt(np.clip(ss * t[0] - cs2 * t[1] + cc * t[2], 0.0, 1.0))
    half_tr = 0.5 * (txx + tyy)
    disc = np.sqrt(np.maximum(0.25 * (txx - tyy) ** 2 + txy**2, 0.0))
    out[..., 2 * k] = np.sqrt(np.clip(half_tr - disc, 0.0, 1.0))
    return out


def _logits(model: BoundaryModel, x: np.ndarray) -> np.ndarray:
    z = (x - model.mean) / model.scale
    if model.n_hidden:
        z = np.tanh(z @ model.hidden_weights + model.hidden_bias)
    return z @ model.output_weights + model.output_bias


def boundary_probability(model: BoundaryModel, features: np.ndarray) -> np.ndarray:
    """The model's boundary probability for feature rows (any leading shape).

    Parameters
    ----------
    model : BoundaryModel
    features : ndarray, shape (..., F)
        From :func:`oriented_features` for ``model.cue_names``.

    Returns
    -------
    ndarray, shape (...), float64, in (0, 1)

    Examples
    --------
    >>> import numpy as np
    >>> m = BoundaryModel("demo", ("b@1",), np.zeros(3), np.ones(3), np.zeros((3, 0)),
    ...                   np.zeros(0), np.array([4.0, 0, 0]), -2.0, np.array([0.0, 1]),
    ...                   np.array([0.0, 1]))
    >>> boundary_probability(m, np.array([[0.0, 0, 0], [1.0, 0, 0]])).round(3).tolist()
    [0.119, 0.881]
    """
    x = np.asarray(features)
    if x.shape[-1] != model.mean.shape[0]:
        raise ValueError(
            f"model {model.name!r} expects {model.mean.shape[0]} features; got {x.shape[-1]}"
        )
    flat = x.reshape(-1, x.shape[-1])
    p = np.empty(flat.shape[0])
    step = 1 << 16  # float64 copies one block at a time: bounded memory for megapixel images
    for start in range(0, flat.shape[0], step):
        block = flat[start : start + step].astype(np.float64)
        p[start : start + step] = 0.5 * (1.0 + np.tanh(0.5 * _logits(model, block)))
    return p.reshape(x.shape[:-1])


def apply_boundary_model(model: BoundaryModel, cues, combined: np.ndarray) -> np.ndarray:
    """Rescale a combined cue tensor so its strength is the model's mapped boundary probability.

    Parameters
    ----------
    model : BoundaryModel
    cues : imgcut.cues.CueTensors
        Must hold every entry of ``model.cue_names``.
    combined : ndarray, shape (3, H, W)
        The preset's combination of ``cues`` (sets the orientation).

    Returns
    -------
    ndarray, shape (3, H, W), float32
        ``T · (E′ / E)²`` clipped to [−1, 1], with ``E = sqrt(λ_max(T))`` and ``E′`` the
        model's probability through its strength map; the orientation of ``T`` is unchanged.

    Raises
    ------
    ValueError
        If a cue the model reads is missing.

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.cues import CueTensors, boundary_strength
    >>> t = np.zeros((1, 3, 1, 1), np.float32); t[0, 0] = 0.25  # strength 0.5 across x
    >>> m = BoundaryModel("demo", ("b@1",), np.zeros(3), np.ones(3), np.zeros((3, 0)),
    ...                   np.zeros(0), np.array([4.0, 0, 0]), -2.0, np.array([0.0, 1]),
    ...                   np.array([0.0, 1]))
    >>> out = apply_boundary_model(m, CueTensors(("b@1",), t, None), t[0])
    >>> round(float(boundary_strength(out)[0, 0]), 3)  # the probability at feature 0.5
    0.5
    """
    index = {n: i for i, n in enumerate(cues.names)}
    missing = [n for n in model.cue_names if n not in index]
    if missing:
        raise ValueError(
            f"boundary model {model.name!r} reads cues {missing} that the preset does not compute"
        )
    feats = oriented_features(cues.tensors[[index[n] for n in model.cue_names]], combined)
    prob = boundary_probability(model, feats)
    target = np.interp(prob, model.map_probability, model.map_strength)
    strength = boundary_strength(combined)
    gain = (target / np.maximum(strength, 1e-6)) ** 2
    return np.clip(combined * gain.astype(np.float32), -1.0, 1.0).astype(np.float32)


def model_applies(model: BoundaryModel, channels) -> bool:
    """Whether images with these cue channels hold every input of the model.

    Parameters
    ----------
    model : BoundaryModel
    channels : sequence of str
        Scalar cue channels of the image (:func:`imgcut.cues.channel_names`); textons are
        always computed.

    Returns
    -------
    bool

    Examples
    --------
    >>> from imgcut.cues import channel_names
    >>> m = load_boundary_model("photo-bsds500-train")
    >>> model_applies(m, channel_names((4, 4, 3), "lab")), model_applies(m, ("brightness",))
    (True, False)
    """
    have = set(channels) | {"texture"}
    return all(name.partition("@")[0] in have for name in model.cue_names)


def apply_preset_model(preset, cues, combined: np.ndarray) -> np.ndarray:
    """A preset's combined tensor through its boundary model, where the cues allow it.

    Parameters
    ----------
    preset : imgcut.presets.BoundaryPreset
    cues : imgcut.cues.CueTensors
    combined : ndarray, shape (3, H, W)
        ``combine_cues(cues, preset.weights())``.

    Returns
    -------
    ndarray, shape (3, H, W)
        :func:`apply_boundary_model` when the preset names a model and ``cues`` hold all its
        inputs; ``combined`` unchanged otherwise (no model, or a grey or non-RGB image under
        a colour model: the hand-weighted strength).

    Examples
    --------
    >>> import numpy as np
    >>> from imgcut.cues import CueTensors
    >>> from imgcut.presets import get_preset
    >>> t = np.zeros((1, 3, 2, 2), np.float32)
    >>> grey, combined = CueTensors(("brightness@2",), t, None), t[0]
    >>> apply_preset_model(get_preset("photo"), grey, combined) is combined  # hand weights
    True
    """
    if not preset.boundary_model:
        return combined
    model = load_boundary_model(preset.boundary_model)
    if not set(model.cue_names) <= set(cues.names):
        return combined
    return apply_boundary_model(model, cues, combined)


def fit_boundary_model(
    features: np.ndarray,
    target: np.ndarray,
    weights: np.ndarray | None = None,
    *,
    cue_names=(),
    n_hidden: int = 16,
    max_iter: int = 250,
    seed: int = 0,
    name: str = "model",
) -> BoundaryModel:
    """Fit the network by weighted logistic loss with soft targets (L-BFGS).

    Parameters
    ----------
    features : ndarray, shape (N, F)
        Rows of :func:`oriented_features`.
    target : ndarray, shape (N,)
        Boundary probability per row in [0, 1] (e.g. the fraction of humans marking it).
    weights : ndarray, shape (N,), optional
        Sample weights (e.g. the inverse sampling rate of negatives).
    cue_names : sequence of str
        The cue entries behind the features (stored in the model).
    n_hidden : int, default 16
        Hidden tanh units; 0 fits logistic regression.
    max_iter : int, default 250
        L-BFGS iterations.
    seed : int, default 0
        Seeds the initial weights.
    name : str

    Returns
    -------
    BoundaryModel
        With an identity strength map (knots 0 and 1); see :func:`fit_strength_map`.

    References
    ----------
    D. Martin, C. Fowlkes, J. Malik, "Learning to detect natural image boundaries using local
    brightness, color, and texture cues", IEEE TPAMI 26(5), 2004.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.linspace(0, 1, 200)[:, None].repeat(3, 1); y = (x[:, 0] > 0.5).astype(float)
    >>> m = fit_boundary_model(x, y, cue_names=("b@1",), n_hidden=0)
    >>> bool(boundary_probability(m, x[-1:])[0] > 0.9 > 0.1 > boundary_probability(m, x[:1])[0])
    True
    """
    x = np.asarray(features, dtype=np.float64)
    y = np.asarray(target, dtype=np.float64)
    if x.ndim != 2 or y.shape != (x.shape[0],) or x.shape[0] == 0:
        raise ValueError(f"need features (N, F) and target (N,); got {x.shape}, {y.shape}")
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=np.float64)
    w = w / w.sum()
    mean, scale = x.mean(0), x.std(0) + 1e-6
    z = (x - mean) / scale
    f = z.shape[1]
    rng = np.random.default_rng(seed)
    h = int(n_hidden)
    theta0 = rng.normal(0.0, 0.3, f * h + 2 * h + 1) if h else np.zeros(f + 1)

    def unpack(th):
        if not h:
            return None, None, th[:f], th[f]
        return th[: f * h].reshape(f, h), th[f * h : f * h + h], th[f * h + h : -1], th[-1]

    def loss(th):
        w1, b1, w2, b2 = unpack(th)
        a = z if w1 is None else np.tanh(z @ w1 + b1)
        logit = a @ w2 + b2
        p = 0.5 * (1.0 + np.tanh(0.5 * logit))
        value = np.sum(w * (np.logaddexp(0.0, logit) - y * logit))
        g = w * (p - y)
        if w1 is None:
            return value, np.concatenate([z.T @ g, [g.sum()]])
        ga = np.outer(g, w2) * (1.0 - a * a)
        return value, np.concatenate([(z.T @ ga).ravel(), ga.sum(0), a.T @ g, [g.sum()]])

    res = minimize(loss, theta0, jac=True, method="L-BFGS-B", options={"maxiter": max_iter})
    w1, b1, w2, b2 = unpack(res.x)
    return BoundaryModel(
        name=name,
        cue_names=tuple(cue_names),
        mean=mean,
        scale=scale,
        hidden_weights=np.zeros((f, 0)) if w1 is None else w1,
        hidden_bias=np.zeros(0) if b1 is None else b1,
        output_weights=w2,
        output_bias=float(b2),
        map_probability=np.array([0.0, 1.0]),
        map_strength=np.array([0.0, 1.0]),
        provenance={"loss": float(res.fun), "iterations": int(res.nit)},
    )


def fit_strength_map(
    probability: np.ndarray, strength: np.ndarray, n_knots: int = 401
) -> tuple[np.ndarray, np.ndarray]:
    """Monotone quantile map from probabilities to strengths (equal marginal distributions).

    Parameters
    ----------
    probability, strength : ndarray
        Pooled pixel values of the model's probability and of the hand-weighted strength.
    n_knots : int, default 401

    Returns
    -------
    (ndarray, ndarray)
        Strictly increasing probability knots and non-decreasing strength knots for
        ``numpy.interp``.

    Examples
    --------
    >>> import numpy as np
    >>> p, e = fit_strength_map(np.linspace(0, 1, 101), np.linspace(0, 0.5, 101), 3)
    >>> p.tolist(), e.tolist()
    ([0.0, 0.5, 1.0], [0.0, 0.25, 0.5])
    """
    q = np.linspace(0.0, 1.0, n_knots)
    kp = np.quantile(np.ravel(probability), q)
    ke = np.quantile(np.ravel(strength), q)
    kp, first = np.unique(kp, return_index=True)
    return kp, ke[first]


def _to_json(model: BoundaryModel) -> dict:
    return {
        "name": model.name,
        "cue_names": list(model.cue_names),
        "mean": model.mean.tolist(),
        "scale": model.scale.tolist(),
        "hidden_weights": model.hidden_weights.tolist(),
        "hidden_bias": model.hidden_bias.tolist(),
        "output_weights": model.output_weights.tolist(),
        "output_bias": model.output_bias,
        "map_probability": model.map_probability.tolist(),
        "map_strength": model.map_strength.tolist(),
        "provenance": model.provenance,
    }


def save_boundary_model(
    model: BoundaryModel, path: str | os.PathLike[str], *, overwrite: bool = False
) -> Path:
    """Write a model as JSON atomically (:func:`imgcut.io.atomic_write`).

    Parameters
    ----------
    model : BoundaryModel
    path : path-like
    overwrite : bool, default False
        Replace an existing file; otherwise an existing file is an error.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    FileExistsError
        If ``path`` exists and ``overwrite`` is False.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> m = load_boundary_model("photo-bsds500-train")
    >>> path = save_boundary_model(m, pathlib.Path(tempfile.mkdtemp()) / "copy.json")
    >>> load_boundary_model(path).cue_names == m.cue_names
    True
    """
    from .io import atomic_write

    text = json.dumps(_to_json(model), indent=1) + "\n"
    return atomic_write(path, text.encode(), overwrite=overwrite)


@lru_cache(maxsize=8)
def _load(path: str) -> BoundaryModel:
    try:
        d = json.loads(Path(path).read_text())
        f = len(d["mean"])
        w1 = np.asarray(d["hidden_weights"], dtype=np.float64).reshape(f, -1)
        model = BoundaryModel(
            name=str(d["name"]),
            cue_names=tuple(d["cue_names"]),
            mean=np.asarray(d["mean"], dtype=np.float64),
            scale=np.asarray(d["scale"], dtype=np.float64),
            hidden_weights=w1,
            hidden_bias=np.asarray(d["hidden_bias"], dtype=np.float64),
            output_weights=np.asarray(d["output_weights"], dtype=np.float64),
            output_bias=float(d["output_bias"]),
            map_probability=np.asarray(d["map_probability"], dtype=np.float64),
            map_strength=np.asarray(d["map_strength"], dtype=np.float64),
            provenance=dict(d.get("provenance", {})),
        )
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise ValueError(f"{path}: not a readable boundary model ({exc})") from None
    n_in = 2 * len(model.cue_names) + 1
    n_out = model.n_hidden or n_in
    if (
        model.mean.shape != (n_in,)
        or model.scale.shape != (n_in,)
        or model.hidden_bias.shape != (model.n_hidden,)
        or model.output_weights.shape != (n_out,)
        or model.map_probability.shape != model.map_strength.shape
        or model.map_probability.size < 2
        or np.any(np.diff(model.map_probability) <= 0)
    ):
        raise ValueError(f"{path}: boundary model arrays have inconsistent shapes")
    return model


def _model_path(name: str | os.PathLike[str]) -> Path:
    if str(name) in PACKAGED_MODELS:
        return MODEL_DIR / f"{name}.json"
    path = Path(name)
    if not path.is_file():
        raise ValueError(
            f"boundary model {str(name)!r} is neither a packaged model "
            f"({', '.join(PACKAGED_MODELS)}) nor a file"
        )
    return path.resolve()


def model_digest(name: str | os.PathLike[str]) -> str:
    """SHA-256 of a model's file (packaged name or path), for run records.

    Examples
    --------
    >>> len(model_digest("photo-bsds500-train"))
    64
    """
    import hashlib

    return hashlib.sha256(_model_path(name).read_bytes()).hexdigest()


def load_boundary_model(name: str | os.PathLike[str]) -> BoundaryModel:
    """A packaged model by name (:data:`PACKAGED_MODELS`) or a model JSON file by path.

    Parameters
    ----------
    name : str or path-like

    Returns
    -------
    BoundaryModel

    Raises
    ------
    ValueError
        If no such model exists or the file is not a valid model.

    Examples
    --------
    >>> load_boundary_model("photo-bsds500-train").n_hidden
    16
    """
    return _load(str(_model_path(name)))
