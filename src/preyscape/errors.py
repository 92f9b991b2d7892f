"""The one exception type for bad user input.

Every problem a user can fix (a wrong key, a missing raster, a release point
outside the landscape) is raised as :class:`InputError`. The command line turns
it into one message and exit status 2, without a traceback.
"""

from __future__ import annotations


class InputError(Exception):
    """Bad input that the user can fix.

    Parameters
    ----------
    message : str
        What is wrong and what would be valid.
    source : str, optional
        The file (and key path, if any) the problem is in, e.g.
        ``"demo.toml: prey.growth"``.
    """

    def __init__(self, message: str, source: str | None = None) -> None:
        self.message = message
        self.source = source
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return f"{self.source}: {self.message}" if self.source else self.message
