"""What every `labeler` command shares: the command group, one-line errors, opening a project,
progress bars and the common options."""

from __future__ import annotations

import errno
import sqlite3
import sys

import click

import labeler
from labeler.errors import LabelerError

EXIT_BAD_INPUT = 2


class UserError(click.ClickException):
    exit_code = EXIT_BAD_INPUT


class _Group(click.Group):
    """Turns labeler's typed errors into one line on stderr and exit code 2, never a traceback."""

    def invoke(self, ctx):
        from storage import StoreError

        try:
            return super().invoke(ctx)
        except click.UsageError as exc:
            # click would print usage, a hint and the error on three lines: one line instead,
            # with the usage of the command that was mistyped
            at = exc.ctx if exc.ctx is not None else ctx
            usage = _one_line(at.get_usage()).replace("Usage: ", "usage: ", 1)
            raise UserError(_one_line(f"{exc.format_message().rstrip('.')}; {usage}; see "
                                      f"`{at.command_path} --help`")) from None
        except (LabelerError, StoreError) as exc:
            raise UserError(_one_line(str(exc))) from None
        except sqlite3.DatabaseError as exc:  # a project file damaged past what opening checks
            name = _opened.get("path") or "the project file"
            raise UserError(_one_line(f"{name}: the project file cannot be read ({exc}); restore it "
                                      "from a backup")) from None
        except OSError as exc:
            if exc.errno == errno.EPIPE:  # the reader went away (`labeler history P | head`)
                raise  # click ends quietly
            name = getattr(exc, "filename", None) or ""
            raise UserError(_one_line(f"{name}: {exc.strerror or exc}; check the path and "
                                      "permissions")) from None


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


_opened: dict[str, str] = {}  # the project file of this command, for error messages


def _open(path: str, annotator: str | None = None, readonly: bool = False):
    from labeler.project import Project

    _opened["path"] = str(path)
    return Project.open(path, annotator=annotator, readonly=readonly)


def _progress_bar(label: str):
    """A progress bar on stderr (hidden when it is no terminal) and the callback that moves it."""
    bar = click.progressbar(length=1000, label=label, file=sys.stderr, show_eta=False,
                            hidden=not sys.stderr.isatty())
    state = {"done": 0}

    def progress(frac, _msg):
        step = int(frac * 1000) - state["done"]
        if step > 0:
            bar.update(step)
            state["done"] += step

    return bar, progress


annotator_option = click.option(
    "--annotator", "-a", envvar="LABELER_ANNOTATOR", default=None, metavar="NAME",
    help="Who is labeling (default: $LABELER_ANNOTATOR or your login name).")
project_argument = click.argument("project", type=click.Path(dir_okay=False))


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(labeler.__version__, prog_name="labeler")
def cli():
    """labeler: label wearable motion-sensor recordings from a few confirmed windows.

    Proposed labels are suggestions. Where labels feed clinical or safety decisions, a qualified
    person reviews them, and local rules and licensed practice come first. Recordings stay on this
    machine.
    """
