"""The report of a run: ``preyscape.report.run_report``.

One baseline with a prey refuge and a variant without it are run once for the
module on the tiny test landscape of ``conftest.py`` (half a year), and one
report compares them. The scenario title and the species names carry hostile
strings, which must reach the page as text. The page is then opened in headless
Chromium (tests/browser.py; skipped locally without it, fails in CI).
"""

from __future__ import annotations

import html
import json
import math
import re
import shutil
from html.parser import HTMLParser

import pytest
import xarray as xr
from browser import browser_session, load_in_browser, load_page
from conftest import BASE, DX, SHAPE, X0, Y0, apply_overrides, to_toml, write_habitat
from test_runfolder import box, geojson

from preyscape.analysis.effects_output import find_without_refuge
from preyscape.analysis.output import Paragraph, Part
from preyscape.analysis.refuges import refuge_effect
from preyscape.errors import InputError
from preyscape.report.html import CAUTIONS
from preyscape.report.run_report import write_report
from preyscape.report.summary import JARGON
from preyscape.runfolder import simulate_variants

EXTRA = (Part("Uncertainty, in short", (Paragraph("An extra summary part."),), "extra-summary",
              place="summary"),
         Part("Uncertainty, the method", (Paragraph("An extra method part."),), "extra-method",
              place="method"))

TITLE = "Moor <script>alert(1)</script> test"
PREY = 'Fen & "marsh" vole'
PREDATOR = "<b>weasel</b>"
HOSTILE = (TITLE, PREY, PREDATOR)
REFUGE_BOX = (3, 9, 2, 8)  # rows 3..8, cols 2..7
STALE = "an older report"


class _Tags(HTMLParser):
    """Every start tag with its attributes."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


@pytest.fixture(scope="module")
def made(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("run_report")
    write_habitat(folder / "habitat.tif")
    geojson(folder / "refuge.geojson", box(*REFUGE_BOX))
    over = {
        "title": TITLE,
        "prey.name": PREY,
        "predator.name": PREDATOR,
        "measures": [{"name": "fen refuge", "kind": "refuge", "geometry": "refuge.geojson",
                      "protected_fraction": 0.7}],
        "variants": [{"name": "no-refuge", "remove": ["fen refuge"]}],
        # a transect from the predator release to the east rim, for the front speeds
        "analysis": {"transects": [{"name": "east", "points": [
            [X0 + 10.5 * DX, Y0 - 12.3 * DX], [X0 + 29.5 * DX, Y0 - 12.3 * DX]]}]},
        "start.releases.0.density": 100.0,
        "run.years": 0.5, "run.save_every": 0.125,
    }
    path = folder / "scenario.toml"
    path.write_text(to_toml(apply_overrides(BASE, over)))
    runs = simulate_variants(path, folder / "runs", progress=False)
    out = folder / "report.html"
    out.write_text(STALE)
    try:  # refused: the file exists and overwrite was not asked for
        write_report(runs["baseline"], out, [runs["no-refuge"]])
        refused = None
    except InputError as exc:
        refused = exc
    stale_after = out.read_text()
    path_written = write_report(runs["baseline"], out, [runs["no-refuge"]], overwrite=True,
                                extra_parts=EXTRA, how_sure=("A sentence on how sure.",))
    return {"folder": folder, "runs": runs, "out": out, "path": path_written,
            "refused": refused, "stale_after": stale_after,
            "doc": out.read_text(encoding="utf-8"),
            "info": json.loads((runs["baseline"] / "run.json").read_text())}


def decay_length_text(made: dict) -> str:
    """The refuge's decay length as the report prints it, computed by the analysis layer."""
    import rasterio

    base, without = made["runs"]["baseline"], made["runs"]["no-refuge"]
    with rasterio.open(base / "measures" / "fen-refuge.tif") as src:
        cells = src.read(1) == 1
    with xr.open_dataset(base / "results.nc", decode_times=False) as ds, \
            xr.open_dataset(without / "results.nc", decode_times=False) as dw:
        ell = refuge_effect(ds, cells, ds_without=dw, species="prey",
                            presence=1.0).decay_length_km
    assert math.isfinite(ell) and ell > 0
    return f"{ell:.4g} km"


def predator_speed_text(made: dict) -> str:
    v = made["info"]["predictions"]["predator_front_speed"]
    # Dunbar 1983 (J Math Biol 17:11): c* = 2 sqrt(D (e a K / (1 + a h K) - m)) into prey
    # at capacity; with the conftest values 2 sqrt(2 (2.5 / 1.5 - 1)) = 2.309 km/yr
    it, K = BASE["interaction"], BASE["prey"]["capacity"]
    growth = it["efficiency"] * it["attack_rate"] * K / (
        1 + it["attack_rate"] * it["handling_time"] * K) - BASE["predator"]["mortality"]
    assert v == pytest.approx(2 * math.sqrt(BASE["predator"]["diffusivity"] * growth))
    return f"{v:.4g} km/yr"


# ---------------------------------------------------------------------------
# the HTML source
# ---------------------------------------------------------------------------
def test_report_is_written_where_asked(made):
    assert made["path"] == made["out"]
    assert made["doc"].startswith("<!DOCTYPE html>")
    # the temporary products are cleaned up
    assert not list(made["folder"].glob(".preyscape-report-*"))


def test_existing_report_is_refused_unless_overwrite(made):
    # design requirement: never overwrite results unless asked
    assert isinstance(made["refused"], InputError)
    assert str(made["out"]) in str(made["refused"])
    assert "--overwrite" in str(made["refused"])
    assert made["stale_after"] == STALE  # left untouched by the refused call
    assert STALE not in made["doc"]  # and replaced with overwrite=True


def test_report_is_self_contained(made):
    # design requirement: one file, nothing fetched from the network
    doc = made["doc"]
    assert "http://" not in doc and "https://" not in doc
    parsed = _Tags()
    parsed.feed(doc)
    imgs = [a for t, a in parsed.tags if t == "img"]
    assert len(imgs) >= 8  # maps, hotspot and wave maps, spill-over, change maps, animation
    assert all(a["src"].startswith("data:") for a in imgs)
    assert any(a["src"].startswith("data:image/gif;base64,") for a in imgs)
    assert not [t for t, a in parsed.tags if "src" in a and not a["src"].startswith("data:")]
    assert not {t for t, _ in parsed.tags} & {"script", "link", "iframe", "object", "embed"}


def test_report_holds_cautions_and_sections(made):
    doc = made["doc"]
    for c in CAUTIONS:
        assert html.escape(c) in doc
    for title in ("Summary", "The alternatives side by side", "Maps of baseline",
                  "Hotspots: where the animals concentrate", "Travelling waves", "Refuges",
                  "Change: baseline → no-refuge", "How the model works", "Scenario and run",
                  "Sources"):
        assert f">{html.escape(title)}</h2>" in doc, title


def _section(doc: str, anchor: str) -> str:
    start = doc.index(f'<section id="{anchor}"')
    return doc[start:doc.index("</section>", start)]


def test_report_is_read_by_a_planner_first(made):
    # design requirement (issue 16): the plain-language summary opens the report, then the
    # answer (the alternatives), then the cautions; modelling details come last; extra parts
    # go to their place
    doc = made["doc"]
    at = {a: doc.index(f'id="{a}"') for a in (
        "summary", "extra-summary", "alternatives", "cautions", "maps", "hotspots", "model",
        "scenario-and-run", "extra-method")}
    assert list(at) == sorted(at, key=at.get)
    summary = _section(doc, "summary")
    text = html.unescape(re.sub(r"<[^>]+>", " ", summary)).lower()
    for part in ("what was run", "what changes", "how sure", "what the model cannot say"):
        assert part in text
    assert not [w for w in JARGON if w in text], [w for w in JARGON if w in text]
    assert "a sentence on how sure." in text
    assert "no-refuge" in text and "removes the fen refuge" in text
    assert "inside the fen refuge, " in text and "in the run without it" in text
    # the model part explains what the summary leaves out
    model = html.unescape(_section(doc, "model")).lower()
    for w in ("hopf capacity", "holling", "fickian", "fisher–kpp"):
        assert w in model, w


def test_report_gives_decay_length_and_predicted_front_speed(made):
    doc = made["doc"]
    assert decay_length_text(made) in doc
    assert html.escape("fen refuge: decay length of the spill-over") in doc
    assert f"predators into prey at capacity {predator_speed_text(made)}" in doc


def test_user_strings_are_escaped_in_the_source(made):
    # design requirement: no user string reaches the page as markup
    doc = made["doc"]
    assert "<script" not in doc.lower()
    assert "<b>" not in doc
    assert 'Fen & "marsh"' not in doc
    for s in HOSTILE:
        assert html.escape(s, quote=True) in doc
    assert f"<title>{html.escape(TITLE)}</title>" in doc


# ---------------------------------------------------------------------------
# a real browser
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def seen(made):
    return load_in_browser(made["out"])


def test_browser_loads_cleanly(seen):
    # design requirement: nothing blocked or missing when the page loads
    bad = [e for e in seen["log"] if e["level"] in ("SEVERE", "WARNING")]
    assert not bad, bad
    assert seen["scripts"] == 0


def test_browser_decodes_every_image(seen):
    assert len(seen["images"]) >= 8
    for im in seen["images"]:
        assert im["complete"] and im["naturalWidth"] > 0 and im["naturalHeight"] > 0, im["alt"]


def test_browser_shows_key_numbers_and_user_strings_as_text(seen, made):
    text = seen["text"]
    for s in HOSTILE:
        assert s in text
    assert seen["title"] == TITLE
    assert decay_length_text(made) in text
    assert predator_speed_text(made) in text
    for title in ("Hotspots", "Travelling waves", "Refuges",
                  "Change: baseline → no-refuge"):
        assert title in text
    assert CAUTIONS[0] in text
    g = made["info"]["grid"]
    assert (g["rows"], g["cols"]) == SHAPE
    assert f"{SHAPE[0]} rows × {SHAPE[1]} columns" in text


# ---------------------------------------------------------------------------
# printed: every table column and every figure on the page
# ---------------------------------------------------------------------------
# Printable widths and heights in CSS px (96 per inch) inside the report's @page margins
# (12 mm left and right, 14 + 16 mm top and bottom): A4 210 x 297 mm, Letter 8.5 x 11 in.
MM = 96 / 25.4
PAGES = {"A4": ((210 - 24) * MM, (297 - 30) * MM),
         "Letter": (8.5 * 96 - 24 * MM, 11 * 96 - 30 * MM)}

_BOXES_JS = """
const page = document.documentElement.clientWidth;
const out = {page: page, cells: [], images: [], scrolled: []};
for (const c of document.querySelectorAll('th, td')) {
  const r = c.getBoundingClientRect();
  out.cells.push({text: c.innerText.slice(0, 40), left: r.left, right: r.right});
}
for (const im of document.images) {
  const r = im.getBoundingClientRect();
  out.images.push({alt: im.alt.slice(0, 40), left: r.left, right: r.right,
                   height: r.height});
}
for (const s of document.querySelectorAll('.scroll')) {
  if (s.scrollWidth > s.clientWidth + 1) out.scrolled.push(s.innerText.slice(0, 40));
}
out.body = document.body.scrollWidth;
return out;
"""


@pytest.mark.parametrize("paper", sorted(PAGES))
def test_printed_report_keeps_every_column_and_figure_on_the_page(made, paper):
    # design requirement (issue 16): printed on A4 or Letter, no table is cut (every cell
    # lies within the printable width) and every figure fits a page. Checked in the browser
    # with print media emulated at the printable width, then printed to PDF with Chromium,
    # whose pages must be of that size and hold every image.
    import base64

    width, height = PAGES[paper]
    with browser_session() as driver:
        driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
        driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {
            "width": int(width), "height": int(height), "deviceScaleFactor": 1,
            "mobile": False})
        seen = load_page(driver, made["out"], {"boxes": _BOXES_JS})
        boxes = seen["extra"]["boxes"]
        pdf = base64.b64decode(driver.execute_cdp_cmd("Page.printToPDF", {
            "printBackground": True, "preferCSSPageSize": paper == "A4",
            "paperWidth": 8.27 if paper == "A4" else 8.5,
            "paperHeight": 11.69 if paper == "A4" else 11.0})["data"])
    page = boxes["page"]
    assert page <= width + 1
    assert boxes["cells"] and boxes["images"]
    cut = [c for c in boxes["cells"] if c["right"] > page + 0.5 or c["left"] < -0.5]
    assert not cut, cut[:5]
    assert not boxes["scrolled"], boxes["scrolled"]
    assert boxes["body"] <= page + 1
    for im in boxes["images"]:
        assert im["left"] >= -0.5 and im["right"] <= page + 0.5, im
        assert im["height"] <= height + 0.5, im
    # the PDF: pages of the paper asked for, and every image of the page in it
    assert pdf.startswith(b"%PDF")
    sizes = re.findall(rb"/MediaBox \[0 0 ([\d.]+) ([\d.]+)\]", pdf)
    pages = len(re.findall(rb"/Type /Page(?!s)", pdf))
    assert pages >= 2 and len(sizes) == pages
    want = (595.3, 841.9) if paper == "A4" else (612.0, 792.0)
    for w, h in sizes:
        assert abs(float(w) - want[0]) < 2 and abs(float(h) - want[1]) < 2
    assert pdf.count(b"/Subtype /Image") >= len(boxes["images"])


# ---------------------------------------------------------------------------
# find_without_refuge
# ---------------------------------------------------------------------------
def test_find_without_refuge_finds_the_sibling_run(made):
    base, without = made["runs"]["baseline"], made["runs"]["no-refuge"]
    found = find_without_refuge(base, made["info"])
    assert found is not None and found.resolve() == without.resolve()
    # the run without refuges has none to look for
    info = json.loads((without / "run.json").read_text())
    assert find_without_refuge(without, info) is None


def test_find_without_refuge_returns_none_without_a_matching_sibling(made, tmp_path):
    base, without = made["runs"]["baseline"], made["runs"]["no-refuge"]
    alone = tmp_path / "alone" / "baseline"
    alone.mkdir(parents=True)
    shutil.copy(base / "run.json", alone / "run.json")
    assert find_without_refuge(alone, made["info"]) is None
    # a sibling with the right measures but from another scenario file does not count
    other = alone.parent / "no-refuge"
    other.mkdir()
    rec = json.loads((without / "run.json").read_text())
    (other / "run.json").write_text(json.dumps({**rec, "scenario": "/elsewhere/other.toml"}))
    assert find_without_refuge(alone, made["info"]) is None
    # with the same scenario file it is found
    (other / "run.json").write_text(json.dumps(rec))
    assert find_without_refuge(alone, made["info"]) == other.resolve()
