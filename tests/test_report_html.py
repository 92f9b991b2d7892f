"""The HTML report: escaping, self-containment, atomic writing, and a real browser.

The browser tests open the page in headless Chromium (tests/browser.py), once
per module: no console errors, every image decoded, hostile strings shown as
text and never run. Locally they skip without Chromium; with CI set they fail.
"""

from __future__ import annotations

import html
import io
import os
import re
from datetime import UTC, datetime
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from browser import browser_session, load_page
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from PIL import Image

from preyscape.errors import InputError
from preyscape.report.html import CAUTIONS, CSP, Report

SCRIPT = "<script>alert(1)</script>"
IMG = '"><img src=x onerror=alert(1)>'
AMP = "Fox & Hare Moor"
HOSTILE = (SCRIPT, IMG, AMP)
WHEN = datetime(2031, 5, 17, 9, 30, tzinfo=UTC)


def png_bytes(kind: str) -> bytes:
    """A small PNG drawn with matplotlib's object API (Agg)."""
    fig = Figure(figsize=(3.0, 2.0), dpi=80)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    if kind == "line":
        t = np.linspace(0, 2, 50)
        ax.plot(t, 100 + 20 * np.sin(3 * t))
    else:
        ax.imshow(np.arange(48.0).reshape(6, 8))
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def gif_bytes() -> bytes:
    """A two-frame animated GIF (Pillow)."""
    frames = [Image.new("RGB", (40, 30), c) for c in ((200, 40, 40), (40, 40, 200))]
    buf = io.BytesIO()
    frames[0].save(buf, format="GIF", save_all=True, append_images=frames[1:], duration=200,
                   loop=0)
    return buf.getvalue()


def build(folder: Path) -> Report:
    """A report with every kind of block, hostile strings in every text slot."""
    line = folder / "totals.png"
    line.write_bytes(png_bytes("line"))
    rep = Report(f"Report {SCRIPT}", f"subtitle {IMG} {AMP}", generated=WHEN)
    m = rep.section("How it works", place="method")
    m.paragraph("Equations come last.")
    s = rep.section("Run settings")
    s.facts([("time step", "0.0104 yr"), ("cells with data", 160000),
             (f"label {SCRIPT}", f"value {IMG}")])
    s.paragraph(f"First paragraph {SCRIPT}.\n\nSecond paragraph {AMP}.")
    s.note(f"note {IMG}")
    t = rep.section(f"Densities {AMP}")
    t.table(["species", f"name {SCRIPT}", "mean density (animals per km²)", "area (km²)",
             "flag"],
            [["prey", f"field vole {IMG}", 412.7312, 100, True],
             ["predator", AMP, 0.000123456, np.int64(25), np.bool_(False)],
             ["none", "missing", float("nan"), None, False]],
            caption=f"caption {SCRIPT}")
    f = rep.section(f"Maps {IMG}")
    f.figure(line, f"Totals {AMP}", alt=f"line plot {IMG}")
    f.figure(png_bytes("map"), "A map", alt=f"map {SCRIPT}")
    f.figure(gif_bytes(), "An animation", alt="two coloured frames")
    f.caution(f"caution {SCRIPT} {AMP}")
    a = rep.section("The answer", place="answer")
    a.paragraph("The ranking comes second.")
    rep.section("Summary", place="summary").paragraph(f"The summary comes first {AMP}.")
    return rep


# ---------------------------------------------------------------------------
# the HTML source (no browser)
# ---------------------------------------------------------------------------
class _Tags(HTMLParser):
    """Every start tag with its attributes, and the text outside tags."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def page(tmp_path_factory) -> tuple[Path, str]:
    folder = tmp_path_factory.mktemp("report")
    path = build(folder).write(folder / "report.html")
    return path, path.read_text(encoding="utf-8")


def test_hostile_strings_are_escaped_in_the_source(page):
    # design requirement: no user string reaches the page as markup
    _, doc = page
    assert "<script" not in doc.lower()
    assert "<img src=x" not in doc
    assert "onerror=alert(1)>" not in doc
    assert html.escape(SCRIPT) in doc
    assert html.escape(IMG, quote=True) in doc  # the quote is escaped too (&quot;)
    assert "Fox &amp; Hare Moor" in doc and "Fox & Hare" not in doc
    parsed = _Tags()
    parsed.feed(doc)
    text = "".join(parsed.text)
    for s in HOSTILE:
        assert s in text  # the parser gets them back as plain text
    alts = [a["alt"] for t, a in parsed.tags if t == "img"]
    assert f"line plot {IMG}" in alts and f"map {SCRIPT}" in alts


def test_document_is_self_contained(page):
    # design requirement: the page needs no network and can run nothing
    _, doc = page
    assert doc.startswith("<!DOCTYPE html>")
    assert "http://" not in doc and "https://" not in doc
    assert f'<meta http-equiv="Content-Security-Policy" content="{html.escape(CSP)}">' in doc
    assert CSP == "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
    parsed = _Tags()
    parsed.feed(doc)
    names = {t for t, _ in parsed.tags}
    assert not names & {"script", "link", "iframe", "object", "embed", "base", "form", "svg"}
    for tag, attrs in parsed.tags:
        assert not [a for a in attrs if a.startswith("on")], tag
        if "src" in attrs:
            assert attrs["src"].startswith(("data:image/png;base64,", "data:image/gif;base64,"))
        if "href" in attrs:
            assert attrs["href"].startswith("#")
    imgs = [a for t, a in parsed.tags if t == "img"]
    assert len(imgs) == 3
    # width/height come from the image headers (reference library: Pillow)
    png = Image.open(io.BytesIO(png_bytes("line")))
    assert (imgs[0]["width"], imgs[0]["height"]) == (str(png.width), str(png.height))


def test_sections_follow_their_place_and_cautions_come_before_details(page):
    # design requirement: summary, answer, the cautions, then details and methods, whatever
    # order the sections were made in; within a place, the order they were made in
    _, doc = page
    for c in CAUTIONS:
        assert html.escape(c) in doc
    order = [doc.index(f'id="{a}"') for a in ("summary", "the-answer", "cautions",
                                               "contents-h", "run-settings",
                                               "densities-fox-hare-moor", "how-it-works")]
    assert order == sorted(order)
    with pytest.raises(ValueError, match="place must be one of"):
        Report("x").section("y", place="appendix")
    ids = set(re.findall(r'\sid="([^"]+)"', doc))
    links = re.findall(r'href="#([^"]+)"', doc)
    assert {"cautions", "run-settings", "densities-fox-hare-moor"} <= set(links)
    assert all(a in ids for a in links)
    assert len(ids) == len(re.findall(r'\sid="', doc))  # ids are unique
    assert "2031-05-17 09:30 UTC" in doc


def test_numbers_are_formatted_and_right_aligned(page):
    # design requirement: 4 significant digits by default, integers in full
    _, doc = page
    cell = '<td class="num" data-label="{}">{}</td>'.format
    assert cell("mean density (animals per km²)", "412.7") in doc
    assert cell("mean density (animals per km²)", "0.0001235") in doc
    assert cell("area (km²)", "100") in doc and cell("area (km²)", "25") in doc
    assert cell("mean density (animals per km²)", "n/a") in doc
    assert '<th scope="col" class="num">area (km²)</th>' in doc
    assert '<th scope="col">species</th>' in doc
    assert '<td data-label="flag">yes</td>' in doc and '<td data-label="flag">no</td>' in doc
    assert "<thead>" in doc


def test_write_is_atomic_and_refuses_to_overwrite(tmp_path, monkeypatch):
    # design requirement: never overwrite unless asked; a reader never sees half a file
    rep = Report("first", generated=WHEN)
    path = rep.write(tmp_path / "out" / "report.html")
    assert path.read_text(encoding="utf-8").count("first") >= 2
    with pytest.raises(InputError) as err:
        Report("second").write(path)
    assert str(path) in str(err.value)
    assert "second" not in path.read_text(encoding="utf-8")
    Report("second").write(path, overwrite=True)
    assert "<title>second</title>" in path.read_text(encoding="utf-8")

    # a failure while replacing leaves the old file and no temporary file behind
    def boom(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError, match="disk full"):
        Report("third").write(path, overwrite=True)
    assert "<title>second</title>" in path.read_text(encoding="utf-8")
    assert sorted(p.name for p in path.parent.iterdir()) == ["report.html"]


def test_bad_inputs(tmp_path):
    rep = Report("t")
    sec = rep.section("s")
    with pytest.raises(InputError, match="nothing.png"):
        sec.figure(tmp_path / "nothing.png", "c", "a")
    text = tmp_path / "fake.png"
    text.write_text("<svg onload=alert(1)>")
    with pytest.raises(InputError, match="fake.png"):
        sec.figure(text, "c", "a")
    with pytest.raises(ValueError, match="PNG or GIF"):
        sec.figure(b"<svg/>", "c", "a")
    with pytest.raises(ValueError, match="3 cells, expected 2"):
        sec.table(["a", "b"], [[1, 2, 3]])
    with pytest.raises(ValueError, match="anchor"):
        rep.section("x", anchor='x" onmouseover="alert(1)')
    with pytest.raises(ValueError, match="already used"):
        rep.section("x", anchor="s")
    # titles that slug alike still get distinct anchors
    assert rep.section("Maps").anchor == "maps"
    assert rep.section("maps!").anchor == "maps-2"
    assert rep.section("2031").anchor == "s-2031"


# ---------------------------------------------------------------------------
# a real browser
# ---------------------------------------------------------------------------
_HANDLERS_JS = """
return Array.from(document.querySelectorAll('*')).filter(function (e) {
  return Array.from(e.attributes).some(function (a) { return a.name.indexOf('on') === 0; });
}).length;
"""


@pytest.fixture(scope="module")
def driver():
    with browser_session() as d:
        yield d


@pytest.fixture(scope="module")
def seen(driver, page):
    return load_page(driver, page[0], extra={"handlers": _HANDLERS_JS})


def test_browser_no_console_errors(seen):
    # design requirement: the page loads cleanly with nothing blocked or missing
    bad = [e for e in seen["log"] if e["level"] in ("SEVERE", "WARNING")]
    assert not bad, bad


def test_browser_every_image_decodes(seen):
    # design requirement: the embedded PNGs and the GIF all render
    imgs = seen["images"]
    assert len(imgs) == 3
    for im in imgs:
        assert im["complete"] and im["naturalWidth"] > 0 and im["naturalHeight"] > 0, im
    assert imgs[2]["src"].startswith("data:image/gif;base64,")
    assert (imgs[2]["naturalWidth"], imgs[2]["naturalHeight"]) == (40, 30)
    assert imgs[0]["alt"] == f"line plot {IMG}"


def test_browser_shows_hostile_strings_as_text(seen):
    # design requirement: escaped strings are displayed literally and never run
    for s in HOSTILE:
        assert s in seen["text"]
    assert seen["title"] == f"Report {SCRIPT}"
    assert seen["scripts"] == 0
    assert seen["extra"]["handlers"] == 0


def test_browser_shows_key_numbers_and_cautions(seen):
    text = seen["text"]
    for s in ("0.0104 yr", "160000", "412.7", "0.0001235", "n/a", "Read this first",
              "Caution:", "2031-05-17 09:30 UTC"):
        assert s in text
    assert CAUTIONS[0][:40] in text


def test_browser_checks_can_fail(driver, tmp_path):
    # negative control: a page that breaks the rules under the same policy shows up in
    # the checks above (a blocked inline script and a blocked image log SEVERE entries)
    bad = tmp_path / "bad.html"
    bad.write_text(
        "<!DOCTYPE html><html><head><meta charset='utf-8'>"
        f"<meta http-equiv='Content-Security-Policy' content=\"{CSP}\"><title>bad</title>"
        "</head><body><p>x</p><img src='missing.png' alt='m'>"
        "<script>document.title = 'ran';</script></body></html>",
        encoding="utf-8",
    )
    got = load_page(driver, bad)
    assert got["title"] == "bad"  # the CSP stopped the script
    assert [e for e in got["log"] if e["level"] == "SEVERE"]
    assert got["images"][0]["naturalWidth"] == 0
