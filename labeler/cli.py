"""The `labeler` command: a thin layer over :class:`labeler.project.Project`.

Every command opens a project, calls one or two `Project` methods and prints the result. Bad input
ends with exit code 2 and one line that says what is wrong and what to do.
"""

from __future__ import annotations

import glob
import os
import sys
from pathlib import Path

import click

import labeler
from labeler.errors import LabelerError
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S

EXIT_BAD_INPUT = 2


class UserError(click.ClickException):
    exit_code = EXIT_BAD_INPUT


class _Group(click.Group):
    """Turns labeler's typed errors into one line on stderr and exit code 2, never a traceback."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except LabelerError as exc:
            raise UserError(_one_line(str(exc))) from None
        except OSError as exc:
            name = getattr(exc, "filename", None) or ""
            raise UserError(_one_line(f"{name}: {exc.strerror or exc}; check the path and "
                                      "permissions")) from None


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def _open(path: str, annotator: str | None = None, readonly: bool = False):
    from labeler.project import Project

    return Project.open(path, annotator=annotator, readonly=readonly)


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


@cli.command("new")
@project_argument
@click.option("--window", "window_s", type=float, default=DEFAULT_LENGTH_S, show_default=True,
              help="Window length in seconds.")
@click.option("--step", "step_s", type=float, default=DEFAULT_STEP_S, show_default=True,
              help="Step between window starts in seconds.")
@annotator_option
def new_cmd(project, window_s, step_s, annotator):
    """Create an empty project file."""
    from labeler.project import Project

    with Project.create(project, window_length_s=window_s, window_step_s=step_s,
                        annotator=annotator) as p:
        click.echo(f"created {p.path} (windows {window_s:g} s, step {step_s:g} s)")


@cli.command("add")
@project_argument
@click.argument("files", nargs=-1, required=True)
@click.option("--rate", type=float, default=None, help="Sampling rate in Hz, for files without a "
              "time column (or to state the nominal rate).")
@click.option("--time-column", default=None, help="Name of the time column (default: time, t or "
              "timestamp).")
@click.option("--acc-unit", default="g", show_default=True,
              type=click.Choice(["g", "m/s2"]), help="Unit of acceleration columns without one.")
@click.option("--gyr-unit", default="deg/s", show_default=True,
              type=click.Choice(["deg/s", "rad/s"]), help="Unit of angular-rate columns without one.")
@annotator_option
def add_cmd(project, files, rate, time_column, acc_unit, gyr_unit, annotator):
    """Add recording files (CSV or Parquet; globs allowed) to a project: all of them or none."""
    paths: list[str] = []
    for pattern in files:
        hits = sorted(glob.glob(pattern)) if glob.has_magic(pattern) else [pattern]
        if not hits:
            raise UserError(f"{pattern}: matches no file; check the pattern")
        paths.extend(hits)
    with _open(project, annotator) as p:
        with click.progressbar(length=1000, label="adding", file=sys.stderr, show_eta=False,
                               hidden=not sys.stderr.isatty()) as bar:
            state = {"done": 0}

            def progress(frac, _msg):
                step = int(frac * 1000) - state["done"]
                if step > 0:
                    bar.update(step)
                    state["done"] += step

            added = p.add_recordings(paths, rate=rate, time_column=time_column,
                                     acc_unit=acc_unit, gyr_unit=gyr_unit, progress=progress)
        for a in added:
            click.echo(f"added {a.name}: {a.duration_s / 60:.1f} min at {a.rate:g} Hz, "
                       f"{a.n_windows} windows")
            for r in a.repairs:
                click.echo(f"  repaired: {r}")


@cli.command("status")
@project_argument
def status_cmd(project):
    """What is in a project: recordings, windows, classes and confirmations."""
    with _open(project, readonly=True) as p:
        _print_status(p)


def _print_status(p) -> None:
    s = p.status()
    click.echo(f"project {s['path']}")
    click.echo(f"  {s['recordings']} recording(s), {s['hours']:.2f} h, {s['windows']} windows of "
               f"{s['window_length_s']:g} s every {s['window_step_s']:g} s "
               f"(feature set {s['feature_set_version']})")
    click.echo(f"  {s['confirmed']} window(s) confirmed"
               + (f" by {', '.join(s['annotators'])}" if s["annotators"] else ""))
    counts = s["counts"]
    if len(counts):
        width = max(len(c) for c in counts["class"])
        for _, row in counts.iterrows():
            mark = " (retired)" if row["retired"] else ""
            click.echo(f"    {row['class']:<{width}}  {row['confirmed']:>6} confirmed{mark}")
    extra = getattr(p, "status_extra", None)
    if callable(extra):
        for line in extra():
            click.echo("  " + line)


def _parse_ids(text: str) -> list[int]:
    ids: list[int] = []
    for part in text.replace(" ", ",").split(","):
        if not part:
            continue
        try:
            if "-" in part[1:]:
                a, b = part.split("-", 1)
                lo, hi = int(a), int(b)
                if hi < lo:
                    raise UserError(f"--windows: range {part} runs backwards; write it low-high")
                ids.extend(range(lo, hi + 1))
            else:
                ids.append(int(part))
        except ValueError:
            raise UserError(f"--windows: {part!r} is not a window id; write ids like 12,13,20-25") \
                from None
    return ids


@cli.command("confirm")
@project_argument
@click.argument("class_name", metavar="CLASS")
@click.option("--windows", "window_ids", default=None, metavar="IDS",
              help="Window ids: 12,13,20-25.")
@click.option("--span", nargs=3, default=None, metavar="RECORDING START END",
              help="All windows of a recording whose larger part lies between START and END s.")
@click.option("--new-class", is_flag=True, help="Create the class if it does not exist.")
@click.option("--note", default=None, help="A note kept with the batch.")
@annotator_option
def confirm_cmd(project, class_name, window_ids, span, new_class, note, annotator):
    """Confirm windows as CLASS (one batch in the history)."""
    if (window_ids is None) == (span is None):
        raise UserError("give either --windows IDS or --span RECORDING START END")
    with _open(project, annotator) as p:
        if span is not None:
            rec, a, b = span
            try:
                start, end = float(a), float(b)
            except ValueError:
                raise UserError(f"--span: start {a!r} and end {b!r} must be seconds") from None
            ids = p.window_ids_in_span(rec, start, end)
            if len(ids) == 0:
                raise UserError(f"--span: no window of {rec} lies mostly between {start:g} and "
                                f"{end:g} s; widen the span")
        else:
            ids = _parse_ids(window_ids)
        batch = p.confirm(ids, class_name, source="cli", note=note, create_class=new_class)
        click.echo(f"confirmed {len(set(map(int, ids)))} window(s) as {class_name} "
                   f"(batch {batch[:8]})")


@cli.command("undo")
@project_argument
@click.option("--batch", "batch_id", default=None, help="Undo this batch (default: your last one).")
@annotator_option
def undo_cmd(project, batch_id, annotator):
    """Undo your last batch (or a given one). Nothing is deleted; the undo is a batch of its own."""
    with _open(project, annotator) as p:
        if batch_id is not None and len(batch_id) < 32:
            full = [b["id"] for b in p.store.batches() if b["id"].startswith(batch_id)]
            if len(full) != 1:
                raise UserError(f"--batch {batch_id}: matches {len(full)} batches; give more of the id")
            batch_id = full[0]
        undo = p.undo(batch_id)
        n = len(p.store.batch_events(undo))
        target = p.store.batch(undo)["undoes"]
        click.echo(f"undid batch {target[:8]}: {n} window(s) restored (batch {undo[:8]})")


@cli.group("class", cls=_Group)
def class_group():
    """Add, rename, merge, retire and list classes (history is kept)."""


@class_group.command("list")
@project_argument
def class_list_cmd(project):
    """List classes with their colour and confirmed counts."""
    with _open(project, readonly=True) as p:
        counts = p.counts().set_index("class")["confirmed"]
        cls = p.classes()
        if len(cls) == 0:
            click.echo("no classes yet; add one with `labeler class add PROJECT NAME`")
        for _, c in cls.iterrows():
            state = ""
            if c["merged_into"] is not None and c["merged_into"] == c["merged_into"]:
                state = f"  merged into {p.class_name(int(c['merged_into']))}"
            elif c["retired_at"] is not None:
                state = "  retired"
            click.echo(f"{c['name']}  {c['colour']}  {int(counts.get(c['name'], 0))} confirmed{state}")


@class_group.command("add")
@project_argument
@click.argument("names", nargs=-1, required=True)
@annotator_option
def class_add_cmd(project, names, annotator):
    """Add one or more classes."""
    with _open(project, annotator) as p:
        for n in names:
            p.add_class(n)
            click.echo(f"added class {n}")


@class_group.command("rename")
@project_argument
@click.argument("old")
@click.argument("new")
@annotator_option
def class_rename_cmd(project, old, new, annotator):
    """Rename a class; its history follows."""
    with _open(project, annotator) as p:
        p.rename_class(old, new)
        click.echo(f"renamed {old} to {new}")


@class_group.command("merge")
@project_argument
@click.argument("source")
@click.argument("target")
@annotator_option
def class_merge_cmd(project, source, target, annotator):
    """Move every label of SOURCE to TARGET and retire SOURCE."""
    with _open(project, annotator) as p:
        batch = p.merge_classes(source, target)
        n = len(p.store.batch_events(batch)) if batch else 0
        click.echo(f"merged {source} into {target}: {n} label(s) moved")


@class_group.command("retire")
@project_argument
@click.argument("name")
@annotator_option
def class_retire_cmd(project, name, annotator):
    """Retire a class: no new confirmations; existing ones are kept."""
    with _open(project, annotator) as p:
        p.retire_class(name)
        click.echo(f"retired {name}")


@cli.command("backup")
@project_argument
@click.argument("dest", type=click.Path(dir_okay=False))
def backup_cmd(project, dest):
    """Write a consistent copy of a project, safe while it is in use."""
    with _open(project, readonly=False) as p:
        p.backup(dest)
    click.echo(f"wrote {dest}")


@cli.command("demo")
@click.option("--dir", "folder", type=click.Path(file_okay=False), default="labeler-demo",
              show_default=True, help="Folder for the demo recordings and project.")
@click.option("--minutes", type=float, default=40.0, show_default=True,
              help="Length of each simulated recording.")
@click.option("--people", type=int, default=3, show_default=True, help="Simulated pickers.")
def demo_cmd(folder, minutes, people):
    """Build the demo project (an invented orchard harvest shift) and show what is in it."""
    from labeler.demo import build_demo

    project = build_demo(Path(folder), minutes=minutes, people=people, echo=click.echo)
    from labeler.project import Project

    with Project.open(project, readonly=True) as p:
        _print_status(p)


def main(argv=None):
    """Console entry point."""
    try:
        cli.main(args=argv, prog_name="labeler", standalone_mode=True)
    except KeyboardInterrupt:
        click.echo("interrupted; nothing half-written (every write is one transaction)", err=True)
        sys.exit(130)


if __name__ == "__main__":  # pragma: no cover
    main()
