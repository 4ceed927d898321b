"""``imgcut evaluate DATA_DIR --out REPORT_DIR`` and ``imgcut score SEGMENTATION GROUND_TRUTH...``.

A thin layer over :mod:`imgcut.evaluation`: options, progress and messages only. Every
failure is one line on stderr naming the file and the problem. Exit status: 0 all done;
1 a data problem (``score``: unreadable or mismatched file; ``evaluate``: at least one
image failed, the report is still written); 2 usage (bad option, missing path, no
dataset layout); 130 interrupted.
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Annotated, Any

import typer

from imgcut.cli._app import app
from imgcut.cli._options import EXIT_DATA, EXIT_INTERRUPTED, EXIT_USAGE, OneLineErrors, fail
from imgcut.cli._progress import CountingBar

__all__ = ["evaluate_command", "score_command", "EXIT_DATA", "EXIT_USAGE"]


def _parse_ints(text: str, flag: str) -> tuple[int, ...]:
    try:
        vals = tuple(int(t) for t in text.replace(" ", "").split(",") if t)
    except ValueError:
        raise ValueError(f"{flag} must be comma-separated integers, got {text!r}") from None
    if not vals or min(vals) < 1:
        raise ValueError(f"{flag} must list region counts >= 1, got {text!r}")
    return tuple(sorted(set(vals)))


def _parse_levels(text: str) -> tuple[float, ...]:
    try:
        vals = tuple(float(t) for t in text.replace(" ", "").split(",") if t)
    except ValueError:
        raise ValueError(f"--levels must be comma-separated numbers, got {text!r}") from None
    if not vals or any(not math.isfinite(v) or v < 0 for v in vals):
        raise ValueError(f"--levels must list hierarchy levels >= 0, got {text!r}")
    return tuple(sorted(set(vals)))


def _parse_floats(text: str, flag: str) -> tuple[float, ...]:
    try:
        vals = tuple(float(t) for t in text.replace(" ", "").split(",") if t)
    except ValueError:
        raise ValueError(f"{flag} must be comma-separated numbers, got {text!r}") from None
    if not vals or any(not (0 < v <= 1) for v in vals):
        raise ValueError(f"{flag} must list IoU thresholds in (0, 1], got {text!r}")
    return vals


class _Bar(CountingBar):
    """Scoring progress on stderr: a rich bar on a terminal, plain lines otherwise."""

    def __init__(self, total: int, quiet: bool) -> None:
        super().__init__("scoring", "{task.fields[failed]} failed", quiet=quiet)
        self.total, self.n, self.failed = total, 0, 0

    def __enter__(self) -> _Bar:
        super().__enter__()
        self.show(total=self.total, failed=0)
        return self

    def __call__(self, name: str, error: str | None) -> None:
        self.n += 1
        if error is not None:
            self.failed += 1
            self.say(f"imgcut evaluate: {name}: failed, skipped: {error}")
        if self.live:
            self.show(completed=self.n, failed=self.failed)
        elif not self.quiet:
            self.say(f"[{self.n}/{self.total}] {name} {'failed' if error else 'ok'}")


@app.command("evaluate", no_args_is_help=True, cls=OneLineErrors)
def evaluate_command(
    data_dir: Annotated[
        Path,
        typer.Argument(
            help="Dataset folder: images/ with groundTruth/*.mat (BSDS layout) or masks/ "
            "(label images, 0 = background)."
        ),
    ],
    out: Annotated[
        Path | None, typer.Option("--out", "-o", help="Report folder (created). Required.")
    ] = None,
    regions: Annotated[
        str | None,
        typer.Option(
            "--regions",
            help="Region counts swept per image, comma-separated (default: "
            "2,3,4,6,8,12,16,24,32 for recursive and kway; boundary sweeps --levels).",
            show_default=False,
        ),
    ] = None,
    levels: Annotated[
        str | None,
        typer.Option(
            "--levels",
            help="Method boundary: hierarchy levels swept per image, comma-separated "
            "(default: the photo preset's level sweep, 0.3 to 0.9 in steps of 0.025).",
            show_default=False,
        ),
    ] = None,
    mode: Annotated[
        str,
        typer.Option(
            "--mode",
            help="auto (regions for BSDS layout, objects for masks), regions or objects.",
        ),
    ] = "auto",
    method: Annotated[
        str,
        typer.Option(
            "--method",
            help="Region method, as for segment: auto (boundary for 3-channel colour images, "
            "else recursive; decided from the first image), recursive, kway or boundary "
            "(one region hierarchy per image gives the whole sweep).",
        ),
    ] = "auto",
    limit: Annotated[
        int | None, typer.Option("--limit", help="Score only the first N images.")
    ] = None,
    jobs: Annotated[int, typer.Option("--jobs", "-j", help="Worker processes.")] = 1,
    max_dist: Annotated[
        float,
        typer.Option("--max-dist", help="Boundary tolerance as a fraction of the diagonal."),
    ] = 0.0075,
    iou: Annotated[
        str, typer.Option("--iou", help="Objects mode: IoU thresholds, comma-separated.")
    ] = "0.5,0.6,0.7,0.8,0.9",
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress output.")] = False,
) -> None:
    """Segment every image of a dataset folder and score it against the human ground truth.

    Writes per_image.csv, summary.csv, summary.md, a precision-recall plot, a histogram
    and overlays of the best and worst images into the --out folder. Without --method,
    colour photographs are scored with the boundary method, as segment would run them.
    """
    from imgcut.evaluation import (
        EVALUATION_METHODS,
        _first_shape,
        evaluate_dataset,
        resolve_method,
        write_report,
    )
    from imgcut.groundtruth import GroundTruthError, find_dataset

    name = "evaluate"
    try:
        if out is None:
            raise ValueError("--out REPORT_DIR is required (the folder for the report)")
        if limit is not None and limit < 1:
            raise ValueError(f"--limit must be >= 1, got {limit}")
        if jobs < 1:
            raise ValueError(f"--jobs must be >= 1, got {jobs}")
        counts = _parse_ints(regions, "--regions") if regions is not None else None
        lvls = _parse_levels(levels) if levels is not None else None
        if counts is not None and lvls is not None:
            raise ValueError("give --regions (region counts) or --levels (hierarchy levels)")
        ths = _parse_floats(iou, "--iou")
        if mode not in ("auto", "regions", "objects"):
            raise ValueError(f"--mode must be auto, regions or objects; got {mode!r}")
        if method not in EVALUATION_METHODS:
            raise ValueError(
                f"--method must be one of {', '.join(EVALUATION_METHODS)}; got {method!r}"
            )
        if lvls is not None and method in ("recursive", "kway"):
            raise ValueError(f"--levels applies to --method boundary (or auto), not {method}")
        if not (0 < max_dist < 1):
            raise ValueError(f"--max-dist must be in (0, 1), got {max_dist}")
        if not data_dir.exists():
            raise ValueError(f"{data_dir}: no such folder")
        dataset = find_dataset(data_dir)
        objects = mode == "objects" or (mode == "auto" and dataset.layout != "bsds")
        if objects and method in ("kway", "boundary"):
            raise ValueError(
                f"--method {method} applies to regions mode; objects mode segments with "
                "imgcut.objects.segment_objects"
            )
        if lvls is not None and method == "auto" and not objects:
            items = dataset.items[:limit] if limit else dataset.items
            first = _first_shape(items)
            if first is not None:
                used, why = resolve_method("auto", first[1])
                if used != "boundary":
                    raise ValueError(
                        f"--levels applies to method boundary; auto picks {used} here ({why}; "
                        f"first image {first[0]})"
                    )
        if out.exists() and not out.is_dir():
            raise ValueError(f"{out}: exists and is not a folder")
        if out.resolve() == data_dir.resolve():
            raise ValueError(f"{out}: the report folder must differ from the dataset folder")
    except (ValueError, GroundTruthError) as exc:
        raise fail(name, exc, EXIT_USAGE) from None
    total = len(dataset.items[:limit] if limit else dataset.items)
    for p in dataset.unmatched:
        typer.echo(f"imgcut evaluate: {p}: no ground truth of the same name, skipped", err=True)
    try:
        with _Bar(total, quiet) as bar:
            result = evaluate_dataset(
                data_dir,
                counts=counts,
                levels=lvls,
                mode=mode,
                method=method,
                limit=limit,
                jobs=jobs,
                max_dist=max_dist,
                iou_thresholds=ths,
                progress=bar,
            )
        written = write_report(result, out)
    except KeyboardInterrupt:
        raise fail(name, "interrupted", EXIT_INTERRUPTED) from None
    except (ValueError, OSError) as exc:
        raise fail(name, exc, EXIT_DATA) from None
    for im in result.images:
        if im.warnings and not quiet:
            more = f" (+{len(im.warnings) - 1} more)" if len(im.warnings) > 1 else ""
            typer.echo(f"imgcut evaluate: {im.name}: warning: {im.warnings[0]}{more}", err=True)
    _print_summary(result, out, len(written))
    if result.failures:
        raise typer.Exit(EXIT_DATA)


def _print_summary(result: Any, out: Path, n_files: int) -> None:
    if result.mode == "regions":
        r, b = result.regions, result.boundaries
        typer.echo(
            f"{len(result.images)} images: covering ODS {r.covering_ods:.3f} OIS "
            f"{r.covering_ois:.3f} Best {r.covering_best:.3f}; PRI ODS {r.pri_ods:.3f}; "
            f"VoI ODS {r.voi_ods:.3f}; boundary F ODS {b.ods_f:.3f} OIS {b.ois_f:.3f}"
        )
        sweep = "Levels" if result.sweep == "level" else "Region counts"
        typer.echo(
            f"method {result.method}: {result.method_reason}. {sweep} swept: "
            + ", ".join(f"{v:g}" if result.sweep == "level" else str(v) for v in result.counts)
        )
    else:
        s = result.instances
        typer.echo(
            f"{len(result.images)} images: F1 {s.f1[0]:.3f} (P {s.precision[0]:.3f}, "
            f"R {s.recall[0]:.3f}) at IoU {s.thresholds[0]:g}; split {s.n_split}, "
            f"merged {s.n_merged}"
        )
    if result.failures:
        typer.echo(f"{len(result.failures)} images failed (listed in summary.md)")
    typer.echo(f"report: {out / 'summary.md'} ({n_files} files)")


def _read_segmentation(path: Path) -> Any:
    import numpy as np

    from imgcut.groundtruth import read_label_image

    if path.suffix.lower() == ".npy":
        try:
            arr = np.load(path, allow_pickle=False)
        except Exception as exc:
            raise ValueError(f"{path}: cannot read as a .npy array ({exc})") from None
        if arr.ndim != 2 or arr.dtype.kind not in "iub":
            raise ValueError(
                f"{path}: expected a 2-D integer label array, got {arr.dtype} {arr.shape}"
            )
        return arr
    return read_label_image(path)


def _jsonable(d: dict[str, Any]) -> dict[str, Any]:
    out = {}
    for k, v in d.items():
        v = v.tolist() if hasattr(v, "tolist") else v
        out[k] = None if isinstance(v, float) and not math.isfinite(v) else v
    return out


@app.command("score", no_args_is_help=True, cls=OneLineErrors)
def score_command(
    segmentation: Annotated[
        Path, typer.Argument(help="Label image to score (PNG/TIFF/.npy; 0 = no region).")
    ],
    ground_truth: Annotated[
        list[Path],
        typer.Argument(
            help="Human segmentations: .mat (BSDS), label images (0 = unlabelled) or folders."
        ),
    ],
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
    objects: Annotated[
        bool, typer.Option("--objects", help="Instance measures (first ground truth only).")
    ] = False,
    max_dist: Annotated[
        float,
        typer.Option("--max-dist", help="Boundary tolerance as a fraction of the diagonal."),
    ] = 0.0075,
    iou: Annotated[
        str, typer.Option("--iou", help="With --objects: IoU thresholds, comma-separated.")
    ] = "0.5,0.6,0.7,0.8,0.9",
) -> None:
    """Print covering, PRI, VoI and boundary P/R/F of one segmentation (or object scores)."""
    from imgcut.evaluation import score_image
    from imgcut.groundtruth import GroundTruth, GroundTruthError, read_ground_truth
    from imgcut.metrics import instance_scores

    name = "score"
    try:
        ths = _parse_floats(iou, "--iou")
        if not (0 < max_dist < 1):
            raise ValueError(f"--max-dist must be in (0, 1), got {max_dist}")
        for p in [segmentation, *ground_truth]:
            if not p.exists():
                raise ValueError(f"{p}: no such file or folder")
    except ValueError as exc:
        raise fail(name, exc, EXIT_USAGE) from None
    try:
        seg = _read_segmentation(segmentation)
        truths = [read_ground_truth(p) for p in ground_truth]
        segs = tuple(s for t in truths for s in t.segmentations)
        for t, p in zip(truths, ground_truth, strict=True):
            if t.shape != seg.shape:
                raise ValueError(
                    f"{p}: ground truth shape {t.shape} differs from the segmentation {seg.shape}"
                )
        bnds = None
        if all(t.boundaries is not None for t in truths):
            bnds = tuple(b for t in truths for b in t.boundaries)  # type: ignore[union-attr]
        truth = GroundTruth(segs, bnds)
        if objects:
            s = instance_scores(seg, segs[0], thresholds=ths)
            result: dict[str, Any] = {
                k: getattr(s, k)
                for k in (
                    "thresholds", "precision", "recall", "f1", "mean_iou", "true_positives",
                    "false_positives", "false_negatives", "n_true", "n_predicted", "n_split",
                    "n_merged",
                )
            }  # fmt: skip
        else:
            result = score_image(seg, truth, max_dist=max_dist).as_dict()
    except (ValueError, GroundTruthError, OSError) as exc:
        raise fail(name, exc, EXIT_DATA) from None
    result = _jsonable(result)
    if as_json:
        typer.echo(json.dumps(result))
        return
    width = max(len(k) for k in result)
    for k, v in result.items():
        if isinstance(v, list):
            v = ", ".join(f"{x:.4g}" if isinstance(x, float) else str(x) for x in v)
        elif isinstance(v, float):
            v = f"{v:.4f}"
        typer.echo(f"{k:<{width}}  {v}")
