"""One way to turn a name into a file name or an anchor.

Measure, variant, transect and target names become parts of file names
(``measures/<slug>.tif``, ``front_<slug>_predator.png``) and of report
anchors. :func:`slug` is the only place that does this.

Examples
--------
>>> slug("Release to North-East")
'release-to-north-east'
>>> slug("fen refuge / 2")
'fen-refuge-2'
>>> slug("")
'unnamed'
"""

from __future__ import annotations

import re

__all__ = ["slug"]

_UNSAFE = re.compile(r"[^a-z0-9_]+")


def slug(name: str, *, max_length: int = 64, empty: str = "unnamed") -> str:
    """A safe file-name (and anchor) form of ``name``.

    Lower case; every run of characters other than ``a-z``, ``0-9`` and
    ``_`` becomes one hyphen; no leading or trailing hyphen; at most
    ``max_length`` characters.

    Parameters
    ----------
    name : str
        Any text, e.g. a measure or variant name.
    max_length : int
        Longest result (keyword only).
    empty : str
        What an empty result becomes (keyword only).

    Returns
    -------
    str
        The slug; never empty, never contains a path separator.
    """
    s = _UNSAFE.sub("-", str(name).lower()).strip("-")
    s = s[:max_length].strip("-")
    return s or empty
