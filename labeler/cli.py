"""The `labeler` command: a thin layer over :class:`labeler.project.Project`.

Every command opens a project, calls one or two `Project` methods and prints the result. Bad input
ends with exit code 2 and one line that says what is wrong and what to do.
"""

from __future__ import annotations

import glob
import os
import sqlite3
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
        from storage import StoreError

        try:
            return super().invoke(ctx)
        except click.UsageError as exc:
            # click would print usage, a hint and the error on three lines: one line instead
            where = exc.ctx.command_path if exc.ctx is not None else ctx.command_path
            raise UserError(_one_line(f"{exc.format_message()}; see `{where} --help`")) from None
        except (LabelerError, StoreError) as exc:
            raise UserError(_one_line(str(exc))) from None
        except sqlite3.DatabaseError as exc:  # a project file damaged past what opening checks
            name = _opened.get("path") or "the project file"
            raise UserError(_one_line(f"{name}: the project file cannot be read ({exc}); restore it "
                                      "from a backup")) from None
        except OSError as exc:
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
        if os.path.exists(pattern):  # a file name may hold glob characters ([1], *)
            hits = [pattern]
        else:
            hits = sorted(glob.glob(pattern)) if glob.has_magic(pattern) else [pattern]
        if not hits:
            raise UserError(f"{pattern}: matches no file; check the pattern")
        paths.extend(hits)
    with _open(project, annotator) as p:
        bar, progress = _progress_bar("adding")
        with bar:
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
    click.echo(f"project {s.path}")
    click.echo(f"  {s.recordings} recording(s), {s.hours:.2f} h, {s.windows} windows of "
               f"{s.window_length_s:g} s every {s.window_step_s:g} s "
               f"(feature set {s.feature_set_version})")
    click.echo(f"  {s.confirmed} window(s) confirmed"
               + (f" by {', '.join(s.annotators)}" if s.annotators else ""))
    counts = s.counts
    if len(counts):
        width = max(len(c) for c in counts["class"])
        for _, row in counts.iterrows():
            mark = " (retired)" if row["retired"] else ""
            click.echo(f"    {row['class']:<{width}}  {row['confirmed']:>6} confirmed{mark}")


MAX_RANGE = 1_000_000


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
                if hi - lo >= MAX_RANGE:
                    raise UserError(f"--windows: range {part} spans more than {MAX_RANGE:,} "
                                    "windows; give a shorter range or use --span")
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
        click.echo(f"confirmed {batch.n_windows} window(s) as {class_name} "
                   f"(batch {batch.batch_id[:8]})")


@cli.command("undo")
@project_argument
@click.option("--batch", "batch_id", default=None, help="Undo this batch (default: your last one).")
@annotator_option
def undo_cmd(project, batch_id, annotator):
    """Undo your last batch (or a given one). Nothing is deleted; the undo is a batch of its own."""
    with _open(project, annotator) as p:
        undo = p.undo(batch_id)
    click.echo(f"undid batch {undo.undoes[:8]}: {undo.n_events} window(s) restored "
               f"(batch {undo.batch_id[:8]})")


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
        click.echo(f"merged {source} into {target}: {batch.n_events} label(s) moved")


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


@cli.command("export")
@project_argument
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv",
              show_default=True, help="Table format of windows and segments.")
@click.option("--confirmed-only", is_flag=True, help="Only windows a person confirmed.")
@click.option("--min-confidence", type=float, default=None, metavar="P",
              help="Leave out proposed windows whose confidence is below P (0-1).")
@click.option("--class", "classes", multiple=True, metavar="NAME",
              help="Only this class (repeat for several).")
@click.option("--overwrite", is_flag=True, help="Replace an earlier export in FOLDER.")
@annotator_option
def export_cmd(project, folder, fmt, confirmed_only, min_confidence, classes, overwrite, annotator):
    """Write the training set to FOLDER: windows, merged segments and a manifest (JSON)."""
    with _open(project, annotator) as p:
        out = p.export(folder, fmt=fmt, confirmed_only=confirmed_only,
                       min_confidence=min_confidence, classes=list(classes) or None,
                       overwrite=overwrite)
    m = out.manifest
    by = m["counts"]["by_status"]
    click.echo(f"wrote {out.windows} window(s) ({by['confirmed']} confirmed, {by['proposed']} "
               f"proposed) and {out.segments} segment(s) to {folder}")
    for kind in ("windows", "segments", "manifest"):
        click.echo(f"  {out.files[kind]}")
    click.echo("  accuracy estimate: " + _accuracy_line(m))
    if by["proposed"]:
        click.echo("  proposed labels are suggestions; a qualified person reviews them before use")


def _accuracy_line(manifest: dict) -> str:
    est = manifest.get("accuracy_estimate")
    if not est:
        return f"none ({manifest.get('accuracy_estimate_absent') or 'not available'})"
    value, lo, hi = est["value"], est["low"], est["high"]
    text = "none" if value is None else f"{value:.3f}"
    if lo is not None and hi is not None:
        text += f" ({lo:.3f}-{hi:.3f})"
    return text + f", {est['basis']} of {est['n']} window(s)"


@cli.command("import")
@project_argument
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--dry-run", is_flag=True, help="Report what would change; write nothing.")
@click.option("--no-new-classes", is_flag=True, help="Refuse labels that are not classes yet.")
@annotator_option
def import_cmd(project, file, dry_run, no_new_classes, annotator):
    """Confirm the windows inside each interval of a CSV (recording,start,end,label[,annotator]).

    A window takes an interval's label when its centre lies inside the interval (so a window
    straddling a boundary goes to the side holding most of it)."""
    with _open(project, annotator) as p:
        r = p.import_intervals(file, dry_run=dry_run, create_classes=not no_new_classes)
    verb = "would confirm" if dry_run else "confirmed"
    click.echo(f"{'dry run: ' if dry_run else ''}{verb} {r.windows} window(s) from "
               f"{r.intervals} interval(s) for {', '.join(r.annotators)}: {r.changes} "
               f"change(s), {r.relabels} of them relabel(s)")
    if r.new_classes:
        click.echo(f"  {'would add' if dry_run else 'added'} class(es): " + ", ".join(r.new_classes))
    for row in r.rows:
        if row.windows == 0:
            click.echo(f"  row {row.row}: no window of {row.recording} is centred in it; "
                       "nothing labeled")
    if dry_run:
        click.echo("  nothing written")
    else:
        click.echo("  batch(es): " + ", ".join(b.batch_id[:8] for b in r.batches))


def _utc_option(value: str | None, option: str) -> str | None:
    if value is None:
        return None
    import pandas as pd

    try:
        ts = pd.Timestamp(value)
    except (ValueError, TypeError):
        raise UserError(f"{option} {value!r}: not a time; give ISO-8601 like 2026-05-01T08:00Z") \
            from None
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    return ts.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@cli.command("history")
@project_argument
@click.option("--annotator", "who", default=None, metavar="NAME", help="Only events of NAME.")
@click.option("--class", "class_name", default=None, metavar="NAME", help="Only events of NAME.")
@click.option("--source", default=None, metavar="SOURCE",
              help="Only events made through SOURCE (map, timeline, queue, audit, import, cli, api, "
                   "class-merge, undo).")
@click.option("--since", default=None, metavar="TIME", help="Only events at or after TIME (UTC).")
@click.option("--until", default=None, metavar="TIME", help="Only events at or before TIME (UTC).")
@click.option("--batch", "batch_id", default=None, metavar="ID", help="Only events of this batch.")
@click.option("--last", type=int, default=None, metavar="N", help="Only the last N events.")
@click.option("--class-log", is_flag=True,
              help="Show the class changes (add, rename, colour, merge, retire) instead.")
def history_cmd(project, who, class_name, source, since, until, batch_id, last, class_log):
    """Every label event: when, who, what, through which source, in which batch (undo by batch)."""
    from labeler.project import SOURCES

    if class_log:
        _print_class_log(project, who)
        return

    if source is not None and source not in SOURCES:
        raise UserError(f"--source {source!r}: unknown; use one of {', '.join(SOURCES)}")
    with _open(project, readonly=True) as p:
        h = p.history(annotator=who, class_name=class_name, source=source,
                      since=_utc_option(since, "--since"), until=_utc_option(until, "--until"))
        if batch_id is not None:
            h = h[h["batch_id"].str.startswith(batch_id)]
        if last is not None:
            h = h.tail(max(0, last))
        if len(h) == 0:
            click.echo("no events match")
            return
        w = p.windows().set_index("id")
        # annotator: whose label the event set; by: who acted (differs for undo and class merges)
        rows = [("event", "at (UTC)", "annotator", "by", "action", "window", "class", "source",
                 "batch")]
        for ev in h.itertuples(index=False):
            win = (f"{w.at[ev.window_id, 'recording']}#{int(w.at[ev.window_id, 'seq'])}"
                   if ev.window_id in w.index else str(ev.window_id))
            label = "-" if ev.class_id is None or ev.class_id != ev.class_id else str(ev[6])
            rows.append((str(ev.id), ev.at[:19].replace("T", " "), ev.annotator,
                         ev.by if isinstance(ev.by, str) else "?", ev.action, win, label, ev.source,
                         ev.batch_id[:8]))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for r in rows:
        click.echo("  ".join(v.ljust(n) for v, n in zip(r, widths)).rstrip())


def _print_class_log(project, who) -> None:
    with _open(project, readonly=True) as p:
        log = p.class_log(who)
    if not len(log):
        click.echo("no class changes match")
        return
    rows = [("at (UTC)", "by", "action", "class (now)", "detail")]
    for r in log.to_dict("records"):
        text = ", ".join(f"{k} {v}" for k, v in r["detail"].items())
        rows.append((r["at"][:19].replace("T", " "), r["annotator"], r["action"],
                     str(r["class"] if r["class"] is not None else r["class_id"]), text))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    for r in rows:
        click.echo("  ".join(v.ljust(n) for v, n in zip(r, widths)).rstrip())


@cli.command("agreement")
@project_argument
def agreement_cmd(project):
    """Agreement between annotators: confusion table and Cohen's kappa per pair, Fleiss' kappa for
    three or more; and how many windows they currently disagree on."""
    with _open(project, readonly=True) as p:
        rep = p.agreement()
        n_dis = len(p.disagreements())
    if not rep["pairs"]:
        click.echo("no window is labeled by two annotators yet; agreement needs double-labeled "
                   "windows")
        return
    click.echo(f"{rep['double_labeled']} window(s) labeled by two or more of "
               f"{', '.join(rep['annotators'])}; {n_dis} with differing labels now")
    for pair in rep["pairs"]:
        kappa = "undefined" if pair["kappa"] != pair["kappa"] else f"{pair['kappa']:.3f}"
        click.echo("")
        click.echo(f"{pair['a']} (rows) vs {pair['b']} (columns): {pair['windows']} window(s), "
                   f"agreement {pair['agreement']:.3f}, Cohen's kappa {kappa}")
        table = pair["confusion"]
        keep = (table.sum(axis=0) + table.sum(axis=1)) > 0
        table = table.loc[keep, keep]
        head = [""] + [str(c) for c in table.columns]
        body = [[str(i)] + [str(int(v)) for v in row] for i, row in zip(table.index, table.values)]
        widths = [max(len(r[j]) for r in [head] + body) for j in range(len(head))]
        for r in [head] + body:
            click.echo("  " + "  ".join(v.rjust(n) if j else v.ljust(n)
                                        for j, (v, n) in enumerate(zip(r, widths))).rstrip())
    f = rep["fleiss"]
    if f is not None:
        kappa = "undefined" if f["kappa"] != f["kappa"] else f"{f['kappa']:.3f}"
        click.echo("")
        click.echo(f"Fleiss' kappa over the {f['windows']} window(s) all of {', '.join(f['annotators'])} "
                   f"labeled: {kappa}")


# ------------------------------------------------------------------------------ proposals

@cli.command("propose")
@project_argument
@click.option("--alpha", type=float, default=None, metavar="A",
              help="Share of a window's scores that comes from its neighbours (0-1, default 0.9).")
@click.option("--neighbors", type=int, default=10, show_default=True,
              help="Nearest neighbours per window in the graph.")
@click.option("--temporal-weight", type=float, default=None, metavar="W",
              help="Weight of the edge between consecutive windows (0 turns it off).")
@annotator_option
def propose_cmd(project, alpha, neighbors, temporal_weight, annotator):
    """Propose labels for every unconfirmed window by spreading the confirmed ones."""
    with _open(project, annotator) as p:
        bar, progress = _progress_bar("proposing")
        with bar:
            s = p.refresh_proposals(alpha=alpha, n_neighbors=neighbors,
                                    temporal_weight=temporal_weight, progress=progress)
    mean = s.mean_confidence
    click.echo(f"proposals run {s.run_id}: {s.proposed} window(s) proposed from "
               f"{s.confirmed} confirmed in {len(s.classes)} class(es) in {s.seconds:.2f} s"
               + (", graph rebuilt" if s.graph_rebuilt else "")
               + (", warm start" if s.warm_start else ""))
    if mean is not None:
        click.echo(f"  mean confidence {mean:.3f}; {s.low_support} window(s) far from any "
                   f"confirmation; {s.conflicts} confirmed window(s) in conflict")
    click.echo("  proposed labels are suggestions; a qualified person reviews them before use")


@cli.command("queue")
@project_argument
@click.option("-n", "n", type=int, default=20, show_default=True, help="How many windows.")
@annotator_option
def queue_cmd(project, n, annotator):
    """Windows to review next, most useful first, with the reason for each."""
    with _open(project, annotator) as p:
        q = p.review_queue(n)
    click.echo(f"{'window':>8}  {'reason':12}  {'recording':20}  {'start s':>9}  proposal")
    for r in q.itertuples(index=False):
        prop = "-" if r.proposed is None or r.proposed != r.proposed else \
            f"{r.proposed} ({r.confidence:.2f})"
        click.echo(f"{r.window_id:>8}  {r.reason:12}  {str(r.recording):20}  {r.start_s:>9.2f}  {prop}")


@cli.command("audit")
@project_argument
@click.option("-n", "n", type=int, default=30, show_default=True,
              help="How many windows to draw.")
@click.option("--status", "show_status", is_flag=True,
              help="Show the audit so far instead of drawing.")
@click.option("--seed", type=int, default=None, help="Seed of the random draw (for repeatability).")
@annotator_option
def audit_cmd(project, n, show_status, seed, annotator):
    """Draw a random sample of proposed windows to label blind (for an unbiased accuracy)."""
    with _open(project, annotator) as p:
        if show_status:
            a = p.audit_status()
            done = a[a["answer"].notna()]
            right = int((done["correct"] == True).sum())  # noqa: E712 (object column)
            click.echo(f"{len(a)} window(s) drawn, {len(done)} answered, {right} proposal(s) right")
            return
        d = p.draw_audit(n, random_state=seed)
    click.echo(f"drew {len(d)} window(s); label each without looking at its proposal, e.g. "
               "`labeler confirm PROJECT CLASS --windows ID`:")
    for r in d.itertuples(index=False):
        click.echo(f"  window {r.window_id}  {r.recording}  {r.start_s:.2f} s")


@cli.command("accuracy")
@project_argument
@annotator_option
def accuracy_cmd(project, annotator):
    """How accurate the proposals are, and what the estimate rests on."""
    with _open(project, annotator) as p:
        e = p.accuracy_estimate()
    if e.basis == "none":
        click.echo(f"no estimate: {e.note}")
        return
    click.echo(f"accuracy of proposed windows {e.value:.3f} ({e.level:.0%} interval "
               f"{e.low:.3f}-{e.high:.3f}), {e.basis} of {e.n} window(s)")
    if e.training_set is not None:
        t = e.training_set
        click.echo(f"  training set (confirmed counted as right) {t.value:.3f} "
                   f"({t.low:.3f}-{t.high:.3f})")
    if e.ece is not None:
        click.echo(f"  expected calibration error of the confidence {e.ece:.3f}")
    click.echo(f"  {e.note}")


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


def main(argv=None):
    """Console entry point."""
    try:
        cli.main(args=argv, prog_name="labeler", standalone_mode=True)
    except KeyboardInterrupt:
        click.echo("interrupted; nothing half-written (every write is one transaction)", err=True)
        sys.exit(130)


if __name__ == "__main__":  # pragma: no cover
    main()
