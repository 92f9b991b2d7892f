"""What every analysis writer shares: file records, report parts, atomic folders.

An analysis writer (``analysis/<name>_output.py``) writes one result into a
new folder and returns a typed output object that names every file it wrote
with its role (:class:`FileRecord`). The command line prints the output's
:meth:`~Written.summary_lines`; the report renders its
:meth:`~Written.report_parts`, plain :class:`Part` values that
:mod:`preyscape.report` turns into HTML. Nobody reconstructs a file name.

Examples
--------
>>> rec = FileRecord("prey_hotspots.png", "map", "Hotspots of prey", species="prey")
>>> files = (rec, FileRecord("hotspots.csv", "table", "Hotspot counts"))
>>> [f.name for f in pick(files, role="map", species="prey")]
['prey_hotspots.png']
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

from preyscape.store import output_folder

__all__ = ["PLACES", "Bullets", "Facts", "FileRecord", "Figure", "Paragraph", "Part", "Table",
           "Written", "output_folder", "pick", "provenance", "write_csv", "write_raster"]

Role = Literal["map", "figure", "raster", "table", "record", "animation"]


@dataclass(frozen=True)
class FileRecord:
    """One file an analysis wrote.

    Attributes
    ----------
    name : str
        File name relative to the output folder.
    role : {"map", "figure", "raster", "table", "record", "animation"}
        What it is: a PNG map, another PNG figure, a GeoTIFF, a CSV table, a
        JSON record, an animated GIF.
    title : str
        What it shows, in words (used as caption).
    species : str, optional
        ``"prey"`` or ``"predator"`` when the file is about one species.
    key : str, optional
        The analysis's own key for the file (a transect or refuge name, a
        statistic), so callers can find it without parsing names.
    """

    name: str
    role: Role
    title: str
    species: str | None = None
    key: str | None = None


def pick(files: Iterable[FileRecord], *, role: str | None = None,
         species: str | None = None, key: str | None = None) -> list[FileRecord]:
    """The records matching every given field, in order."""
    return [f for f in files if (role is None or f.role == role)
            and (species is None or f.species == species) and (key is None or f.key == key)]


# --- report parts: plain values, rendered by preyscape.report -------------------------
@dataclass(frozen=True)
class Paragraph:
    """A paragraph of text."""

    text: str


@dataclass(frozen=True)
class Bullets:
    """A bulleted list."""

    items: tuple[str, ...]


@dataclass(frozen=True)
class Facts:
    """Label–value pairs (a two-column table)."""

    items: tuple[tuple[str, Any], ...]
    caption: str = ""


@dataclass(frozen=True)
class Table:
    """A table: header, rows of values (numbers formatted by the renderer), caption."""

    header: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]
    caption: str = ""
    numeric_format: str = "{:.4g}"


@dataclass(frozen=True)
class Figure:
    """An image file (PNG or GIF) with caption and alternative text."""

    path: Path
    caption: str
    alt: str = ""


Block = Paragraph | Bullets | Facts | Table | Figure


PLACES = ("summary", "answer", "detail", "method")
"""Where a part goes in the report, in this order: the plain-language summary, the answer
to the planner's question (rankings, change maps), the details of each analysis, the
methods and sources."""


@dataclass(frozen=True)
class Part:
    """A titled part of a report: a sequence of blocks, and where it goes (:data:`PLACES`)."""

    title: str
    blocks: tuple[Block, ...] = ()
    anchor: str | None = None
    place: str = "detail"

    def __post_init__(self) -> None:
        if self.place not in PLACES:
            raise ValueError(f"place must be one of {PLACES}, not {self.place!r}")


@dataclass(frozen=True)
class Written:
    """Base of every analysis output: the folder and the files written in it.

    Attributes
    ----------
    folder : pathlib.Path
        The output folder (after it was renamed into place).
    files : tuple of FileRecord
        Every file written, with its role.
    """

    folder: Path
    files: tuple[FileRecord, ...] = field(default=())

    def path(self, record: FileRecord) -> Path:
        """Full path of one of this output's files."""
        return self.folder / record.name

    def summary_lines(self) -> list[str]:
        """A few lines for the command line (override)."""
        return [str(self.folder)]

    def report_parts(self) -> list[Part]:
        """Parts of the report built from this output (override)."""
        return []

    def headlines(self) -> list[str]:
        """One-sentence findings in plain words for the report's summary (override)."""
        return []


def write_csv(path: Path, header: Sequence[str], rows: Iterable[Sequence]) -> Path:
    """Write a CSV table atomically (floats with up to 6 significant digits)."""
    import csv

    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(list(header))
        for row in rows:
            w.writerow([f"{v:.6g}" if isinstance(v, float) else v for v in row])
    os.replace(tmp, path)
    return path


_PROVENANCE: ContextVar[tuple] = ContextVar("preyscape_raster_provenance", default=())


@contextmanager
def provenance(**tags: Any) -> Iterator[dict]:
    """Tags every GeoTIFF written by :func:`write_raster` inside the block carries.

    The analysis commands and the report set them from the run analysed
    (``source_run``, ``run_folder``, ``scenario``, ``software``), so a raster
    says in a GIS where it came from. Tags given to :func:`write_raster` win.
    """
    merged = {**dict(_PROVENANCE.get()), **{k: v for k, v in tags.items() if v is not None}}
    token = _PROVENANCE.set(tuple(merged.items()))
    try:
        yield merged
    finally:
        _PROVENANCE.reset(token)


def write_raster(path: Path, grid, values: np.ndarray, *, description: str | None = None,
                 units: str | None = None, tags: dict | None = None,
                 categories: dict[int, str] | None = None,
                 colours: dict[int, str] | None = None, **kwargs) -> Path:
    """Write one map as a GeoTIFF on ``grid`` (float32 with NaN no-data unless told).

    ``description`` (the band description a GIS shows; default: the file
    name in words), ``units`` (e.g. ``"animals per km2"``) and ``tags`` (more
    metadata, such as the source run; :func:`provenance` supplies defaults)
    go into the file so it explains itself; ``categories`` (code to name) and
    ``colours`` (code to colour) give a class raster its legend; other
    keywords go to :func:`preyscape.landscape.io.write_geotiff` (``nodata``,
    ``dtype``).
    """
    from preyscape.landscape.io import write_geotiff

    if "dtype" not in kwargs:
        values = np.where(grid.mask, values, np.nan).astype(np.float32)
    path = Path(path)
    write_geotiff(path, grid, values, description=description or path.stem.replace("_", " "),
                  units=units, tags={**dict(_PROVENANCE.get()), **(tags or {})},
                  categories=categories, colours=colours, **kwargs)
    return path
