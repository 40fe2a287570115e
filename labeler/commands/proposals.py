"""Commands on proposals and what comes out of them: propose, queue, audit, accuracy, export."""

from __future__ import annotations

import click

from labeler.commands.base import _open, _progress_bar, annotator_option, cli, project_argument


@cli.command("export")
@project_argument
@click.argument("folder", type=click.Path(file_okay=False))
@click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv",
              show_default=True, help="Table format of windows and segments.")
@click.option("--confirmed-only", is_flag=True, help="Only windows a person confirmed.")
@click.option("--min-confidence", type=click.FloatRange(0.0, 1.0), default=None, metavar="P",
              help="Leave out proposed windows whose confidence is below P (0-1).")
@click.option("--class", "classes", multiple=True, metavar="NAME",
              help="Only this class (repeat for several).")
@click.option("--overwrite", is_flag=True, help="Replace an earlier export in FOLDER.")
@click.option("--features", is_flag=True,
              help="Add each window's features (one named column each) to the window rows.")
@click.option("--signal", is_flag=True,
              help="Write the window signals to signals.npz (one sampling rate needed).")
@click.option("--keep-answers", is_flag=True,
              help="Keep windows answered mixed or not sure (left out by default).")
@annotator_option
def export_cmd(project, folder, fmt, confirmed_only, min_confidence, classes, overwrite, features,
               signal, keep_answers, annotator):
    """Write the training set to FOLDER: windows, merged segments and a manifest (JSON).

    Window rows carry person, recording and bout: split by them (e.g. GroupKFold), since
    overlapping windows leak across a random train/test split."""
    with _open(project, annotator) as p:
        out = p.export(folder, fmt=fmt, confirmed_only=confirmed_only,
                       min_confidence=min_confidence, classes=list(classes) or None,
                       overwrite=overwrite, features=features, signal=signal,
                       include_answers=keep_answers)
    m = out.manifest
    by = m["counts"]["by_status"]
    click.echo(f"wrote {out.windows} window(s) ({by['confirmed']} confirmed, {by['proposed']} "
               f"proposed) and {out.segments} segment(s) to {folder}")
    for kind in ("windows", "segments", "signals", "manifest"):
        if kind in out.files:
            click.echo(f"  {out.files[kind]}")
    click.echo("  split by person, recording or bout (columns of the window rows), never at "
               "random: overlapping windows leak across a random split")
    click.echo("  accuracy estimate: " + _accuracy_line(m))
    if by["proposed"]:
        click.echo("  proposed labels are suggestions; a qualified person reviews them before use")


def _accuracy_line(manifest: dict) -> str:
    est = manifest["accuracy_estimate"]
    if est is None:
        return f"none ({manifest['accuracy_estimate_absent']})"
    value, lo, hi = est["value"], est["low"], est["high"]
    text = "none" if value is None else f"{value:.3f}"
    if lo is not None and hi is not None:
        text += f" ({lo:.3f}-{hi:.3f})"
    return text + f", {est['basis']} of {est['n']} window(s)"


@cli.command("propose")
@project_argument
@click.option("--alpha", type=click.FloatRange(0.0, 1.0, min_open=True, max_open=True),
              default=None, metavar="A",
              help="Share of a window's scores that comes from its neighbours (0-1, default 0.9).")
@click.option("--neighbors", type=click.IntRange(1, 1000), default=10, show_default=True,
              help="Nearest neighbours per window in the graph.")
@click.option("--temporal-weight", type=click.FloatRange(0.0, 1e6), default=None, metavar="W",
              help="Weight of the edge between consecutive windows (0 turns it off).")
@annotator_option
def propose_cmd(project, alpha, neighbors, temporal_weight, annotator):
    """Propose labels for every unconfirmed window by spreading the confirmed ones."""
    with _open(project, annotator) as p:
        bar, progress = _progress_bar("proposing")
        with bar:
            s = p.refresh_proposals(alpha=alpha, n_neighbors=neighbors,
                                    temporal_weight=temporal_weight, progress=progress)
        e = p.accuracy_estimate() if s.proposed else None
    mean = s.mean_confidence
    click.echo(f"proposals run {s.run_id}: {s.proposed} window(s) proposed from "
               f"{s.confirmed} confirmed in {len(s.classes)} class(es) in {s.seconds:.2f} s"
               + (", graph rebuilt" if s.graph_rebuilt else "")
               + (", warm start" if s.warm_start else ""))
    if mean is not None:
        click.echo(f"  {s.conflicts} confirmed window(s) in conflict with their neighbours")
    if e is not None and e.expected_wrong is not None:
        click.echo(f"  about {e.expected_wrong:.0f} proposal(s) expected wrong, {e.likely_wrong} "
                   "more likely wrong than right (calibrated confidence; `labeler accuracy`)")
    elif e is not None:
        click.echo(f"  {e.note}")
    click.echo("  proposed labels are suggestions; a qualified person reviews them before use")


@cli.command("queue")
@project_argument
@click.option("-n", "n", type=click.IntRange(1, 100000), default=20, show_default=True,
              help="How many windows.")
@annotator_option
def queue_cmd(project, n, annotator):
    """Windows to review next, most useful first, with the reason for each."""
    with _open(project, annotator) as p:
        q = p.review_queue(n, as_frame=False)
    click.echo(f"{'window':>8}  {'reason':12}  {'recording':20}  {'start s':>9}  proposal")
    for r in q:
        prop = "-" if r["proposed"] is None else f"{r['proposed']} ({r['confidence']:.2f})"
        click.echo(f"{r['window_id']:>8}  {r['reason']:12}  {r['recording']:20}  "
                   f"{r['start_s']:>9.2f}  {prop}")


@cli.command("audit")
@project_argument
@click.option("-n", "n", type=click.IntRange(1, 100000), default=30, show_default=True,
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
        click.echo(f"proposals run {e.run_id}: {e.note}")
        if e.needs_audit:
            click.echo(f"  for a figure now: `labeler audit {project} -n 30`, then label each drawn "
                       f"window (`labeler confirm {project} CLASS --windows ID`, or `labeler "
                       f"answer {project} mixed|unsure --windows ID`) and run `labeler accuracy "
                       f"{project}` again")
        return
    click.echo(f"accuracy of proposed windows {e.value:.3f} ({e.level:.0%} interval "
               f"{e.low:.3f}-{e.high:.3f}), proposals run {e.run_id}")
    if e.training_set is not None:
        t = e.training_set
        click.echo(f"  training set (confirmed counted as right) {t.value:.3f} "
                   f"({t.low:.3f}-{t.high:.3f})")
    if e.expected_wrong is not None:
        click.echo(f"  about {e.expected_wrong:.0f} proposal(s) expected wrong, {e.likely_wrong} "
                   "more likely wrong than right")
    if e.ece is not None:
        raw = e.estimate.details.get("ece_raw")
        click.echo("  expected calibration error of the calibrated confidence "
                   f"{e.ece:.3f}" + (f" (spreading's own confidence {raw:.3f})" if raw is not None else ""))
    click.echo(f"  rests on: {e.note}")
    if e.audit_advised:
        click.echo(f"  the interval is wide: to narrow it, `labeler audit {project} -n 30`, label "
                   f"each drawn window without looking at its proposal and run `labeler accuracy "
                   f"{project}` again")
