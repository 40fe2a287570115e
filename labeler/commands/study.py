"""Commands for whole studies: ingest (many recordings on workers) and apply (the project's labels
carried to every recording of a study), on a Dask cluster or local processes."""

from __future__ import annotations

import click

from labeler.commands.base import _open, _progress_bar, annotator_option, cli, project_argument

EXIT_SOME_REFUSED = 1


def _runner_options(fn):
    fn = click.option("--backend", type=click.Choice(["auto", "dask", "processes"]),
                      default="auto", show_default=True,
                      help="auto: Dask when installed (pip install 'labeler[scale]'), else a "
                           "local process pool.")(fn)
    fn = click.option("--scheduler", default=None, metavar="ADDRESS",
                      help="Address of a running Dask scheduler (e.g. tcp://10.0.0.5:8786); "
                           "its workers must see the files under the same paths. Default: a "
                           "local cluster on this machine.")(fn)
    fn = click.option("--workers", type=click.IntRange(1, 512), default=None,
                      help="Worker processes of the local cluster or pool (default: one per "
                           "CPU core).")(fn)
    return fn


def _read_options(fn):
    fn = click.option("--gyr-unit", default="deg/s", show_default=True,
                      type=click.Choice(["deg/s", "rad/s"]),
                      help="Unit of angular-rate columns without one.")(fn)
    fn = click.option("--acc-unit", default="g", show_default=True,
                      type=click.Choice(["g", "m/s2"]),
                      help="Unit of acceleration columns without one.")(fn)
    fn = click.option("--time-column", default=None,
                      help="Name of the time column (default: time, t or timestamp).")(fn)
    fn = click.option("--rate", type=float, default=None,
                      help="Sampling rate in Hz, for files without a time column.")(fn)
    return fn


def _read_kwargs(rate, time_column, acc_unit, gyr_unit) -> dict:
    out = {"acc_unit": acc_unit, "gyr_unit": gyr_unit}
    if rate is not None:
        out["rate"] = rate
    if time_column is not None:
        out["time_column"] = time_column
    return out


def _report_refused(refused) -> None:
    for r in refused:
        click.echo(f"refused: {r.reason}", err=True)


@cli.command("ingest")
@project_argument
@click.argument("sources", nargs=-1, required=True)
@click.option("--all-or-none", is_flag=True,
              help="Add nothing when any file is refused (default: add the others).")
@_runner_options
@_read_options
@annotator_option
def ingest_cmd(project, sources, all_or_none, workers, scheduler, backend, rate, time_column,
               acc_unit, gyr_unit, annotator):
    """Add many recordings in parallel: one task per file (read, check, window, features).

    SOURCES are files, glob patterns or folders (searched for CSV and Parquet files). Each
    recording is stored in its own transaction as soon as it is ready; a refused file is
    reported and the rest go on (exit code 1 when any was refused).
    """
    with _open(project, annotator) as p:
        bar, progress = _progress_bar("ingest")
        with bar:
            rep = p.add_many(list(sources), workers=workers, scheduler=scheduler,
                             backend=backend, all_or_none=all_or_none, progress=progress,
                             **_read_kwargs(rate, time_column, acc_unit, gyr_unit))
    for a in rep.added:
        click.echo(f"added {a.name}: {a.duration_s / 60:.1f} min, {a.n_windows} windows")
    _report_refused(rep.refused)
    click.echo(f"{len(rep.added)} recording(s) added ({rep.n_windows} windows), "
               f"{len(rep.refused)} refused, in {rep.seconds:.1f} s on {rep.runner}")
    if rep.refused:
        raise SystemExit(EXIT_SOME_REFUSED)


@cli.command("apply")
@project_argument
@click.argument("sources", nargs=-1, required=True)
@click.option("--out", "out", required=True, type=click.Path(file_okay=False),
              help="Folder for the labels: one folder per recording and manifest.json.")
@click.option("--with-proposed", is_flag=True,
              help="Train on proposed windows of high confidence too, not only confirmed ones.")
@click.option("--min-confidence", type=float, default=0.9, show_default=True, metavar="P",
              help="With --with-proposed: the lowest confidence of a proposed window used.")
@click.option("--format", "fmt", type=click.Choice(["csv", "parquet"]), default="csv",
              show_default=True, help="Format of the window and segment tables.")
@click.option("--overwrite", is_flag=True, help="Replace an earlier run's labels in --out.")
@click.option("--seed", type=int, default=0, show_default=True, help="Random seed of the model.")
@_runner_options
@_read_options
@annotator_option
def apply_cmd(project, sources, out, with_proposed, min_confidence, fmt, overwrite, seed,
              workers, scheduler, backend, rate, time_column, acc_unit, gyr_unit, annotator):
    """Label every recording of a study that is not in the project.

    Trains a classifier with calibrated confidence on the project's confirmed windows (and
    with --with-proposed on confident proposals), then labels each recording of SOURCES
    (files, glob patterns or folders) in parallel with the project's window and feature
    settings. Writes OUT/<recording>/windows and segments, and OUT/manifest.json with the
    model and settings. Exit code 1 when any file was refused. The labels are suggestions: a
    qualified person reviews them before they feed clinical or safety decisions.
    """
    with _open(project, annotator, readonly=True) as p:
        bar, progress = _progress_bar("apply")
        with bar:
            rep = p.apply_to_study(list(sources), out, workers=workers, scheduler=scheduler,
                                   backend=backend, include_proposed=with_proposed,
                                   min_confidence=min_confidence, fmt=fmt,
                                   overwrite=overwrite, random_state=seed, progress=progress,
                                   **_read_kwargs(rate, time_column, acc_unit, gyr_unit))
    cv = rep.manifest["model"]["cross_validated_accuracy"]
    click.echo(f"model: {rep.manifest['model']['training_windows']} labeled windows, "
               f"{len(rep.manifest['model']['classes'])} classes; held-out accuracy "
               f"{cv['value']:.3f} ({cv['low']:.3f}-{cv['high']:.3f}) by "
               f"{rep.manifest['model']['calibration']['grouped_by']}")
    for r in rep.written:
        click.echo(f"labeled {r['name']}: {r['windows']} windows, {r['segments']} segments, "
                   f"mean confidence {r['mean_confidence']:.2f}")
    for s in rep.skipped:
        click.echo(f"skipped: {s.reason}")
    _report_refused(rep.refused)
    click.echo(f"{len(rep.written)} recording(s) labeled ({rep.n_windows} windows), "
               f"{len(rep.skipped)} skipped, {len(rep.refused)} refused, in "
               f"{rep.seconds:.1f} s on {rep.runner}; manifest {rep.out}/manifest.json")
    if rep.refused:
        raise SystemExit(EXIT_SOME_REFUSED)
