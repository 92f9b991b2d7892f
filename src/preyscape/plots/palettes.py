"""Colours with a meaning: habitat classes, species, measures, no data.

The habitat palette is ours. A class with a ``colour`` in the scenario keeps
it; a class whose name says what it is (water, wetland, forest, grassland,
arable land, settlement, road, heath, rock, ...) gets a colour that reads as
that; every other class takes the next unused colour of
:data:`CLASS_PALETTE`, 24 colours at least 16 CIELAB units (ΔE*ab) apart
from each other and from the no-data grey. Two classes never share a colour
unless the scenario gives them the same one.

Examples
--------
>>> habitat_colours({1: "open grassland", 2: "forest", 3: "arable", 4: "fen"})
{1: '#a9cf6b', 2: '#2e6b3f', 3: '#e3c46b', 4: '#7bb6b0'}
>>> habitat_colours({1: "a", 2: "b"}, {2: "steelblue"})[2]
'#4682b4'
"""

from __future__ import annotations

import re
from collections.abc import Mapping

__all__ = ["CLASS_PALETTE", "MEANINGS", "NO_DATA", "habitat_colours", "pastel"]

NO_DATA = "#d9d9d9"
"""Fill of cells without habitat data (always drawn with a hatch as well)."""

CLASS_PALETTE = (
    "#a9cf6b", "#2e6b3f", "#4a86b8", "#9e4b4b", "#5c5c5c", "#e3c46b", "#7bb6b0", "#9a6fa3",
    "#7d8f45", "#c9b8a1", "#d98c5f", "#3f8f8a", "#c46fa0", "#6b5a9e", "#b5c93b", "#8c5a3c",
    "#6fd0e8", "#e07b7b", "#b03a2e", "#d6b0e0", "#f2a33a", "#b8863b", "#3b4f7a", "#7a2f6b",
)
"""Default colours of habitat classes without a colour or a recognised name (ours)."""

MEANINGS: tuple[tuple[str, str], ...] = (
    (r"water|lake|pond|river|stream|sea|reservoir|canal|loch", "#4a86b8"),
    (r"wet|fen|marsh|bog|mire|swamp|reed|sedge|carr", "#7bb6b0"),
    (r"conifer|pine|spruce", "#3b5a3a"),
    (r"forest|wood|tree|plantation|copse", "#2e6b3f"),
    (r"heath|moor", "#9a6fa3"),
    (r"scrub|shrub|bush|hedge", "#7d8f45"),
    (r"grass|meadow|pasture|lawn|steppe|prairie|clearing", "#a9cf6b"),
    (r"arable|crop|field|farm|cultivat|orchard|vineyard|cereal", "#e3c46b"),
    (r"settle|urban|village|town|city|built|house|industr|garden", "#9e4b4b"),
    (r"road|rail|track|motorway|highway|path", "#5c5c5c"),
    (r"rock|bare|sand|scree|quarry|gravel|dune|cliff", "#c9b8a1"),
    (r"snow|ice|glacier", "#dfe9ef"),
)
"""Words in a class name (regular expressions) and the colour they suggest (ours)."""


def _hex(colour: str) -> str:
    from matplotlib.colors import to_hex

    return to_hex(colour.strip().lower() if not colour.strip().startswith("#") else colour)


def habitat_colours(classes: Mapping[int, str], given: Mapping[int, str | None] | None = None
                    ) -> dict[int, str]:
    """A colour (``#rrggbb``) for every habitat class, by what the class is.

    Parameters
    ----------
    classes : mapping
        Class code to class name.
    given : mapping, optional
        Class code to a colour from the scenario (CSS name or hex; None or
        missing: choose one).

    Returns
    -------
    dict
        Class code to ``#rrggbb``, in the order of ``classes``.
    """
    given = given or {}
    out: dict[int, str] = {}
    for code in classes:
        if given.get(code):
            out[code] = _hex(str(given[code]))
    used = set(out.values())
    for code, name in classes.items():
        if code in out:
            continue
        for pattern, colour in MEANINGS:
            if re.search(pattern, str(name or "").lower()) and colour not in used:
                out[code] = colour
                used.add(colour)
                break
    spare = [c for c in CLASS_PALETTE if c not in used]
    for code in classes:
        if code not in out:
            # more classes than colours: reuse the palette rather than fail
            out[code] = spare.pop(0) if spare else CLASS_PALETTE[len(out) % len(CLASS_PALETTE)]
    return {code: out[code] for code in classes}


def pastel(colour: str, strength: float = 0.35) -> str:
    """``colour`` mixed with white (``strength`` of the colour, 0–1): a faint underlay."""
    from matplotlib.colors import to_hex, to_rgb

    r, g, b = to_rgb(colour)
    return to_hex((1 - strength + strength * r, 1 - strength + strength * g,
                   1 - strength + strength * b))
