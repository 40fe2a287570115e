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


if __name__ == "__main__":  # pragma: no cover
    main()
