"""The `labeler` command: a thin layer over :class:`labeler.project.Project`.

Every command opens a project, calls one or two `Project` methods and prints the result. Bad input
ends with exit code 2 and one line that says what is wrong and what to do. The commands live in
:mod:`labeler.commands`, one module per family.
"""

from __future__ import annotations

import sys

import click

from labeler.commands import labels, proposals, setup, study  # noqa: F401  (they register their commands)
from labeler.commands.base import EXIT_BAD_INPUT, UserError, cli

__all__ = ["cli", "main", "UserError", "EXIT_BAD_INPUT"]


def main(argv=None):
    """Console entry point."""
    try:
        cli.main(args=argv, prog_name="labeler", standalone_mode=True)
    except KeyboardInterrupt:
        click.echo("interrupted; nothing half-written (every write is one transaction)", err=True)
        sys.exit(130)
    except BrokenPipeError:  # the reader of our output went away; so do we, quietly
        _quiet_stdout()
        sys.exit(0)
    finally:
        try:
            sys.stdout.flush()
        except BrokenPipeError:  # the last lines found no reader: nothing to say about it
            _quiet_stdout()


def _quiet_stdout() -> None:
    """Point stdout at the null device, so the interpreter's last flush finds no closed pipe."""
    import os

    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())
    os.close(devnull)


if __name__ == "__main__":  # pragma: no cover
    main()
