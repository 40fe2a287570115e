"""Commands on labels and classes: confirm, undo, class, import, history, agreement."""

from __future__ import annotations

import click

from labeler.commands.base import UserError, _Group, _open, annotator_option, cli, project_argument


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
    _check_selection(window_ids, span)
    with _open(project, annotator) as p:
        ids = _selected_ids(p, window_ids, span)
        batch = p.confirm(ids, class_name, source="cli", note=note, create_class=new_class)
        click.echo(f"confirmed {batch.n_windows} window(s) as {class_name} "
                   f"(batch {batch.batch_id[:8]})")


def _check_selection(window_ids, span) -> None:
    if (window_ids is None) == (span is None):
        raise UserError("give either --windows IDS or --span RECORDING START END")


def _selected_ids(p, window_ids, span) -> list[int]:
    """Window ids from --windows or --span."""
    if span is None:
        return _parse_ids(window_ids)
    rec, a, b = span
    try:
        start, end = float(a), float(b)
    except ValueError:
        raise UserError(f"--span: start {a!r} and end {b!r} must be seconds") from None
    ids = p.window_ids_in_span(rec, start, end)
    if len(ids) == 0:
        raise UserError(f"--span: no window of {rec} lies mostly between {start:g} and "
                        f"{end:g} s; widen the span")
    return ids


@cli.command("answer")
@project_argument
@click.argument("answer", type=click.Choice(["mixed", "unsure"]))
@click.option("--windows", "window_ids", default=None, metavar="IDS",
              help="Window ids: 12,13,20-25.")
@click.option("--span", nargs=3, default=None, metavar="RECORDING START END",
              help="All windows of a recording whose larger part lies between START and END s.")
@click.option("--note", default=None, help="A note kept with the batch.")
@annotator_option
def answer_cmd(project, answer, window_ids, span, note, annotator):
    """Answer windows that are not one activity: mixed (they span activities) or unsure (cannot
    tell). One batch in the history, undone like any other; such windows leave the review queue,
    proposals do not learn from them and the training set leaves them out."""
    _check_selection(window_ids, span)
    with _open(project, annotator) as p:
        batch = p.answer(_selected_ids(p, window_ids, span), answer, source="cli", note=note)
    click.echo(f"answered {batch.n_windows} window(s) {answer} (batch {batch.batch_id[:8]})")


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


@cli.command("import")
@project_argument
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--dry-run", is_flag=True, help="Report what would change; write nothing.")
@click.option("--no-new-classes", is_flag=True, help="Refuse labels that are not classes yet.")
@click.option("--tz", default=None, metavar="ZONE",
              help="Zone of clock times written without one, e.g. Europe/Vienna or UTC.")
@annotator_option
def import_cmd(project, file, dry_run, no_new_classes, tz, annotator):
    """Confirm the windows inside each interval of a CSV (recording,start,end,label[,annotator]).

    Start and end are seconds from the recording's first sample or ISO-8601 clock times. A window
    takes an interval's label when its centre lies inside the interval (so a window straddling a
    boundary goes to the side holding most of it)."""
    if tz is not None:
        from labeler.profiles import check_zone

        check_zone(tz, "--tz")
    with _open(project, annotator) as p:
        r = p.import_intervals(file, dry_run=dry_run, create_classes=not no_new_classes, tz=tz)
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
@click.option("--annotator", "-a", "who", default=None, metavar="NAME",
              help="Only events of annotator NAME (the name labels were made with, -a NAME).")
@click.option("--class", "class_name", default=None, metavar="NAME",
              help="Only events of class NAME.")
@click.option("--source", default=None, metavar="SOURCE",
              help="Only events made through SOURCE (map, timeline, queue, audit, import, cli, api, "
                   "class-merge, undo).")
@click.option("--since", default=None, metavar="TIME", help="Only events at or after TIME (UTC).")
@click.option("--until", default=None, metavar="TIME", help="Only events at or before TIME (UTC).")
@click.option("--batch", "batch_id", default=None, metavar="ID", help="Only events of this batch.")
@click.option("--last", type=click.IntRange(min=0), default=None, metavar="N",
              help="Only the last N events.")
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
                      since=_utc_option(since, "--since"), until=_utc_option(until, "--until"),
                      as_frame=False)
        if batch_id is not None:
            h = [ev for ev in h if ev["batch_id"].startswith(batch_id)]
        if last is not None:
            h = h[len(h) - min(len(h), last):]
        if not h:
            click.echo("no events match")
            return
        names = p.window_names([ev["window_id"] for ev in h])
        # annotator: whose label the event set; by: who acted (differs for undo and class merges)
        rows = [("event", "at (UTC)", "annotator", "by", "action", "window", "class", "source",
                 "batch")]
        for ev in h:
            win = names.get(ev["window_id"], str(ev["window_id"]))
            label = "-" if ev["class_id"] is None else str(ev["class"])
            rows.append((str(ev["id"]), ev["at"][:19].replace("T", " "), ev["annotator"],
                         ev["by"] if isinstance(ev["by"], str) else "?", ev["action"], win, label,
                         ev["source"], ev["batch_id"][:8]))
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
