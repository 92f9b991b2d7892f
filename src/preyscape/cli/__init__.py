"""The ``preyscape`` command line: a thin shell over the Python API.

One module per group of commands registers its sub-commands
(``add_parsers(sub)``) and handles them (a ``handler`` on the parsed
arguments): :mod:`.run` (``run``, ``demo``), :mod:`.check` (``check``) and
:mod:`.analyse` (every analysis of the registry and ``report``). Heavy
libraries are imported inside the handlers so ``--help`` is instant. Every
:class:`~preyscape.errors.PreyscapeError` becomes one message on standard
error and exit status 2.
"""

from __future__ import annotations

import argparse
import sys

from preyscape.cautions import CAUTION

__all__ = ["CAUTION", "main"]

def _parser() -> argparse.ArgumentParser:
    from preyscape import __version__
    from preyscape.cli import analyse, check, ensemble, run

    p = argparse.ArgumentParser(
        prog="preyscape",
        description="Simulate predator and prey populations moving across habitat rasters.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"preyscape {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for module in (run, check, analyse, ensemble):
        module.add_parsers(sub)
    return p


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status."""
    args = _parser().parse_args(argv)
    from preyscape.errors import PreyscapeError

    try:
        return int(args.handler(args) or 0)
    except PreyscapeError as exc:
        print(f"preyscape: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("preyscape: interrupted; nothing half-written was left behind", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
