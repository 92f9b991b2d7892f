"""Products: analyses of a run folder written out as GeoTIFF, CSV and PNG.

Each module here runs one analysis from :mod:`preyscape.analysis` on a run
folder, writes its maps and tables into an output folder (atomically, see
:func:`output_folder`) and returns a summary ``dict`` that the report uses.
This layer sits above ``analysis`` and ``plots`` and below ``report`` and the
command line.
"""

from __future__ import annotations

import os
from pathlib import Path

from preyscape.store import output_folder

__all__ = ["output_folder", "write_csv"]


def write_csv(path: Path, header: list[str], rows: list[list]) -> Path:
    """Write a CSV table atomically (floats with up to 6 significant digits)."""
    import csv

    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for row in rows:
            w.writerow([f"{v:.6g}" if isinstance(v, float) else v for v in row])
    os.replace(tmp, path)
    return path
