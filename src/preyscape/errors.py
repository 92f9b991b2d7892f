"""The exceptions preyscape raises for problems a user can fix.

A small hierarchy in the style of well-kept geospatial libraries:

``PreyscapeError``
    The base of every problem the user can fix. The command line turns any
    of them into one message and exit status 2, without a traceback.
``InputError`` (also a :class:`ValueError`)
    A value is wrong: a scenario key, a command-line option, a geometry, a
    habitat code without a table row.
``FileProblem`` (also an :class:`OSError`)
    A file or folder is missing, unreadable, damaged, of the wrong kind, or
    cannot be written: a run folder without ``results.nc``, an output folder
    that already exists.

Programming errors are not wrapped: they stay :class:`ValueError` or
:class:`TypeError` and show a traceback.

Examples
--------
>>> from preyscape.errors import InputError, PreyscapeError
>>> err = InputError("must be > 0, not -1", "moor.toml: prey.growth")
>>> str(err)
'moor.toml: prey.growth: must be > 0, not -1'
>>> isinstance(err, PreyscapeError) and isinstance(err, ValueError)
True
"""

from __future__ import annotations

__all__ = ["FileProblem", "InputError", "PreyscapeError"]


class PreyscapeError(Exception):
    """A problem the user can fix.

    Parameters
    ----------
    message : str
        What is wrong and what would be valid.
    source : str, optional
        Where the problem is: a file, a file and key path
        (``"moor.toml: prey.growth"``), a folder, or a command-line option
        (``"--distance"``). Library functions pass only sources they really
        know; the layer that knows the file or option adds it.
    """

    def __init__(self, message: str, source: str | None = None) -> None:
        self.message = str(message)
        self.source = source
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return f"{self.source}: {self.message}" if self.source else self.message

    def located(self, source: str) -> PreyscapeError:
        """The same problem, of the same type, placed at ``source`` (keeps a known source)."""
        return type(self)(self.message, self.source or source)


class InputError(PreyscapeError, ValueError):
    """A value the user gave is not valid (scenario key, option, geometry, code)."""


class FileProblem(PreyscapeError, OSError):
    """A file or folder is missing, unreadable, damaged, of the wrong kind or not writable."""
