"""Write an evaluation report: per-image CSV, summary CSV + Markdown, PNG plots, overlays.

Used by :func:`imgcut.evaluation.write_report`; plots use matplotlib's object API with
the Agg canvas (no pyplot state, safe in worker processes and without a display).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["write_report_files"]


def _fmt(v: Any) -> str:
    if isinstance(v, float | np.floating):
        return "nan" if not np.isfinite(v) else f"{float(v):.6g}"
    return str(v)


def _csv_bytes(header: list[str], rows: list[list[Any]]) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for r in rows:
        w.writerow([_fmt(v) for v in r])
    return buf.getvalue().encode()


def _write(path: Path, data: bytes) -> None:
    from imgcut.io import atomic_write

    atomic_write(path, data)


def _is_level(res: Any) -> bool:
    return getattr(res, "sweep", "regions") == "level"


def _sweep_label(res: Any, value: Any) -> str:
    """One sweep entry as text: ``"0.625"`` (level) or ``"8"`` (region count)."""
    return f"{float(value):g}" if _is_level(res) else str(value)


def _ods_regions(res: Any, index: int) -> float:
    """Mean number of regions over the images at sweep entry ``index``."""
    return float(np.mean([im.n_regions[index] for im in res.images]))


def _per_image_rows(res: Any) -> tuple[list[str], list[list[Any]]]:
    if res.mode == "regions":
        keys = list(res.images[0].scores[0].as_dict())
        what = "level" if _is_level(res) else "requested_regions"
        header = ["image", "method", "sweep_index", what, "regions", *keys, "seconds"]
        method = getattr(res, "method", "")
        rows = []
        for im in res.images:
            for i, (c, n, sc) in enumerate(zip(im.counts, im.n_regions, im.scores, strict=True)):
                rows.append(
                    [im.name, method, i, c, n, *sc.as_dict().values(), round(im.seconds, 3)]
                )
        return header, rows
    header = [
        "image", "iou_threshold", "true_objects", "found_objects", "true_positives",
        "false_positives", "false_negatives", "precision", "recall", "f1", "mean_iou",
        "split", "merged", "seconds",
    ]  # fmt: skip
    rows = []
    for im in res.images:
        s = im.instance
        for k, t in enumerate(s.thresholds):
            rows.append([
                im.name, t, s.n_true, s.n_predicted, s.true_positives[k], s.false_positives[k],
                s.false_negatives[k], s.precision[k], s.recall[k], s.f1[k], s.mean_iou[k],
                s.n_split, s.n_merged, round(im.seconds, 3),
            ])  # fmt: skip
    return header, rows


def _summary_rows(res: Any) -> tuple[list[str], list[list[Any]]]:
    if res.mode == "regions":
        r, b, c = res.regions, res.boundaries, res.counts
        at = "ODS_level" if _is_level(res) else "ODS_regions"
        header = ["measure", "ODS", at, "ODS_mean_regions", "OIS", "Best"]
        rows = [
            ["covering", r.covering_ods, r.covering_ods_index, r.covering_ois, r.covering_best],
            ["PRI", r.pri_ods, r.pri_ods_index, r.pri_ois, ""],
            ["VoI (bits)", r.voi_ods, r.voi_ods_index, r.voi_ois, ""],
            ["boundary F", b.ods_f, b.ods_index, b.ois_f, ""],
            ["boundary precision", b.ods_precision, b.ods_index, b.ois_precision, ""],
            ["boundary recall", b.ods_recall, b.ods_index, b.ois_recall, ""],
        ]
        rows = [[m, v, c[i], _ods_regions(res, i), *rest] for m, v, i, *rest in rows]
        return header, rows
    s = res.instances
    header = ["iou_threshold", "precision", "recall", "f1", "mean_iou", "tp", "fp", "fn"]
    rows = [
        [t, s.precision[k], s.recall[k], s.f1[k], s.mean_iou[k], s.true_positives[k],
         s.false_positives[k], s.false_negatives[k]]
        for k, t in enumerate(s.thresholds)
    ]  # fmt: skip
    return header, rows


def _markdown(res: Any, header: list[str], rows: list[list[Any]], plots: list[str]) -> bytes:
    ds = res.dataset
    lines = [
        f"# imgcut evaluation: {ds.root.name}",
        "",
        f"- dataset: `{ds.root}` (layout `{ds.layout}`), mode `{res.mode}`",
        f"- images scored: {len(res.images)}; failed and skipped: {len(res.failures)}",
    ]
    m = res.options.get("method")
    if m:
        asked = f" (asked `{m['asked']}`)" if m.get("asked") != m.get("used") else ""
        lines.append(f"- method: `{m['used']}`{asked}: {m['reason']}")
    if res.mode == "regions":
        if _is_level(res):
            lines.append(
                "- hierarchy levels swept (one hierarchy per image, so every image's "
                f"segmentations are nested): {', '.join(_sweep_label(res, t) for t in res.counts)}"
            )
            entry = "level"
        else:
            lines.append(f"- region counts swept: {', '.join(map(str, res.counts))}")
            entry = "region count"
        lines.append(
            f"- boundary tolerance: {res.options.get('max_dist')} x image diagonal; "
            f"VoI in bits (lower is better); ODS = one {entry} for the dataset, "
            f"OIS = best {entry} per image, Best = best {entry} per human region; "
            f"ODS_mean_regions = mean regions per image at the ODS {entry}"
        )
    else:
        s = res.instances
        lines.append(
            f"- objects: {s.n_true} true, {s.n_predicted} found; split {s.n_split}, "
            f"merged {s.n_merged} (majority-overlap rule)"
        )
    if res.options.get("segment"):
        lines.append(f"- segmentation options: `{res.options['segment']}`")
    lines += ["", "| " + " | ".join(header) + " |", "|" + "---|" * len(header)]
    lines += ["| " + " | ".join(_fmt(v) for v in r) + " |" for r in rows]
    if res.failures:
        lines += ["", "## Failed images", ""]
        lines += [f"- `{n}`: {m}" for n, m in res.failures]
    warned = [im for im in res.images if im.warnings]
    if warned:
        lines += ["", "## Warnings", ""]
        lines += [f"- `{im.name}`: {w}" for im in warned for w in im.warnings]
    if plots:
        lines += ["", "## Plots", ""] + [f"![{p}]({p})" for p in plots]
    return ("\n".join(lines) + "\n").encode()


def _figure(w: float, h: float) -> Any:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(w, h), dpi=100)
    FigureCanvasAgg(fig)
    return fig


def _save(fig: Any, path: Path) -> None:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", bbox_inches="tight")
    _write(path, buf.getvalue())


def _pr_curve(res: Any, path: Path) -> None:
    b = res.boundaries
    fig = _figure(5.5, 5)
    ax = fig.add_subplot()
    grid = np.linspace(0.01, 1, 200)
    p, r = np.meshgrid(grid, grid)
    f = 2 * p * r / (p + r)
    cs = ax.contour(r, p, f, levels=np.arange(0.1, 1.0, 0.1), colors="0.8", linewidths=0.7)
    ax.clabel(cs, fmt="F=%.1f", fontsize=7)
    order = np.argsort(b.recall)
    ax.plot(b.recall[order], b.precision[order], "o-", color="tab:red", label="imgcut sweep")
    for k, n in enumerate(res.counts):
        ax.annotate(_sweep_label(res, n), (b.recall[k], b.precision[k]), fontsize=7,
                    xytext=(3, 3), textcoords="offset points")  # fmt: skip
    ax.plot([b.ods_recall], [b.ods_precision], "*", ms=12, color="tab:red",
            label=f"ODS F={b.ods_f:.3f}")  # fmt: skip
    ax.plot([b.ois_recall], [b.ois_precision], "s", color="tab:blue",
            label=f"OIS F={b.ois_f:.3f}")  # fmt: skip
    ax.set(xlim=(0, 1), ylim=(0, 1), xlabel="recall", ylabel="precision",
           title="Boundary precision-recall (labels: "
           f"{'hierarchy level' if _is_level(res) else 'region count'})")  # fmt: skip
    ax.legend(loc="lower left", fontsize=8)
    _save(fig, path)


def _histogram(values: np.ndarray, xlabel: str, title: str, path: Path) -> None:
    fig = _figure(5.5, 3.5)
    ax = fig.add_subplot()
    ax.hist(values, bins=np.linspace(0, 1, 21), color="tab:blue", edgecolor="white")
    ax.axvline(float(np.mean(values)), color="tab:red", label=f"mean {np.mean(values):.3f}")
    ax.set(xlabel=xlabel, ylabel="images", title=title)
    ax.legend(fontsize=8)
    _save(fig, path)


def _overlay_panel(res: Any, im: Any, level: int, score: float, label: str, path: Path) -> None:
    from imgcut.export import display_rgb, render_overlay
    from imgcut.groundtruth import read_ground_truth
    from imgcut.io import read_image

    item = next(i for i in res.dataset.items if i.name == im.name)
    pixels = read_image(item.image).pixels
    truth = read_ground_truth(item.truth)
    labels = im.label_image(level)
    humans = truth.segmentations[:4]
    fig = _figure(3.6 * (1 + len(humans)), 3.4)
    fig.suptitle(im.name, fontsize=8)
    ax = fig.add_subplot(1, 1 + len(humans), 1)
    ax.imshow(render_overlay(pixels, labels, boundary_colour="auto"))
    ax.set_title(f"imgcut: {label} {score:.3f}", fontsize=8)
    ax.axis("off")
    rgb = display_rgb(pixels)
    for k, h in enumerate(humans):
        ax = fig.add_subplot(1, 1 + len(humans), k + 2)
        ax.imshow(render_overlay(rgb, h, boundary_colour="auto"))
        ax.set_title("ground truth" if len(humans) == 1 else f"human {k + 1}", fontsize=8)
        ax.axis("off")
    _save(fig, path)


def write_report_files(res: Any, out_dir: Path, *, n_examples: int = 3) -> list[Path]:
    """Write every report file of ``res`` into ``out_dir``; return the paths written."""
    out_dir.mkdir(parents=True, exist_ok=True)
    written: list[Path] = []

    def put(name: str, data: bytes) -> None:
        _write(out_dir / name, data)
        written.append(out_dir / name)

    h, rows = _per_image_rows(res)
    put("per_image.csv", _csv_bytes(h, rows))
    sh, srows = _summary_rows(res)
    put("summary.csv", _csv_bytes(sh, srows))
    if res.failures:
        put("failures.csv", _csv_bytes(["image", "reason"], [list(f) for f in res.failures]))
    plots: list[str] = []
    if res.mode == "regions":
        _pr_curve(res, out_dir / "boundary_pr.png")
        plots.append("boundary_pr.png")
        level = res.regions.covering_ods_index
        cov = np.array([im.scores[level].region.covering for im in res.images])
        at = (f"level {_sweep_label(res, res.counts[level])}" if _is_level(res)
              else f"{res.counts[level]} regions")  # fmt: skip
        _histogram(cov, "covering", f"Per-image covering at {at} (ODS)",
                   out_dir / "covering_hist.png")  # fmt: skip
        plots.append("covering_hist.png")
        per_image = cov
        name = "covering"
    else:
        per_image = np.array([im.instance.f1[0] for im in res.images])
        th = res.instances.thresholds[0]
        _histogram(per_image, f"F1 at IoU {th:g}", "Per-image object F1", out_dir / "f1_hist.png")
        plots.append("f1_hist.png")
        level = 0
        name = f"F1@{th:g}"
    order = np.argsort(per_image, kind="stable")
    n_best = min(n_examples, (len(order) + 1) // 2)  # best and worst stay distinct images
    best = [int(i) for i in order[::-1][:n_best]]
    worst = [int(i) for i in order[: min(n_examples, len(order) - n_best)]]
    picks = [("best", i) for i in best] + [("worst", i) for i in worst if i not in best]
    for tag, i in picks:
        im = res.images[int(i)]
        fname = f"overlay_{tag}_{im.name}.png"
        try:
            _overlay_panel(res, im, level, float(per_image[i]), name, out_dir / fname)
        except Exception as exc:  # a missing picture must not lose the numbers
            print(f"warning: overlay for {im.name} not drawn ({exc})")
            continue
        plots.append(fname)
    written += [out_dir / p for p in plots]
    put("summary.md", _markdown(res, sh, srows, plots))
    return written
