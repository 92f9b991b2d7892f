"""A self-contained HTML report: one file, no network, every string escaped.

This module only renders; it does no analysis. The caller assembles the
content section by section::

    rep = Report("Veldrun moor, baseline", "field voles and least weasels, 8 years")
    sec = rep.section("Run settings")
    sec.facts([("time step", "0.0104 yr"), ("cells", "160 000")])
    sec.table(["species", "mean density (animals per km²)"], [["prey", 412.7]])
    sec.figure(folder / "maps" / "prey_mean.png", "Time-mean prey density", "map of ...")
    rep.write(folder / "report.html")

Safety rules, kept by construction:

- every string a caller passes (titles, paragraphs, table cells, captions,
  alt text, anchors) goes through :func:`html.escape` with ``quote=True``;
  there is no way to pass raw HTML;
- images are embedded as base64 ``data:`` URIs and must be PNG or GIF
  (checked by their signature bytes);
- the page carries a Content-Security-Policy that allows only ``data:``
  images and the inline style sheet, so it cannot load anything from the
  network or run a script even if a browser were tricked into parsing one;
- the standard cautions (:data:`CAUTIONS`) are always shown near the top: after the
  plain-language summary and the answer (sections of place ``summary`` and
  ``answer``), before any detail.

Print: an A4 page style (Letter fits too: the margins leave room), tables that
wrap to the page width instead of being cut, figures no taller than a page;
on narrow screens every table row becomes a card of ``label: value`` lines.
"""

from __future__ import annotations

import base64
import html
import math
import numbers
import os
import re
import struct
from collections.abc import Iterable, Sequence
from datetime import UTC, datetime
from pathlib import Path

from preyscape.cautions import CAUTIONS
from preyscape.errors import InputError
from preyscape.names import slug

__all__ = ["CAUTIONS", "CSP", "PLACES", "Report", "Section"]

CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
"""Content-Security-Policy of every report: data: images and inline styles only."""

_ANCHOR = re.compile(r"[A-Za-z][A-Za-z0-9_-]{0,63}")
_RESERVED = frozenset({"top", "contents", "cautions", "main", "content"})
_PNG = b"\x89PNG\r\n\x1a\n"
_GIFS = (b"GIF87a", b"GIF89a")

_CSS = """
:root {
  --ink: #1d2b2f; --muted: #56676c; --paper: #fbfaf6; --card: #ffffff;
  --rule: #d6dcd4; --stripe: #f4f6f1; --accent: #2f6f62;
  --caution-bg: #fbf0db; --caution-edge: #a8641a; --note-bg: #ecf2f4; --note-edge: #557a89;
}
* { box-sizing: border-box; }
html { -webkit-text-size-adjust: 100%; }
body {
  margin: 0; background: var(--paper); color: var(--ink);
  font: 16px/1.55 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
    "Noto Sans", "Liberation Sans", sans-serif;
}
.page { max-width: 1000px; margin: 0 auto; padding: 0 1.25rem 2rem; }
.skip { position: absolute; left: -9999px; }
.skip:focus { left: 1rem; top: 1rem; background: var(--card); padding: .5rem .8rem; }
header.top { border-bottom: 3px solid var(--accent); padding: 2rem 0 1rem; }
h1 { font-size: 1.9rem; line-height: 1.2; margin: 0 0 .4rem; }
.subtitle { font-size: 1.15rem; color: var(--muted); margin: 0 0 .5rem; }
.meta { font-size: .875rem; color: var(--muted); margin: 0; }
h2 {
  font-size: 1.4rem; line-height: 1.25; margin: 2.2rem 0 .8rem; padding-bottom: .3rem;
  border-bottom: 1px solid var(--rule);
}
a { color: var(--accent); }
a:focus-visible { outline: 3px solid var(--caution-edge); outline-offset: 2px; }
nav.toc ol { margin: .3rem 0 0; padding-left: 1.6rem; }
nav.toc li { margin: .15rem 0; }
p, ul { margin: 0 0 .9rem; }
.scroll { overflow-x: auto; margin: 0 0 1.2rem; }
table { border-collapse: collapse; background: var(--card); font-size: .95rem; }
caption { caption-side: top; text-align: left; font-weight: 600; padding: 0 0 .35rem; }
th, td {
  padding: .35rem .75rem; border-bottom: 1px solid var(--rule); text-align: left;
  vertical-align: top;
}
thead th { border-bottom: 2px solid var(--ink); font-weight: 600; }
tbody tr:nth-child(even) { background: var(--stripe); }
.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
th.num { white-space: normal; }
table.facts th { font-weight: 600; color: var(--muted); padding-right: 1.5rem; }
table.facts td { font-variant-numeric: tabular-nums; }
figure { margin: 1.3rem 0; }
figure img {
  display: block; max-width: 100%; height: auto; background: var(--card);
  border: 1px solid var(--rule);
}
figcaption { font-size: .9rem; color: var(--muted); margin-top: .45rem; }
.box { padding: .75rem 1rem; margin: 1rem 0; border-radius: 0 4px 4px 0; }
.box > :last-child { margin-bottom: 0; }
.caution { background: var(--caution-bg); border-left: 6px solid var(--caution-edge); }
.note { background: var(--note-bg); border-left: 4px solid var(--note-edge); }
.box .label { font-weight: 700; }
.caution .label { color: #7a4510; }
.cautions ul { padding-left: 1.2rem; }
footer {
  margin-top: 3rem; padding-top: .8rem; border-top: 1px solid var(--rule);
  font-size: .85rem; color: var(--muted);
}
section.summary { background: var(--card); border: 1px solid var(--rule);
  border-left: 6px solid var(--accent); padding: .2rem 1.2rem .6rem; margin-top: 1.6rem; }
section.summary h2 { border-bottom: none; margin-top: 1rem; }
h3 { font-size: 1.1rem; margin: 1.2rem 0 .4rem; }
/* narrow screens: every table row becomes a small card of label: value lines */
@media (max-width: 700px) {
  table.data, table.data tbody, table.data tr, table.data td { display: block; width: 100%; }
  table.data thead { display: none; }
  table.data tr { border-bottom: 2px solid var(--rule); padding: .3rem 0; }
  table.data td { border: none; padding: .1rem .5rem; text-align: left; }
  table.data td::before { content: attr(data-label) ": "; font-weight: 600;
    color: var(--muted); }
}
@page { size: A4; margin: 14mm 12mm 16mm; }
@media print {
  .skip, nav.toc { display: none; }
  body { background: #fff; font-size: 10pt; line-height: 1.4; }
  .page { max-width: none; padding: 0; }
  header.top { padding-top: 0; }
  h2 { break-after: avoid; font-size: 14pt; }
  /* tables wrap instead of being cut: the full page width, small type, long words broken */
  .scroll { overflow: visible; break-inside: avoid; }
  table { width: 100%; font-size: 8pt; }
  th, td { padding: .15rem .3rem; }
  th { overflow-wrap: break-word; }
  td { overflow-wrap: anywhere; }
  figure, .box, tr { break-inside: avoid; }
  caption, thead { break-after: avoid; }
  figure img { max-width: 100%; max-height: 235mm; width: auto; height: auto;
    object-fit: contain; }
  a { color: inherit; text-decoration: none; }
}
"""

PLACES = ("summary", "answer", "detail", "method")
"""Where a section goes, in this order: the plain-language summary, the answer to the
planner's question, the details, the methods. The cautions follow the summary and the
answer, before any detail."""


def _e(value: object) -> str:
    """Escape any value for HTML text or a quoted attribute."""
    return html.escape(str(value), quote=True)


def _is_bool(v: object) -> bool:
    # numpy booleans are not ``bool`` and not numbers.Real, but have dtype kind "b"
    return isinstance(v, bool) or getattr(getattr(v, "dtype", None), "kind", "") == "b"


def _format_cell(v: object, numeric_format: str) -> tuple[str, bool]:
    """Text of one table cell and whether it is a number (right-aligned)."""
    if v is None:
        return "", False
    if _is_bool(v):
        return ("yes" if v else "no"), False
    if isinstance(v, numbers.Integral):
        return str(int(v)), True
    if isinstance(v, numbers.Real):
        f = float(v)
        if math.isnan(f):
            return "n/a", True
        if math.isinf(f):
            return ("∞" if f > 0 else "−∞"), True
        return numeric_format.format(f), True
    return str(v), False


def _image_info(data: bytes) -> tuple[str, int, int] | None:
    """MIME type and pixel size of PNG or GIF bytes, or None for anything else."""
    if data.startswith(_PNG) and len(data) >= 24 and data[12:16] == b"IHDR":
        w, h = struct.unpack(">II", data[16:24])
        return "image/png", w, h
    if data[:6] in _GIFS and len(data) >= 10:
        w, h = struct.unpack("<HH", data[6:10])
        return "image/gif", w, h
    return None


def _anchor(text: str) -> str:
    s = slug(text, max_length=48, empty="s")
    return s if s[0].isalpha() else f"s-{s}"


class Section:
    """One titled part of a :class:`Report`; made by :meth:`Report.section`.

    Every method escapes the text it is given and appends one block, in call
    order.
    """

    def __init__(self, title: str, anchor: str, place: str = "detail") -> None:
        if place not in PLACES:
            raise ValueError(f"place must be one of {PLACES}, not {place!r}")
        self.title = str(title)
        self.anchor = anchor
        self.place = place
        self._blocks: list[str] = []  # escaped HTML fragments, built only here

    # --- text --------------------------------------------------------------
    def paragraph(self, text: str) -> Section:
        """Add text; a blank line starts a new paragraph."""
        for part in re.split(r"\n\s*\n", str(text).strip()):
            if part.strip():
                self._blocks.append(f"<p>{_e(part.strip())}</p>")
        return self

    def heading(self, text: str) -> Section:
        """Add a sub-heading within the section."""
        self._blocks.append(f"<h3>{_e(text)}</h3>")
        return self

    def bullets(self, items: Iterable[str]) -> Section:
        """Add a bulleted list, one item per string."""
        lis = "".join(f"<li>{_e(it)}</li>" for it in items)
        if lis:
            self._blocks.append(f"<ul>{lis}</ul>")
        return self

    def caution(self, text: str) -> Section:
        """Add a caution in a visually distinct box (labelled, not only coloured)."""
        self._blocks.append(
            f'<aside class="box caution" role="note"><p><span class="label">Caution: </span>'
            f"{_e(text)}</p></aside>"
        )
        return self

    def note(self, text: str) -> Section:
        """Add a side note in a quieter box."""
        self._blocks.append(
            f'<aside class="box note" role="note"><p><span class="label">Note: </span>'
            f"{_e(text)}</p></aside>"
        )
        return self

    # --- tables ------------------------------------------------------------
    def facts(self, items: Iterable[tuple[str, object]], caption: str = "") -> Section:
        """Add a two-column table of labels and values.

        Parameters
        ----------
        items : iterable of (str, str)
            Label and value, e.g. ``("time step", "0.0104 yr")``. Give the
            unit inside the value. Non-string values are formatted like
            table cells.
        caption : str, optional
            A caption above the table.
        """
        rows = []
        for item in items:
            if len(item) != 2:
                raise ValueError(f"facts items are (label, value) pairs, got {item!r}")
            label, value = item
            text, _ = _format_cell(value, "{:.4g}")
            rows.append(f'<tr><th scope="row">{_e(label)}</th><td>{_e(text)}</td></tr>')
        cap = f"<caption>{_e(caption)}</caption>" if caption else ""
        self._blocks.append(
            f'<div class="scroll"><table class="facts">{cap}<tbody>{"".join(rows)}</tbody>'
            "</table></div>"
        )
        return self

    def table(
        self,
        columns: Sequence[str],
        rows: Iterable[Sequence[object]],
        caption: str = "",
        numeric_format: str = "{:.4g}",
    ) -> Section:
        """Add a data table with a header row.

        Parameters
        ----------
        columns : sequence of str
            Column headings; put units in them, e.g. ``"area (km²)"``.
        rows : iterable of sequences
            One sequence per row, as long as ``columns``. Numbers are
            right-aligned; floats are formatted with ``numeric_format``,
            integers in full, NaN as "n/a", None as an empty cell.
        caption : str, optional
            A caption above the table.
        numeric_format : str, optional
            :meth:`str.format` pattern for floats (default 4 significant digits).
        """
        cols = [str(c) for c in columns]
        body: list[list[tuple[str, bool]]] = []
        for k, row in enumerate(rows):
            row = list(row)
            if len(row) != len(cols):
                raise ValueError(f"table row {k} has {len(row)} cells, expected {len(cols)}")
            body.append([_format_cell(v, numeric_format) for v in row])
        # a column is numeric (right-aligned heading too) if all its filled cells are
        numeric = [
            bool(body) and all(num or text == "" for text, num in (r[j] for r in body))
            and any(r[j][1] for r in body)
            for j in range(len(cols))
        ]
        num_attr = ' class="num"'
        head = "".join(
            f'<th scope="col"{num_attr if numeric[j] else ""}>{_e(c)}</th>'
            for j, c in enumerate(cols)
        )
        labels = [f' data-label="{_e(c)}"' for c in cols]
        trs = "".join(
            "<tr>" + "".join(
                f'<td{num_attr if num else ""}{labels[j]}>{_e(text)}</td>'
                for j, (text, num) in enumerate(r)
            ) + "</tr>"
            for r in body
        )
        cap = f"<caption>{_e(caption)}</caption>" if caption else ""
        self._blocks.append(
            f'<div class="scroll"><table class="data">{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{trs}</tbody></table></div>"
        )
        return self

    # --- figures -----------------------------------------------------------
    def figure(self, image: str | os.PathLike | bytes, caption: str, alt: str) -> Section:
        """Embed a PNG or GIF image with a caption.

        Parameters
        ----------
        image : path or bytes
            A PNG or GIF file, or its bytes. Embedded as a base64 ``data:``
            URI, so the report stays one file.
        caption : str
            Visible caption; say what is shown and in which units.
        alt : str
            Text alternative for readers who cannot see the image.

        Raises
        ------
        InputError
            If the file does not exist or is not a PNG or GIF.
        """
        if isinstance(image, (bytes, bytearray, memoryview)):
            data = bytes(image)
            info = _image_info(data)
            if info is None:
                raise ValueError("figure bytes are not a PNG or GIF image")
        else:
            p = Path(image)
            try:
                data = p.read_bytes()
            except OSError as err:
                raise InputError(f"cannot read the figure image ({err.strerror})", str(p)) from err
            info = _image_info(data)
            if info is None:
                raise InputError("the figure image is not a PNG or GIF file", str(p))
        mime, w, h = info
        uri = f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"
        self._blocks.append(
            f'<figure><img src="{uri}" alt="{_e(alt)}" width="{w}" height="{h}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>"
        )
        return self

    def _render(self) -> str:
        return (
            f'<section id="{_e(self.anchor)}" class="{self.place}" '
            f'aria-labelledby="{_e(self.anchor)}-h">'
            f'<h2 id="{_e(self.anchor)}-h">{_e(self.title)}</h2>'
            + "\n".join(self._blocks) + "</section>"
        )


class Report:
    """A self-contained HTML report.

    Parameters
    ----------
    title : str
        Title of the page (escaped).
    subtitle : str, optional
        One line under the title, e.g. the scenario and run length.
    generated : datetime.datetime, optional
        Time stamp shown in the header (keyword only); default: the time of
        :meth:`render`, UTC.
    """

    def __init__(self, title: str, subtitle: str = "", *, generated: datetime | None = None
                 ) -> None:
        self.title = str(title)
        self.subtitle = str(subtitle)
        self.generated = generated
        self.sections: list[Section] = []

    def section(self, title: str, anchor: str | None = None, *,
                place: str = "detail") -> Section:
        """Start a new section (listed in the table of contents) and return it.

        Parameters
        ----------
        title : str
            Section heading.
        anchor : str, optional
            Fragment identifier for links (``report.html#anchor``): a letter,
            then letters, digits, ``-`` or ``_``. Default: made from the title.
        place : {"summary", "answer", "detail", "method"}
            Where it goes (:data:`PLACES`); sections of one place keep the
            order they were made in.
        """
        taken = {s.anchor for s in self.sections} | _RESERVED
        if anchor is not None:
            anchor = str(anchor)
            if not _ANCHOR.fullmatch(anchor):
                raise ValueError(f"section anchor {anchor!r} must be a letter followed by up "
                                 "to 63 letters, digits, '-' or '_'")
            if anchor in taken:
                raise ValueError(f"section anchor {anchor!r} is already used")
        else:
            base = _anchor(str(title))
            anchor, k = base, 2
            while anchor in taken:
                anchor, k = f"{base}-{k}", k + 1
        sec = Section(title, anchor, place)
        self.sections.append(sec)
        return sec

    def ordered(self) -> list[Section]:
        """The sections in reading order: by :data:`PLACES`, then as made."""
        return sorted(self.sections, key=lambda s: PLACES.index(s.place))

    def render(self) -> str:
        """The whole report as one HTML5 document (str)."""
        from preyscape import __version__

        when = (self.generated or datetime.now(UTC)).astimezone(UTC)
        stamp = when.strftime("%Y-%m-%d %H:%M UTC")
        ordered = self.ordered()
        first = [s for s in ordered if s.place in ("summary", "answer")]
        rest = [s for s in ordered if s.place not in ("summary", "answer")]
        toc = [f'<li><a href="#{_e(s.anchor)}">{_e(s.title)}</a></li>' for s in first]
        toc += ['<li><a href="#cautions">Read this first</a></li>']
        toc += [f'<li><a href="#{_e(s.anchor)}">{_e(s.title)}</a></li>' for s in rest]
        cautions = "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS)
        sub = f'<p class="subtitle">{_e(self.subtitle)}</p>' if self.subtitle else ""
        parts = [
            "<!DOCTYPE html>",
            '<html lang="en">',
            "<head>",
            '<meta charset="utf-8">',
            f'<meta http-equiv="Content-Security-Policy" content="{_e(CSP)}">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f'<meta name="generator" content="preyscape {_e(__version__)}">',
            f"<title>{_e(self.title)}</title>",
            f"<style>{_CSS}</style>",
            "</head>",
            "<body>",
            '<a class="skip" href="#content">Skip to the content</a>',
            '<div class="page">',
            '<header class="top">',
            f"<h1>{_e(self.title)}</h1>",
            sub,
            f'<p class="meta">Generated {_e(stamp)} with preyscape {_e(__version__)}</p>',
            "</header>",
            '<main id="content">',
            *(s._render() for s in first),
            '<section id="cautions" class="cautions" aria-labelledby="cautions-h">',
            '<h2 id="cautions-h">Read this first</h2>',
            '<div class="box caution" role="note"><p><span class="label">Cautions</span></p>',
            f"<ul>{cautions}</ul></div>",
            "</section>",
            '<nav class="toc" aria-labelledby="contents-h">',
            '<h2 id="contents-h">Contents</h2>',
            f"<ol>{''.join(toc)}</ol>",
            "</nav>",
            *(s._render() for s in rest),
            "</main>",
            "<footer>",
            f"<p>{_e(self.title)}: report generated {_e(stamp)} with preyscape "
            f"{_e(__version__)}. This page is one self-contained file: its images are "
            "embedded and it loads nothing from the network.</p>",
            "</footer>",
            "</div>",
            "</body>",
            "</html>",
            "",
        ]
        return "\n".join(parts)

    def write(self, path: str | os.PathLike, overwrite: bool = False) -> Path:
        """Write the report to ``path`` atomically and return the path.

        The page is written under a temporary name in the same folder and then
        renamed, so a reader never sees half a file.

        Raises
        ------
        InputError
            If ``path`` exists and ``overwrite`` is false.
        """
        path = Path(path)
        if path.exists() and not overwrite:
            raise InputError("the report file already exists; pass overwrite=True "
                             "(--overwrite) to replace it", str(path))
        data = self.render().encode("utf-8")
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
        try:
            with open(tmp, "wb") as fh:
                fh.write(data)
            if overwrite:
                os.replace(tmp, path)
            else:
                # a hard link fails if the name appeared meanwhile: no silent overwrite
                try:
                    os.link(tmp, path)
                except FileExistsError as err:
                    raise InputError("the report file already exists; pass overwrite=True "
                                     "(--overwrite) to replace it", str(path)) from err
                except OSError:  # no hard links on this file system
                    os.replace(tmp, path)
        finally:
            tmp.unlink(missing_ok=True)
        return path
