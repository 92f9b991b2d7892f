"""The ``preyscape`` command line: a thin shell over the Python API.

One module per group of commands registers its sub-commands
(``add_parsers(sub)``) and handles them (a ``handler`` on the parsed
arguments): :mod:`.run` (``run``, ``demo``), :mod:`.check` (``check``) and
:mod:`.analyse` (every analysis of the registry and ``report``). Heavy
libraries are imported inside the handlers so ``--help`` is instant. Every
:class:`~preyscape.errors.PreyscapeError` becomes one message on standard
error and exit status 2. Ctrl-C and SIGTERM end a command the same way (a
message, and exit status 130 or 143: 128 + the signal's number); a run keeps
what it needs to be resumed (``preyscape run --resume``).
"""

from __future__ import annotations

import argparse
import contextlib
import errno
import os
import signal
import sys

from preyscape.cautions import CAUTION

__all__ = ["CAUTION", "main"]

_ENVIRONMENT = {errno.ENOSPC, errno.EDQUOT, errno.EROFS, errno.EACCES, errno.EPERM}
"""Errors of the machine rather than of preyscape: one message and exit status 2."""


def _parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    from preyscape import __version__
    from preyscape.cli import analyse, check, ensemble, landscape, run

    p = argparse.ArgumentParser(
        prog="preyscape",
        description="Simulate predator and prey populations moving across habitat rasters.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"preyscape {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for module in (run, check, landscape, ensemble):
        module.add_parsers(sub)
    analyse.add_parsers(sub, argv)
    return p


@contextlib.contextmanager
def _signals_as_interrupts(received: list[int]):
    """Turn the first Ctrl-C or SIGTERM into KeyboardInterrupt; ignore later ones.

    The command then ends through the same clean-up for both; a second signal
    does not cut that clean-up short. Handlers are restored afterwards.
    """
    def handler(signum, _frame):
        if received:
            return  # already stopping: let the clean-up finish
        received.append(signum)
        raise KeyboardInterrupt

    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = {s: signal.signal(s, handler) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status."""
    args = _parser(sys.argv[1:] if argv is None else argv).parse_args(argv)
    from preyscape.errors import PreyscapeError

    received: list[int] = []
    try:
        with _signals_as_interrupts(received):
            return int(args.handler(args) or 0)
    except PreyscapeError as exc:
        print(f"preyscape: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        sig = received[0] if received else signal.SIGINT
        name = "SIGTERM" if sig == signal.SIGTERM else "Ctrl-C"
        note = exc.args[0] if exc.args else "nothing half-written was left behind"
        print(f"preyscape: interrupted ({name}): {note}", file=sys.stderr)
        return 128 + int(sig)
    except BrokenPipeError:
        # the reader of standard output went away (`preyscape check x.toml | head`)
        with contextlib.suppress(OSError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 128 + int(signal.SIGPIPE)
    except OSError as exc:
        if exc.errno not in _ENVIRONMENT:
            raise
        # the disk is full, read-only or forbidden: the user can fix that; temporary
        # files were removed on the way out
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"preyscape: error: {where}{exc.strerror or exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
