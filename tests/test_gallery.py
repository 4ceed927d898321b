"""Tests of imgcut.gallery: the page parses, links every overlay, holds no absolute path."""

from __future__ import annotations

import base64
import io
from html.parser import HTMLParser
from pathlib import Path

import pytest
from PIL import Image

from imgcut.gallery import GALLERY_COLUMNS, render_gallery, thumbnail_data_uri, write_gallery


class _Collector(HTMLParser):
    """Gathers links, image sources, scripts and table cells with Python's own html.parser."""

    def __init__(self) -> None:
        super().__init__()
        self.hrefs: list[str] = []
        self.srcs: list[str] = []
        self.tags: list[str] = []
        self.open: list[str] = []
        self.rows = 0
        self.script_src: list[str] = []
        self.link_tags = 0

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append(tag)
        if tag not in ("meta", "img", "br", "link"):
            self.open.append(tag)
        if tag == "a":
            self.hrefs.append(attrs["href"])
        if tag == "img":
            self.srcs.append(attrs["src"])
        if tag == "script" and "src" in attrs:
            self.script_src.append(attrs["src"])
        if tag == "link":
            self.link_tags += 1
        if tag == "tr":
            self.rows += 1

    def handle_endtag(self, tag):
        assert self.open and self.open[-1] == tag, f"unbalanced </{tag}>, open: {self.open}"
        self.open.pop()


def _rows(tmp_path: Path) -> list[dict]:
    (tmp_path / "a b").mkdir()
    rows = []
    for i, (name, status) in enumerate(
        [("a b/x.tif", "done"), ("y.png", "skipped"), ("z.tif", "failed")]
    ):
        overlay = ""
        if status != "failed":
            overlay = name.rsplit(".", 1)[0] + ".overlay.png"
            Image.new("RGB", (70, 52), (30 * i, 200, 10)).save(tmp_path / overlay)
        rows.append(
            {
                "path": name,
                "status": status,
                "error": "z.tif: not an image <oops>" if status == "failed" else "",
                "regions": 3 + i if status != "failed" else None,
                "objects": None,
                "seconds": 0.5 + i,
                "peak_memory_mb": 100.0 + i,
                "overlay": overlay,
            }
        )
    return rows


def test_page_parses_links_every_overlay_and_is_self_contained(tmp_path):
    rows = _rows(tmp_path)
    page_path = write_gallery(tmp_path, rows)
    text = page_path.read_text(encoding="utf-8")
    parser = _Collector()
    parser.feed(text)  # Python's html.parser (stdlib) as the outside reference for well-formedness
    parser.close()
    assert parser.open == [], f"unclosed tags: {parser.open}"
    assert parser.rows == 1 + len(rows)  # heading row + one row per image
    # Every image with an overlay is linked by its percent-encoded relative path.
    assert "a%20b/x.overlay.png" in parser.hrefs and "y.overlay.png" in parser.hrefs
    for href in parser.hrefs:
        assert not href.startswith(("/", "file:", "http:", "https:")), href
        if href != "summary.csv":
            assert (tmp_path / href.replace("%20", " ")).is_file()
    # Thumbnails are embedded, scripts and styles are inline: nothing to fetch.
    assert len(parser.srcs) == 2
    assert all(s.startswith("data:image/jpeg;base64,") for s in parser.srcs)
    assert parser.script_src == [] and parser.link_tags == 0
    assert str(tmp_path) not in text
    # Text is escaped, not interpreted.
    assert "&lt;oops&gt;" in text and "<oops>" not in text


def test_columns_carry_sortable_values(tmp_path):
    text = render_gallery(_rows(tmp_path))
    # Numeric columns are flagged for the inline sorter and carry raw values.
    assert 'data-col="seconds" data-num="1"' in text
    assert 'data-col="path" data-num="0"' in text
    assert 'data-v="101.0"' in text  # peak memory of the second row
    assert "<script>" in text and "sortBy" in text


def test_thumbnail_keeps_aspect_and_decodes(tmp_path):
    path = tmp_path / "o.png"
    Image.new("RGB", (200, 100), (255, 0, 0)).save(path)
    uri = thumbnail_data_uri(path, size=50)
    thumb = Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1])))
    assert thumb.size == (50, 25)
    r, g, b = thumb.convert("RGB").getpixel((25, 12))
    assert r > 200 and g < 50 and b < 50  # JPEG is lossy, red stays red
    with pytest.raises(ValueError, match="positive"):
        thumbnail_data_uri(path, size=0)


def test_unreadable_overlay_keeps_its_link(tmp_path):
    (tmp_path / "x.overlay.png").write_bytes(b"not a png")
    text = write_gallery(
        tmp_path,
        [
            {
                "path": "x.tif",
                "status": "done",
                "error": "",
                "regions": 1,
                "objects": None,
                "seconds": 1.0,
                "peak_memory_mb": None,
                "overlay": "x.overlay.png",
            }
        ],
    ).read_text()
    assert 'href="x.overlay.png"' in text and "data:image" not in text


@pytest.mark.parametrize("bad", ["/abs/x.png", "../x.png", "C:/x.png", "file:x.png"])
def test_absolute_or_escaping_overlay_paths_are_refused(bad):
    row = {
        "path": "x.tif",
        "status": "done",
        "error": "",
        "regions": 1,
        "objects": None,
        "seconds": 1.0,
        "peak_memory_mb": None,
        "overlay": bad,
    }
    with pytest.raises(ValueError, match="relative"):
        render_gallery([row])


def test_thumbnail_made_by_a_worker_is_used_as_is(tmp_path):
    ready = "data:image/jpeg;base64,/9j/AAAA"  # the overlay file itself need not be read again
    row = {
        "path": "x.tif",
        "status": "done",
        "error": "",
        "regions": 1,
        "objects": None,
        "seconds": 1.0,
        "peak_memory_mb": None,
        "overlay": "x.overlay.png",
        "thumbnail": ready,
    }
    text = write_gallery(tmp_path, [row]).read_text()
    assert f'src="{ready}"' in text


_DOM_STUB = """
// A minimal stand-in for the browser DOM, enough for the gallery's sort script.
function classes(){const s=new Set();return {add:(...a)=>a.forEach(x=>s.add(x)),
  remove:(...a)=>a.forEach(x=>s.delete(x)),contains:x=>s.has(x)};}
function cell(attrs){return {attrs,classList:classes(),listeners:{},
  getAttribute(n){return n in attrs?attrs[n]:null;},hasAttribute(n){return n in attrs;},
  addEventListener(t,f){this.listeners[t]=f;}};}
const spec=JSON.parse(process.argv[process.argv.length-1]);
const heads=spec.heads.map(cell);
const body={rows:spec.rows.map(r=>({path:r[0],cells:r.map(v=>cell({"data-v":v}))})),
  appendChild(row){this.rows=this.rows.filter(x=>x!==row);this.rows.push(row);}};
const table={tHead:{rows:[{cells:heads}]},tBodies:[body]};
global.document={getElementById:()=>table};
eval(spec.script);
const out=[];
for(const i of spec.clicks){heads[i].listeners.click();out.push(body.rows.map(r=>r.path));}
console.log(JSON.stringify(out));
"""


def test_inline_sort_orders_numbers_numerically_and_toggles(tmp_path):
    """Run the page's own script under Node.js with a stub DOM (skipped without node)."""
    import json
    import re
    import shutil
    import subprocess

    node = shutil.which("node")
    if node is None:
        pytest.skip("Node.js not installed: cannot run the inline script")
    seconds = {"a.tif": 10.0, "B.tif": 9.0, "c.tif": None, "d.tif": 100.5}
    rows = [
        {
            "path": p,
            "status": "done",
            "error": "",
            "regions": 1,
            "objects": None,
            "seconds": s,
            "peak_memory_mb": None,
            "overlay": "",
        }
        for p, s in seconds.items()
    ]
    page = render_gallery(rows)
    script = re.search(r"<script>(.*)</script>", page, re.S).group(1)
    # Heads and rows as the page has them: a thumbnail column, then GALLERY_COLUMNS.
    heads = [{}] + [{"data-col": n, "data-num": str(int(num))} for n, _, num in GALLERY_COLUMNS]
    bodies = re.findall(r'<tr class="done">(.*?)</tr>', page, re.S)
    table = [
        [path, *re.findall(r'data-v="([^"]*)"', b)] for path, b in zip(seconds, bodies, strict=True)
    ]
    names = [n for n, _, _ in GALLERY_COLUMNS]
    by_seconds, by_path = 1 + names.index("seconds"), 1 + names.index("path")
    spec = {
        "heads": heads,
        "rows": table,
        "script": script,
        "clicks": [by_seconds, by_seconds, by_path],
    }
    done = subprocess.run(
        [node, "-e", _DOM_STUB, "--", json.dumps(spec)], capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 0, done.stderr
    ascending, descending, by_name = json.loads(done.stdout)
    assert ascending == ["B.tif", "a.tif", "d.tif", "c.tif"]  # 9 < 10 < 100.5, empty last
    assert descending == ["d.tif", "a.tif", "B.tif", "c.tif"]  # empty stays last
    assert by_name == ["a.tif", "B.tif", "c.tif", "d.tif"]  # text: case-insensitive
