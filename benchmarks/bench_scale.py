"""Whole-study benchmark: parallel ingest with 1 worker against 2, and apply-to-study throughput.

Set-up (not timed as ingest): simulated recordings of the invented harvest crew (people 1..N, one
shift each), written as CSV files (kept in ``--data`` when given, so a second run skips this). Then
0. the CPU time of one recording prepared and written in this process (independent of load);
1. `Project.add_many` of every file on a Dask LocalCluster of 1 worker and of 2 workers, each
   into a fresh project (wall time includes starting the cluster); the speed-up, where the time
   went (cluster start, the tasks' CPU time on the workers, the single writer), the CPU time of the
   whole process tree, and the cost per recording (and per recording-hour) on this machine;
   with ``--dask-defaults`` the same pair again with Dask's own worker settings (what the local
   cluster used before it dropped them), in the same run;
2. a model trained on a few confirmed windows per activity and recording of the 2-worker project,
   then `Project.apply_to_study` on a folder of further recordings; windows labeled per second.

Target: 2 workers >= 1.7x faster than 1. The machine may be shared: wall times are as measured,
with the load average beside them; the CPU-time figures are what the load changes least.
Run: python benchmarks/bench_scale.py [--recordings 24 --hours 1 --study 8 --backend dask]
"""

from __future__ import annotations

import argparse
import concurrent.futures as cf
import contextlib
import os
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

from labeler.project import Project
from labeler.study import runner as study_runner
from labeler.study.ingest import prepare_file

# The simulator (scipy.signal) and the study model (scikit-learn) are imported where they are used:
# workers load this main module again, as they load the command's main module when a user runs
# `labeler ingest`, whose imports are as light as these.


def _write(rec, path: Path) -> None:
    tmp = path.with_name(path.name + ".part")
    rec.frame.assign(time=rec.frame["time"].map("{:.4f}".format)).to_csv(
        tmp, index=False, float_format="%.5g")
    os.replace(tmp, path)


def _make(folder: Path, n: int, hours: float, seed: int, first_person: int) -> dict:
    """Simulated recordings of people ``first_person``.. as CSV files in ``folder`` (a file that
    is there already is kept); their truth by recording name."""
    from labeler.synthetic import simulate_recording

    folder.mkdir(parents=True, exist_ok=True)
    truth = {}
    for k in range(n):
        rec = simulate_recording(hours * 3600, seed=seed, person=first_person + k)
        path = folder / f"{rec.name}.csv"
        if not path.exists():
            _write(rec, path)
        truth[rec.name] = rec.truth
    return truth


def _cpu() -> tuple[float, float]:
    """CPU seconds (user + system) of this process and of its ended children."""
    me = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime, kids.ru_utime + kids.ru_stime


def _ingest(folder: Path, project: Path, workers: int, backend: str, dask_defaults: bool):
    """(wall seconds, report, CPU seconds of this process, of the workers, load at the start,
    CPU seconds of the fork server the workers came from)."""
    load = os.getloadavg()[0]
    settings = (contextlib.nullcontext if dask_defaults else study_runner.local_worker_settings)
    saved = study_runner.local_worker_settings
    study_runner.local_worker_settings = settings
    try:
        with Project.create(project, annotator="bench") as p:
            (me0, kids0), t0 = _cpu(), time.perf_counter()
            rep = p.add_many([folder], workers=workers, backend=backend)
            seconds = time.perf_counter() - t0
            me1, kids1 = _cpu()
    finally:
        study_runner.local_worker_settings = saved
    if rep.refused:
        raise SystemExit(f"refused: {rep.refused[0].reason}")
    # forked workers are the fork server's children, not this process's: ask the report, or
    # (a process pool, which cannot tell) the fork server for the workers it has reaped
    own, reaped = _forkserver_cpu()
    if rep.worker_cpu_seconds is not None:
        workers_cpu = rep.worker_cpu_seconds
    else:
        workers_cpu = kids1 - kids0 + reaped
    return seconds, rep, me1 - me0, workers_cpu, load, own


def _forkserver_cpu() -> tuple[float, float]:
    """CPU seconds of this process's fork server (it loads the workers' modules once) and of the
    workers it has reaped; zeros without one."""
    import psutil

    own = reaped = 0.0
    for child in psutil.Process().children():
        try:
            if "forkserver" in " ".join(child.cmdline()):
                t = child.cpu_times()
                own += t.user + t.system
                reaped += t.children_user + t.children_system
        except psutil.Error:
            pass
    return own, reaped


def _ingest_fresh(*args):
    """:func:`_ingest` in a fresh process, so that each run starts its workers (and their fork
    server) from nothing, as a command does; plus the fork server's CPU seconds."""
    import multiprocessing

    with cf.ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("spawn")) as ex:
        return ex.submit(_ingest, *args).result()


def _pair(folder: Path, tmp: Path, n: int, backend: str, dask_defaults: bool, tag: str) -> tuple:
    runs = {}
    for workers in (1, 2):
        t, rep, cpu_main, cpu_workers, load, cpu_server = _ingest_fresh(
            folder, tmp / f"{tag}{workers}.labeler", workers, backend, dask_defaults)
        cpu_workers += cpu_server
        runs[workers] = (t, rep, cpu_main)
        print(f"  {workers} worker(s): {t:.1f} s wall at load {load:.1f} ({rep.runner}; "
              f"{len(rep.added)} recordings, {rep.n_windows} windows); cluster start "
              f"{rep.start_seconds:.1f} s; per recording: task {rep.task_seconds / n:.2f} s wall, "
              f"{rep.task_cpu_seconds / n:.2f} s CPU on its worker, writer "
              f"{rep.write_seconds / n:.3f} s wall, {rep.write_cpu_seconds / n:.3f} s CPU; CPU "
              f"of the process tree {cpu_main:.1f} s here + {cpu_workers:.1f} s in the worker "
              "processes", flush=True)
    (t1, r1, _), (t2, r2, _) = runs[1], runs[2]
    print(f"  speed-up 2 vs 1 worker: {t1 / t2:.2f}x wall (target >= 1.7x); without the cluster "
          f"start {(t1 - r1.start_seconds) / (t2 - r2.start_seconds):.2f}x", flush=True)
    return runs


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--recordings", type=int, default=24)
    ap.add_argument("--hours", type=float, default=1.0)
    ap.add_argument("--study", type=int, default=8, help="recordings labeled by apply")
    ap.add_argument("--backend", choices=["dask", "processes"], default="dask")
    ap.add_argument("--per-class", type=int, default=10,
                    help="confirmed windows per activity and recording for the model")
    ap.add_argument("--data", default=None,
                    help="folder to keep the simulated CSV files in (made once, then reused)")
    ap.add_argument("--dask-defaults", action="store_true",
                    help="also run the pair with Dask's own worker settings, for comparison")
    args = ap.parse_args()
    load = os.getloadavg()[0]
    print(f"machine: {os.cpu_count()} cores, load average {load:.1f} at the start "
          "(shared: other work competes for the cores)")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        data = Path(args.data) if args.data else tmp
        crew = data / f"crew{args.recordings}x{args.hours:g}h"
        study = data / f"study{args.study}x{args.hours:g}h-after{args.recordings}"
        t0 = time.perf_counter()
        truth = _make(crew, args.recordings, args.hours, seed=11, first_person=1)
        study_truth = _make(study, args.study, args.hours, seed=12,
                            first_person=args.recordings + 1)
        mb = sum(f.stat().st_size for f in crew.iterdir()) / 1e6
        print(f"set-up: {args.recordings} + {args.study} simulated recordings of {args.hours:g} h "
              f"({mb:.0f} MB of CSV for the ingest) in {time.perf_counter() - t0:.1f} s")

        first = sorted(crew.iterdir())[0]
        with Project.create(tmp / "cpu.labeler", annotator="bench") as p:
            prepare_file(str(first), {}, p.window_length_s, p.window_step_s, "bench")  # warm-up
            c0 = time.process_time()
            prepared = prepare_file(str(first), {}, p.window_length_s, p.window_step_s, "bench")
            c1 = time.process_time()
            p.add_prepared([prepared])
            c2 = time.process_time()
        print(f"CPU time of one {args.hours:g}-h recording in this process (modules loaded): "
              f"{c1 - c0:.2f} s to read, check, window and compute features (a worker's share), "
              f"{c2 - c1:.2f} s to write (the single writer's share)")
        n = args.recordings
        if args.dask_defaults and args.backend == "dask":
            print("ingest with Dask's own worker settings:", flush=True)
            _pair(crew, tmp, n, args.backend, True, "default")
        print("ingest:", flush=True)
        runs = _pair(crew, tmp, n, args.backend, False, "ours")
        (t1, r1, _), (t2, r2, main_cpu) = runs[1], runs[2]
        # on two idle cores: one worker runs the tasks one after the other while this process
        # (writer, scheduler, cluster) uses the other core; two workers share both cores with it
        task_cpu = r2.task_cpu_seconds
        start = min(r1.start_seconds, r2.start_seconds)
        ideal1, ideal2 = task_cpu, (task_cpu + main_cpu) / 2
        print(f"from CPU times (the load changes them least): {task_cpu / n:.2f} s of worker CPU "
              f"per recording, {main_cpu:.1f} s of CPU in this process in all (writer "
              f"{r2.write_cpu_seconds / n:.3f} s per recording, scheduler, cluster start); on two "
              f"idle cores that gives {start + ideal1:.1f} s on 1 worker and {start + ideal2:.1f} "
              f"s on 2 with the {start:.1f}-s cluster start of this run: "
              f"{(start + ideal1) / (start + ideal2):.2f}x ({ideal1 / ideal2:.2f}x without it)")
        per_hour = task_cpu / (n * args.hours)
        print(f"cost per recording of {args.hours:g} h: {t1 / n:.2f} s wall on 1 worker, "
              f"{t2 / n:.2f} s wall on 2 workers (cluster start included); "
              f"{task_cpu / n:.2f} s of worker CPU")
        study_hours = 100 * 7 * 24
        print(f"projected: a study of 100 people x 1 week ({study_hours} recording-hours) at "
              f"{per_hour:.2f} CPU-s per recording-hour: {study_hours * per_hour / 3600:.1f} "
              f"worker-hours ({study_hours * per_hour / 3600 / 16:.1f} h on 16 workers; the "
              f"single writer needs {study_hours * r2.write_cpu_seconds / (n * args.hours) / 3600:.2f} h "
              f"of "
              "CPU for it, so it keeps up)")

        from labeler.study.apply import apply_to_study, train_from_project
        from labeler.synthetic import window_truth

        with Project.open(tmp / "ours2.labeler", annotator="bench") as p:
            w = p.windows()
            rng = np.random.default_rng(0)
            for name, tr in truth.items():
                sel = w[w["recording"] == name]
                lab = window_truth(tr, sel["start_s"].to_numpy(), sel["stop_s"].to_numpy())
                for c in sorted(set(lab) - {None}):
                    ids = sel["id"].to_numpy()[lab == c]
                    p.confirm(rng.choice(ids, min(args.per_class, ids.size), replace=False), c,
                              create_class=True)
            n_conf = len(p.labels())
            t0 = time.perf_counter()
            model = train_from_project(p)
            tt = time.perf_counter() - t0
            t0 = time.perf_counter()
            rep = apply_to_study(p, [study], tmp / "labels", study_model=model, workers=2,
                                 backend=args.backend)
            ta = time.perf_counter() - t0
        right = total = 0
        import pandas as pd

        for r in rep.written:
            got = pd.read_csv(tmp / "labels" / r["name"] / "windows.csv")
            want = window_truth(study_truth[r["name"]], got["start_s"].to_numpy(),
                                got["end_s"].to_numpy())
            right += int((got["label"].to_numpy(object) == want).sum())
            total += len(got)
        cv = rep.manifest["model"]["cross_validated_accuracy"]
        print(f"apply: model trained on {n_conf} confirmed windows in {tt:.1f} s; "
              f"{len(rep.written)} new recordings, {rep.n_windows} windows labeled and written in "
              f"{ta:.1f} s (cluster start included): {rep.n_windows / ta:.0f} windows/s on 2 "
              "workers")
        print(f"apply accuracy on the new people (simulator truth): {right / max(1, total):.3f}; "
              f"model's held-out estimate {cv['value']:.3f} ({cv['low']:.3f}-{cv['high']:.3f}); "
              f"mean calibrated confidence "
              f"{np.mean([r['mean_confidence'] for r in rep.written]):.3f}")
    print(f"load average at the end: {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
