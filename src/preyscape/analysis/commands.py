"""The registry of analyses: what the command line offers and the report runs.

Each analysis writer module (``analysis/<name>_output.py``) declares one
:class:`Command`: its name, how many runs it takes, its options, and whether
the run report includes it. Its options either override a shared setting
(:class:`~preyscape.analysis.settings.AnalysisSettings`, validated there and
named by the flag the user typed) or are inputs of its ``write`` function.
The command line builds a sub-command from each entry of :data:`ANALYSES`
and the report runs the ones marked ``in_report``; neither knows any
analysis by name. Adding an analysis adds one :class:`Entry` to :data:`REGISTRY`.

Examples
--------
>>> [e.name for e in REGISTRY]
['hotspots', 'waves', 'effects', 'compare']
>>> all(c.name == e.name and c.help == e.help for c, e in zip(commands(), REGISTRY))
True
>>> command("hotspots").runs
'one'
"""

from __future__ import annotations

import importlib
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

__all__ = ["ANALYSES", "REGISTRY", "Command", "Entry", "Option", "command", "commands",
           "writer"]

@dataclass(frozen=True)
class Entry:
    """One registered analysis: its command name, one line of help, its writer module.

    The command line lists these without importing the writers (so ``--help`` stays
    fast); the name and help must equal the writer's ``COMMAND`` (tested).
    """

    name: str
    help: str
    module: str


REGISTRY: tuple[Entry, ...] = (
    Entry("hotspots", "hotspots of both species: the few places where animals are markedly "
          "denser", "preyscape.analysis.hotspots_output"),
    Entry("waves", "arrival times, front speeds and periodic waves",
          "preyscape.analysis.waves_output"),
    Entry("effects", "refuge, corridor and transect effects", "preyscape.analysis.effects_output"),
    Entry("compare", "where, when and by how much alternatives change the outcome against a "
          "reference run", "preyscape.analysis.compare_output"),
)
"""The analyses, in the order the command line lists them."""

ANALYSES: tuple[str, ...] = tuple(e.module for e in REGISTRY)
"""Writer modules of the analyses, in registry order."""


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
    """The writer module of the analysis named ``name`` (imported only now)."""
    for e in REGISTRY:
        if e.name == name:
            return writer(e.module)
    raise KeyError(f"no analysis named {name!r}")


def default_out(name: str, runs: Sequence) -> Path:
    """Where an analysis writes when no ``--out`` is given (the writer's ``default_out``)."""
    return module_of(name).default_out(runs)
