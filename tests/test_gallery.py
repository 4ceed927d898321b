"""Tests of imgcut.gallery: the page parses, links every overlay, holds no absolute path."""

from __future__ import annotations

import base64
import io
from html.parser import HTMLParser
from pathlib import Path

import pytest
from PIL import Image

from imgcut.gallery import render_gallery, thumbnail_data_uri, write_gallery


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
