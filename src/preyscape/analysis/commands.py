"""The registry of analyses: what the command line offers and the report runs.

Each analysis writer module (``analysis/<name>_output.py``) declares one
:class:`Command`: its name, how many runs it takes, its options, and whether
the run report includes it. Its options either override a shared setting
(:class:`~preyscape.analysis.settings.AnalysisSettings`, validated there and
named by the flag the user typed) or are inputs of its ``write`` function.
The command line builds a sub-command from each entry of :data:`ANALYSES`
and the report runs the ones marked ``in_report``; neither knows any
analysis by name. Adding an analysis adds one line to :data:`ANALYSES`.

Examples
--------
>>> [c.name for c in commands()]
['hotspots', 'waves', 'effects', 'compare']
>>> command("hotspots").runs
'one'
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

__all__ = ["ANALYSES", "Command", "Option", "command", "commands", "writer"]

ANALYSES: tuple[str, ...] = (
    "preyscape.analysis.hotspots_output",
    "preyscape.analysis.waves_output",
    "preyscape.analysis.effects_output",
    "preyscape.analysis.compare_output",
)
"""Writer modules of the analyses, in the order the command line lists them."""


@dataclass(frozen=True)
class Option:
    """One command-line option of an analysis.

    Attributes
    ----------
    flag : str
        The option as typed (``"--distance"``).
    dest : str
        A field of ``AnalysisSettings`` (``setting=True``) or a keyword of the
        writer's ``write`` function.
    help : str
        Help text, with units.
    type : callable
        Converts the typed text (``float``, ``str``, :class:`pathlib.Path`).
    metavar : str, optional
        Placeholder in the help.
    setting : bool
        Whether ``dest`` is a shared setting (validated and defaulted by
        ``AnalysisSettings``) rather than an input of ``write``.
    """

    flag: str
    dest: str
    help: str
    type: Callable[[str], Any] = float
    metavar: str | None = None
    setting: bool = True


@dataclass(frozen=True)
class Command:
    """An analysis as the command line and the report see it.

    Attributes
    ----------
    name : str
        Sub-command name (``"hotspots"``).
    help : str
        One line of help.
    runs : {"one", "several"}
        ``"one"``: ``RUN``; ``"several"``: a reference run and one or more others.
    options : tuple of Option
        Its options besides ``--out`` and ``--overwrite``.
    out_help : str
        Where the output goes by default, in words.
    in_report : bool
        Whether the run report includes it (for ``"one"``: on the reported
        run; for ``"several"``: on the reported run against each other run).
    """

    name: str
    help: str
    runs: Literal["one", "several"]
    options: tuple[Option, ...]
    out_help: str
    in_report: bool = True


def writer(module: str):
    """The writer module named ``module`` (its ``COMMAND``, ``default_out`` and ``write``)."""
    return importlib.import_module(module)


def commands() -> list[Command]:
    """Every registered analysis's :class:`Command`, in registry order."""
    return [writer(m).COMMAND for m in ANALYSES]


def command(name: str) -> Command:
    """The :class:`Command` named ``name``."""
    return module_of(name).COMMAND


def module_of(name: str):
    """The writer module of the analysis named ``name``."""
    for m in ANALYSES:
        mod = writer(m)
        if mod.COMMAND.name == name:
            return mod
    raise KeyError(f"no analysis named {name!r}")


def default_out(name: str, runs: Sequence) -> Path:
    """Where an analysis writes when no ``--out`` is given (the writer's ``default_out``)."""
    return module_of(name).default_out(runs)
