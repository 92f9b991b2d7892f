"""The standard cautions that stay with every result (one place for their words).

:data:`CAUTION` is the one-line form the command line prints; :data:`CAUTIONS` the
fuller list every report shows before its content.
"""

from __future__ import annotations

__all__ = ["CAUTION", "CAUTIONS"]

CAUTION = (
    "A model is not a field survey. Fences and corridors affect animals and people; "
    "defer to local regulations, the responsible wildlife authority and licensed "
    "professionals."
)
"""One line of cautions, printed by the command line after results."""

CAUTIONS: list[str] = [
    "A model is not a field survey. These maps show what the model predicts from the "
    "habitat raster and the parameters given; they are not counts of animals. Check "
    "important conclusions against observations on the ground.",
    "Fences and corridors affect more than the species modelled here: other wildlife "
    "that is not in the model, people's access to the land, grazing, farming and other "
    "livelihoods. Weigh those effects before proposing any measure.",
    "Follow local regulations and defer to the responsible wildlife authority and to "
    "licensed professionals before acting on these results: releasing, moving, "
    "controlling or fencing animals is regulated in most places.",
    "Results from invented demonstration data (such as the bundled demo landscape) show "
    "how the tool works and must not be used for conclusions about any real place or "
    "population.",
]
"""The standard cautions every report shows before its content."""
