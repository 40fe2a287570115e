"""Commands that make, fill, show and serve a project: new, add, status, backup, demo, open, map."""

from __future__ import annotations

import glob
import os
from pathlib import Path

import click

from labeler.commands.base import (UserError, _Group, _open, _progress_bar, annotator_option,
                                   cli, project_argument)
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S


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
@click.option("--profile", "profile_path", default=None, metavar="FILE",
              help="A device profile (JSON) with the options below for this device's files.")
@click.option("--column", "column_maps", multiple=True, metavar="FILE_COLUMN=CHANNEL",
              help="Read a file's column as a channel, e.g. accel_x=wrist_acc_x[m/s2] (repeat, or "
                   "separate pairs with commas).")
@click.option("--time-column", default=None, metavar="NAME",
              help="Name of the time column (default: time, t, timestamp ...).")
@click.option("--time-unit", type=click.Choice(["s", "ms", "us", "ns"]), default=None,
              help="Unit of a numeric time column (default: seconds; Unix time in ms, us or ns is "
                   "recognised and noted).")
@click.option("--time-format", default=None, metavar="LAYOUT",
              help="Layout of clock times that are not ISO-8601, e.g. '%d/%m/%Y %H:%M:%S.%f'.")
@click.option("--tz", default=None, metavar="ZONE",
              help="Zone of clock times written without one, e.g. Europe/Vienna or UTC.")
@click.option("--skip-rows", type=click.IntRange(0, 1000), default=None, metavar="N",
              help="Lines before the column names (default: found and noted).")
@click.option("--rate", type=float, default=None, help="Sampling rate in Hz, for files without a "
              "time column (or to state the nominal rate).")
@click.option("--acc-unit", default=None, type=click.Choice(["g", "m/s2", "mg"]),
              help="Unit of acceleration columns without one (default: g, or what the level at "
                   "rest shows, noted).")
@click.option("--gyr-unit", default=None, type=click.Choice(["deg/s", "rad/s"]),
              help="Unit of angular-rate columns without one (default: deg/s).")
@click.option("--dry-run", is_flag=True,
              help="Read and check the files and print what was found; write nothing.")
@click.option("--save-profile", default=None, metavar="FILE",
              help="Write the reading options in effect to FILE as a device profile.")
@click.option("--person", default=None, metavar="ID",
              help="Who wore the sensors (exported for splits by person).")
@annotator_option
def add_cmd(project, files, profile_path, column_maps, time_column, time_unit, time_format, tz,
            skip_rows, rate, acc_unit, gyr_unit, dry_run, save_profile, person, annotator):
    """Add recording files (CSV, CSV.GZ or Parquet; globs allowed) to a project: all or none."""
    from labeler.profiles import (ReadOptions, check_options, check_profile_path, load_profile,
                                  parse_column_options)
    from labeler.profiles import save_profile as write_profile

    given = check_options(ReadOptions(
        columns=parse_column_options(column_maps), time_column=time_column, time_unit=time_unit,
        time_format=time_format, tz=tz, skip_rows=skip_rows, rate=rate, acc_unit=acc_unit,
        gyr_unit=gyr_unit))
    options = load_profile(profile_path).merged(given) if profile_path else given
    if save_profile:
        check_profile_path(save_profile, project)
    paths = _expand_files(files)
    with _open(project, annotator, readonly=dry_run) as p:
        bar, progress = _progress_bar("reading" if dry_run else "adding")
        with bar:
            added = p.add_recordings(paths, progress=progress, dry_run=dry_run, person=person,
                                     **options.as_kwargs())
        for a in added:
            verb = "would add" if dry_run else "added"
            click.echo(f"{verb} {a.name}: {a.duration_s / 60:.1f} min at {a.rate:g} Hz, "
                       f"{a.n_windows} windows")
            if dry_run:
                _print_reading(a.recording)
            for r in a.repairs:
                click.echo(f"  repaired: {r}")
            for n in a.notes:
                click.echo(f"  note: {n}")
    if save_profile:
        write_profile(_with_found(options, [a.recording for a in added]), save_profile)
        click.echo(f"wrote device profile {save_profile}")
    if dry_run:
        click.echo("dry run: nothing written to the project")


def _with_found(options, recordings):
    """The options plus what reading found alike in every file (time unit, acceleration unit,
    preamble length), so the saved profile states them."""
    from dataclasses import replace

    extra = {}
    for key in ("time_unit", "acc_unit", "skip_rows"):
        values = {(r.found.get(key) if r is not None else None) for r in recordings}
        if getattr(options, key) is None and len(values) == 1 and None not in values:
            extra[key] = values.pop()
    return replace(options, **extra)


def _expand_files(files) -> list[str]:
    paths: list[str] = []
    for pattern in files:
        if os.path.exists(pattern):  # a file name may hold glob characters ([1], *)
            hits = [pattern]
        else:
            hits = sorted(glob.glob(pattern)) if glob.has_magic(pattern) else [pattern]
        if not hits:
            raise UserError(f"{pattern}: matches no file; check the pattern")
        paths.extend(hits)
    return paths


def _print_reading(rec) -> None:
    """What a dry run found in one file: time, rate, channels with their units, gaps."""
    click.echo(f"  file: {rec.source_path}")
    click.echo(f"  time: {rec.time_read}" + (f"; first sample {rec.start_time}"
                                             if rec.start_time else ""))
    click.echo(f"  rate: {rec.rate:g} Hz, {rec.n_samples} samples on the grid")
    parts = []
    for ch in rec.channels:
        src = rec.sources.get(ch, ch)
        parts.append(f"{ch}" + (f" <- {src}" if src != ch else "") + f" [{rec.units[ch]}]")
    click.echo(f"  channels ({len(rec.channels)}): " + ", ".join(parts))
    gaps = rec.gaps()
    if gaps:
        shown = "; ".join(f"at {a:.1f} s for {d:.2f} s" for a, d in gaps[:5])
        more = f"; and {len(gaps) - 5} more" if len(gaps) > 5 else ""
        click.echo(f"  gaps: {len(gaps)}, {sum(d for _, d in gaps):.1f} s in all: {shown}{more}")
    else:
        click.echo("  gaps: none")


@cli.command("status")
@project_argument
def status_cmd(project):
    """What is in a project: recordings, windows, classes and confirmations."""
    with _open(project, readonly=True) as p:
        _print_status(p)


def _print_status(p) -> None:
    s = p.status()
    click.echo(f"project {s.path}")
    click.echo(f"  {s.recordings} recording(s), {s.hours:.2f} h, {s.windows} windows of "
               f"{s.window_length_s:g} s every {s.window_step_s:g} s "
               f"(feature set {s.feature_set_version})")
    click.echo(f"  {s.confirmed} window(s) confirmed"
               + (f" by {', '.join(s.annotators)}" if s.annotators else ""))
    recs = s.recording_list
    if recs:
        click.echo("  recordings:")
        width = max(len(r.name) for r in recs)
        for r in recs:
            start = f", from {r.start_time[:19].replace('T', ' ')} UTC" if r.start_time else ""
            who = f", person {r.person}" if r.person else ""
            click.echo(f"    {r.name:<{width}}  {r.minutes:7.1f} min at {r.rate:g} Hz{start}{who}")
    if s.counts:
        width = max(len(c.name) for c in s.counts)
        for c in s.counts:
            mark = " (retired)" if c.retired else ""
            click.echo(f"    {c.name:<{width}}  {c.confirmed:>6} confirmed{mark}")


@cli.group("recording", cls=_Group)
def recording_group():
    """List and remove recordings, say who wore them (the label history is kept)."""


@recording_group.command("list")
@project_argument
@click.option("--removed", is_flag=True, help="Show removed recordings too.")
def recording_list_cmd(project, removed):
    """The recordings: length, rate, windows, confirmed windows, person, start, source file."""
    with _open(project, readonly=True) as p:
        recs = p.recordings(include_removed=removed)
        w = p.windows()
        lab = p.labels()
    confirmed = w[w["id"].isin(lab["window_id"])].groupby("recording_id").size()
    n_windows = w.groupby("recording_id").size()
    rows = [("recording", "minutes", "rate", "windows", "confirmed", "person", "start", "file")]
    for r in recs.itertuples(index=False):
        gone = isinstance(r.removed_at, str)
        rows.append((r.name, f"{r.n_samples / r.rate / 60:.1f}", f"{r.rate:g}",
                     "-" if gone else str(int(n_windows.get(r.id, 0))),
                     "-" if gone else str(int(confirmed.get(r.id, 0))),
                     r.person if isinstance(r.person, str) else "-",
                     r.start_time[:19] if isinstance(r.start_time, str) else "-",
                     str(r.source_path) + (f"  (removed {r.removed_at[:19]} by {r.removed_by})"
                                           if gone else "")))
    if len(rows) == 1:
        click.echo("no recordings yet; add them with `labeler add PROJECT FILES`")
        return
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]))]
    for row in rows:
        click.echo("  ".join(v.ljust(n) for v, n in zip(row, widths)).rstrip())


@recording_group.command("remove")
@project_argument
@click.argument("recording")
@click.option("--yes", is_flag=True, help="Remove it: its signal and features are deleted.")
@annotator_option
def recording_remove_cmd(project, recording, yes, annotator):
    """Take a recording out of the project. Its label events stay in the history; its windows
    leave proposals, the queue, audits, the map and exports; its signal and features are deleted
    from the project file (backups made before keep them)."""
    with _open(project, annotator, readonly=not yes) as p:
        rid = p.recording_id(recording)
        name = p.recordings().set_index("id").loc[rid, "name"]
        if not yes:
            raise UserError(f"removing {name} deletes its signal and features from the project "
                            "file (its label events stay in the history); add --yes to remove it")
        out = p.remove_recording(rid)
    click.echo(f"removed {out.name}: {out.windows} window(s), {out.confirmed} confirmed; its label "
               "events stay in the history")
    click.echo("  its windows are out of proposals, the queue, audits, the map and exports; run "
               "`labeler propose` to spread labels without it")


@recording_group.command("person")
@project_argument
@click.argument("recording")
@click.argument("person")
@annotator_option
def recording_person_cmd(project, recording, person, annotator):
    """Say who wore the sensors of RECORDING (exported for splits by person)."""
    with _open(project, annotator) as p:
        p.set_person(recording, person)
    click.echo(f"{recording}: person {person}")


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
@click.option("--port", type=int, default=0, help="Port for the app (default: a free one).")
@click.option("--no-browser", is_flag=True, help="Print the URL only; do not open a browser.")
@click.option("--no-serve", is_flag=True, help="Build the demo project and stop (no app).")
def demo_cmd(folder, minutes, people, port, no_browser, no_serve):
    """Build the demo project (an invented orchard harvest shift) and open the app on it."""
    from labeler.demo import build_demo

    project = build_demo(Path(folder), minutes=minutes, people=people, echo=click.echo)
    from labeler.project import Project

    with Project.open(project, readonly=True) as p:
        _print_status(p)
    if no_serve:
        return
    _serve_app(project, host="127.0.0.1", port=port, annotator=None, no_browser=no_browser)


def _serve_app(project, *, host, port, annotator, no_browser) -> None:
    """Compute the map and proposals if missing, then serve the app until Ctrl-C."""
    from labeler.app.prepare import prepare
    from labeler.app.server import serve

    prepare(project, annotator, echo=click.echo)
    open_browser = not no_browser and not os.environ.get("CI")
    serve(project, host=host, port=port, annotator=annotator, open_browser=open_browser,
          echo=click.echo)


@cli.command("open")
@project_argument
@click.option("--port", type=int, default=0, help="Port for the app (default: a free one).")
@click.option("--host", default="127.0.0.1", show_default=True,
              help="Address to listen on; anything but 127.0.0.1 exposes the recordings.")
@click.option("--no-browser", is_flag=True, help="Print the URL only; do not open a browser.")
@annotator_option
def open_cmd(project, port, host, no_browser, annotator):
    """Open the labeling app on a project in the browser (serves until Ctrl-C)."""
    if not 0 <= port <= 65535:
        raise UserError(f"--port {port}: give a port between 1 and 65535 (or 0 for a free one)")
    _serve_app(project, host=host, port=port, annotator=annotator, no_browser=no_browser)


@cli.command("map")
@project_argument
@click.option("--method", type=click.Choice(["pca", "tsne"]), default="tsne", show_default=True,
              help="pca: instant; tsne: similar windows closer together (takes longer).")
@click.option("--seed", type=int, default=0, show_default=True, help="Random seed of the t-SNE map.")
@click.option("--jobs", type=click.IntRange(1, 64), default=1, show_default=True,
              help="Threads for t-SNE (the map depends on it as well as on the seed).")
@annotator_option
def map_cmd(project, method, seed, jobs, annotator):
    """Compute the 2-D map of every window (a full re-fit) and store it in the project."""
    with _open(project, annotator) as p:
        bar, progress = _progress_bar("map")
        with bar:
            out = p.compute_map(method, progress=progress, random_state=seed, n_jobs=jobs)
        click.echo(f"map run {out.run_id} ({out.method}): {out.n_windows} windows, "
                   f"{out.n_fitted} fitted, {out.seconds:.1f} s")
