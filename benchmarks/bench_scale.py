"""Whole-study benchmark: parallel ingest with 1 worker against 2, and apply-to-study throughput.

Set-up (not timed as ingest): simulated recordings of the invented harvest crew (people 1..N, one
shift each), written as CSV files. Then
0. the CPU time of one recording prepared and written in this process (independent of load);
1. `Project.add_many` of every file on a Dask LocalCluster of 1 worker and of 2 workers, each
   into a fresh project (wall time includes starting the cluster); the speed-up and the cost per
   recording (and per recording-hour) on this machine;
2. a model trained on a few confirmed windows per activity and recording of the 2-worker project,
   then `Project.apply_to_study` on a folder of further recordings; windows labeled per second.

Target: 2 workers >= 1.7x faster than 1 (the machine may be shared: figures are as measured).
Run: python benchmarks/bench_scale.py [--recordings 24 --hours 1 --study 8 --backend dask]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from labeler.project import Project
from labeler.study.apply import apply_to_study, train_from_project
from labeler.study.ingest import prepare_file
from labeler.synthetic import simulate_recording, window_truth


def _write(rec, path: Path) -> None:
    rec.frame.assign(time=rec.frame["time"].map("{:.4f}".format)).to_csv(
        path, index=False, float_format="%.5g")


def _make(folder: Path, n: int, hours: float, seed: int, first_person: int) -> dict:
    folder.mkdir(parents=True, exist_ok=True)
    truth = {}
    for k in range(n):
        rec = simulate_recording(hours * 3600, seed=seed, person=first_person + k)
        _write(rec, folder / f"{rec.name}.csv")
        truth[rec.name] = rec.truth
    return truth


def _ingest(folder: Path, project: Path, workers: int, backend: str):
    with Project.create(project, annotator="bench") as p:
        t0 = time.perf_counter()
        rep = p.add_many([folder], workers=workers, backend=backend)
        seconds = time.perf_counter() - t0
    if rep.refused:
        raise SystemExit(f"refused: {rep.refused[0].reason}")
    return seconds, rep


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--recordings", type=int, default=24)
    ap.add_argument("--hours", type=float, default=1.0)
    ap.add_argument("--study", type=int, default=8, help="recordings labeled by apply")
    ap.add_argument("--backend", choices=["dask", "processes"], default="dask")
    ap.add_argument("--per-class", type=int, default=10,
                    help="confirmed windows per activity and recording for the model")
    args = ap.parse_args()
    load = os.getloadavg()[0]
    print(f"machine: {os.cpu_count()} cores, load average {load:.1f} at the start "
          "(shared: other work competes for the cores)")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        truth = _make(tmp / "crew", args.recordings, args.hours, seed=11, first_person=1)
        study_truth = _make(tmp / "study", args.study, args.hours, seed=12,
                            first_person=args.recordings + 1)
        mb = sum(f.stat().st_size for f in (tmp / "crew").iterdir()) / 1e6
        print(f"set-up: {args.recordings} + {args.study} simulated recordings of {args.hours:g} h "
              f"({mb:.0f} MB of CSV for the ingest) in {time.perf_counter() - t0:.1f} s")

        first = sorted((tmp / "crew").iterdir())[0]
        with Project.create(tmp / "cpu.labeler", annotator="bench") as p:
            c0 = time.process_time()
            prepared = prepare_file(str(first), {}, p.window_length_s, p.window_step_s, "bench")
            c1 = time.process_time()
            p.add_prepared([prepared])
            c2 = time.process_time()
        print(f"CPU time of one {args.hours:g}-h recording in this process: {c1 - c0:.1f} s to "
              f"read, check, window and compute features (a worker's share), {c2 - c1:.1f} s to "
              "write (the single writer's share); unlike wall times, this does not grow with "
              "the machine's load")
        t1, rep1 = _ingest(tmp / "crew", tmp / "one.labeler", 1, args.backend)
        print(f"ingest, 1 worker:  {t1:.1f} s  ({rep1.runner}; {len(rep1.added)} recordings, "
              f"{rep1.n_windows} windows)")
        t2, rep2 = _ingest(tmp / "crew", tmp / "two.labeler", 2, args.backend)
        print(f"ingest, 2 workers: {t2:.1f} s  ({rep2.runner})")
        print(f"speed-up 2 vs 1 worker: {t1 / t2:.2f}x  (target >= 1.7x)")
        per_rec = t2 / args.recordings
        per_hour_1 = t1 / (args.recordings * args.hours)
        print(f"cost per recording of {args.hours:g} h: {t1 / args.recordings:.2f} s on 1 worker, "
              f"{per_rec:.2f} s wall on 2 workers")
        study_hours = 100 * 7 * 24
        print(f"projected: a study of 100 people x 1 week ({study_hours} recording-hours) at "
              f"{per_hour_1:.2f} s per recording-hour and worker: "
              f"{study_hours * per_hour_1 / 3600:.1f} worker-hours "
              f"({study_hours * per_hour_1 / 3600 / 16:.1f} h on 16 workers, if the single writer "
              "keeps up)")

        with Project.open(tmp / "two.labeler", annotator="bench") as p:
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
            rep = apply_to_study(p, [tmp / "study"], tmp / "labels", study_model=model, workers=2,
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
