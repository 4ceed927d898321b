"""A self-contained HTML gallery of a batch: one row per image, thumbnail of its overlay, numbers.

The page is a single ``index.html`` written into the batch output folder. Thumbnails are embedded
as ``data:`` URIs, style and the column sorting script are inline, and every link is relative to
the page, so the folder can be opened from a file share or copied elsewhere with no server and no
network access.
"""

from __future__ import annotations

import base64
import html
import io
import os
from collections.abc import Iterable, Sequence
from pathlib import Path, PurePosixPath
from typing import Any
from urllib.parse import quote

__all__ = ["GALLERY_COLUMNS", "render_gallery", "thumbnail_data_uri", "write_gallery"]

#: Sortable columns: (attribute of the result row, heading, numeric?).
GALLERY_COLUMNS: tuple[tuple[str, str, bool], ...] = (
    ("path", "image", False),
    ("status", "status", False),
    ("regions", "regions", True),
    ("objects", "objects", True),
    ("seconds", "seconds", True),
    ("peak_memory_mb", "peak memory (MiB)", True),
    ("error", "error", False),
)

_STYLE = """
body{font-family:system-ui,sans-serif;margin:1.5em;color:#222}
table{border-collapse:collapse}
th,td{border-bottom:1px solid #ddd;padding:4px 8px;text-align:left;vertical-align:middle}
th{cursor:pointer;user-select:none;background:#f4f4f4;position:sticky;top:0}
th.asc::after{content:" \\25B2"} th.desc::after{content:" \\25BC"}
td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.failed td{background:#fdecea} tr.skipped td{color:#555} tr.pending td{color:#999}
img{display:block;max-width:none;image-rendering:auto}
.none{color:#999;font-size:small}
"""

# Click a heading to sort by it; click again to reverse. Numbers sort numerically (empty cells
# last), text case-insensitively; ties keep their previous order (Array.prototype.sort is stable).
_SCRIPT = """
(function(){
  var table=document.getElementById("results");
  var heads=table.tHead.rows[0].cells;
  function key(row,i,num){var v=row.cells[i].getAttribute("data-v");
    if(num){return v===""?null:parseFloat(v);} return v.toLowerCase();}
  function sortBy(i){
    var th=heads[i], num=th.getAttribute("data-num")==="1";
    var dir=th.classList.contains("asc")?-1:1;
    for(var j=0;j<heads.length;j++){heads[j].classList.remove("asc","desc");}
    th.classList.add(dir===1?"asc":"desc");
    var body=table.tBodies[0], rows=Array.prototype.slice.call(body.rows);
    rows.sort(function(a,b){var x=key(a,i,num),y=key(b,i,num);
      if(x===y){return 0;} if(x===null){return 1;} if(y===null){return -1;}
      return (x<y?-1:1)*dir;});
    rows.forEach(function(r){body.appendChild(r);});
  }
  for(var i=0;i<heads.length;i++){
    if(heads[i].hasAttribute("data-col")){
      heads[i].addEventListener("click",(function(k){return function(){sortBy(k);};})(i));
    }
  }
})();
"""


def _href(relative: str) -> str:
    """URL of a path relative to the page: percent-encoded, ``/`` separators, never absolute."""
    posix = PurePosixPath(relative.replace("\\", "/"))
    bad = (
        not posix.parts
        or posix.is_absolute()
        or ".." in posix.parts
        or ":" in posix.parts[0]  # a drive letter or a URL scheme
    )
    if bad:
        raise ValueError(
            f"gallery links must be relative paths inside the output folder: {relative!r}"
        )
    return quote(posix.as_posix(), safe="/")


def thumbnail_data_uri(path: str | os.PathLike[str], *, size: int = 160) -> str:
    """A small JPEG of an image file, as a ``data:`` URI for embedding in HTML.

    Parameters
    ----------
    path : path-like
        Image file readable by Pillow (the overlay PNG).
    size : int, default 160
        Longest side of the thumbnail in pixels; aspect ratio kept.

    Returns
    -------
    str
        ``"data:image/jpeg;base64,..."``.

    Raises
    ------
    ValueError
        If `size` < 1.
    OSError
        If the file cannot be read or decoded.

    Examples
    --------
    >>> import tempfile
    >>> from PIL import Image
    >>> p = Path(tempfile.mkdtemp()) / "o.png"
    >>> Image.new("RGB", (64, 32), (255, 0, 0)).save(p)
    >>> thumbnail_data_uri(p, size=16).startswith("data:image/jpeg;base64,")
    True
    """
    from PIL import Image

    if size < 1:
        raise ValueError(f"thumbnail size must be a positive number of pixels, got {size}")
    with Image.open(path) as im:
        im.draft("RGB", (size, size))  # fast JPEG decode at reduced size; no-op for PNG
        im = im.convert("RGB")
        im.thumbnail((size, size))
        buffer = io.BytesIO()
        im.save(buffer, format="JPEG", quality=80)
    return "data:image/jpeg;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _value(row: Any, name: str) -> Any:
    return row.get(name) if isinstance(row, dict) else getattr(row, name, None)


def _cell_text(value: Any, name: str) -> str:
    if value is None or value == "":
        return ""
    if name == "seconds":
        return f"{float(value):.2f}"
    if name == "peak_memory_mb":
        return f"{float(value):.0f}"
    return str(value)


def render_gallery(
    rows: Iterable[Any],
    *,
    thumbnails: dict[str, str] | None = None,
    title: str = "imgcut batch",
) -> str:
    """The gallery page as an HTML string.

    Parameters
    ----------
    rows : iterable
        Result rows (`imgcut.batch.ImageResult` or dicts) with ``path``, ``status``, ``error``,
        ``regions``, ``objects``, ``seconds``, ``peak_memory_mb`` and ``overlay`` (overlay path
        relative to the page, ``""`` when none).
    thumbnails : dict, optional
        ``overlay → data URI``; rows without one show their link only.
    title : str, default "imgcut batch"
        Page title and heading.

    Returns
    -------
    str
        A complete HTML5 document with inline style and script and relative links only.

    Raises
    ------
    ValueError
        If an overlay path is absolute or leaves the output folder.

    Examples
    --------
    >>> page = render_gallery([{"path": "a/x.tif", "status": "done", "error": "", "regions": 4,
    ...                         "objects": None, "seconds": 1.5, "peak_memory_mb": 210.0,
    ...                         "overlay": "a/x.overlay.png"}])
    >>> 'href="a/x.overlay.png"' in page and "<table" in page
    True
    """
    thumbnails = thumbnails or {}
    rows = list(rows)
    counts: dict[str, int] = {}
    for row in rows:
        status = str(_value(row, "status"))
        counts[status] = counts.get(status, 0) + 1
    summary = ", ".join(f"{n} {s}" for s, n in sorted(counts.items())) or "no images"
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{html.escape(title)}</title><style>{_STYLE}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f"<p>{len(rows)} images: {html.escape(summary)}. Click a column heading to sort; click "
        'a thumbnail for the full overlay. See also <a href="summary.csv">summary.csv</a>.</p>',
        '<table id="results"><thead><tr><th>overlay</th>',
    ]
    for name, heading, numeric in GALLERY_COLUMNS:
        out.append(f'<th data-col="{name}" data-num="{int(numeric)}">{html.escape(heading)}</th>')
    out.append("</tr></thead><tbody>")
    for row in rows:
        status = str(_value(row, "status") or "")
        overlay = str(_value(row, "overlay") or "")
        out.append(f'<tr class="{html.escape(status, quote=True)}">')
        if overlay:
            href = _href(overlay)
            uri = thumbnails.get(overlay)
            inner = (
                f'<img src="{uri}" alt="overlay of {html.escape(overlay, quote=True)}">'
                if uri
                else html.escape(PurePosixPath(overlay).name)
            )
            out.append(f'<td><a href="{href}">{inner}</a></td>')
        else:
            out.append('<td><span class="none">no overlay</span></td>')
        for name, _, numeric in GALLERY_COLUMNS:
            value = _value(row, name)
            text = _cell_text(value, name)
            sort_key = "" if value is None else str(value)
            css = ' class="num"' if numeric else ""
            out.append(
                f'<td{css} data-v="{html.escape(sort_key, quote=True)}">{html.escape(text)}</td>'
            )
        out.append("</tr>")
    out.append(f"</tbody></table><script>{_SCRIPT}</script></body></html>")
    return "\n".join(out) + "\n"


def write_gallery(
    out_dir: str | os.PathLike[str],
    rows: Sequence[Any],
    *,
    name: str = "index.html",
    title: str | None = None,
    thumbnail_size: int = 160,
) -> Path:
    """Write the gallery page of a batch into its output folder (atomically).

    Parameters
    ----------
    out_dir : path-like
        Batch output folder; overlay paths in `rows` are relative to it.
    rows : sequence
        Result rows, see `render_gallery`; a row's ``thumbnail`` (a ``data:image/`` URI), when
        present, is used instead of reading its overlay again.
    name : str, default "index.html"
        File name of the page.
    title : str, optional
        Page title; default names the folder.
    thumbnail_size : int, default 160
        Longest thumbnail side in pixels.

    Returns
    -------
    Path
        The page.

    Raises
    ------
    ValueError
        As `render_gallery`.

    Notes
    -----
    An overlay that cannot be read still gets its link, with its file name instead of a picture.

    Examples
    --------
    >>> import tempfile
    >>> page = write_gallery(tempfile.mkdtemp(), [])
    >>> page.name
    'index.html'
    """
    from imgcut.io import atomic_write

    root = Path(out_dir)
    thumbnails: dict[str, str] = {}
    for row in rows:
        overlay = str(_value(row, "overlay") or "")
        ready = str(_value(row, "thumbnail") or "")
        if overlay and ready.startswith("data:image/"):
            thumbnails[overlay] = ready  # made by the worker that wrote the overlay
        elif overlay and overlay not in thumbnails:
            try:
                thumbnails[overlay] = thumbnail_data_uri(root / overlay, size=thumbnail_size)
            except (OSError, ValueError, SyntaxError):  # unreadable overlay: link only
                pass
    page = render_gallery(rows, thumbnails=thumbnails, title=title or f"imgcut batch: {root.name}")
    target = root / name
    atomic_write(target, page.encode("utf-8"))
    return target
