"""Products: analyses of a run folder written out as GeoTIFF, CSV and PNG.

Each module here runs one analysis from :mod:`preyscape.analysis` on a run
folder, writes its maps and tables into an output folder (atomically, see
:func:`output_folder`) and returns a summary ``dict`` that the report uses.
This layer sits above ``analysis`` and ``plots`` and below ``report`` and the
command line.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from preyscape.errors import InputError


@contextmanager
def output_folder(out: str | Path, overwrite: bool = False) -> Iterator[Path]:
    """Create ``out`` atomically: yield a temporary folder, rename it when done.

    Parameters
    ----------
    out : str or pathlib.Path
        The folder to create.
    overwrite : bool
        Replace an existing ``out``; otherwise an existing folder is an
        :class:`~preyscape.errors.InputError` and is left untouched.

    Yields
    ------
    pathlib.Path
        A hidden temporary folder beside ``out``. If the block raises, the
        temporary folder is removed and ``out`` is unchanged.
    """
    out = Path(out)
    if out.exists() and not overwrite:
        raise InputError(
            "output folder already exists; choose another with --out or pass --overwrite "
            "to replace it", str(out),
        )
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        yield tmp
        if out.exists():  # overwrite was asked for
            shutil.rmtree(out)
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


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
