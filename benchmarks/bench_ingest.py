"""Ingest benchmark: an 8-hour, 2-site, 12-channel 50 Hz recording, from a file to a project.

The same simulated recording is written as CSV and as Parquet. For each file it prints, measured in
the same run (best of ``--repeats``, the order of the contenders alternating, so that a busy machine
hurts both alike):

- pandas reading the file (``pandas.read_csv`` / ``pandas.read_parquet``, default options): the peer;
- ``read_recording``: read, check and repair (onto the uniform grid), and its ratio to the peer;
- the whole ``labeler add`` (``Project.add_recordings``: read, check, repair, windows, features,
  one transaction into a new project file), and its ratio to the peer (goal: within 2x);
- the parts of the whole add: windows and features, and the write of the project file.

Each figure is printed as wall time and CPU time (user + system of this process; on the shared
machine the CPU time changes least with the load, which is printed too). The ratios are of CPU
times; the read's ratio of wall times is printed too (the peer and the read both use every core:
pyarrow's reader, and ``read_recording``'s threads). Set-up (simulation, writing the files) is not
timed. Run:
    python benchmarks/bench_ingest.py [--hours 8] [--repeats 3] [--format csv parquet] [--data DIR]

``--data DIR`` keeps the files in DIR (written when missing, reused otherwise) for profiling.
"""

from __future__ import annotations

import argparse
import gc
import os
import resource
import tempfile
import time
from pathlib import Path

import pandas as pd

from labeler.project import Project
from labeler.recordings import read_recording
from labeler.synthetic import simulate_recording

GOAL = 2.0


def timed(fn):
    """((wall s, CPU s), what fn returned)."""
    gc.collect()
    t0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return (time.perf_counter() - t0, time.process_time() - c0), out


def add_whole(path: Path, project_path: Path) -> tuple[tuple[float, float], tuple[float, float]]:
    """((wall, CPU) of the whole add, (wall, CPU) of windows+features+write) of one file into a
    new project."""
    if project_path.exists():
        project_path.unlink()
    project = Project.create(project_path, annotator="bench")
    try:
        t0, c0 = time.perf_counter(), time.process_time()
        rec = read_recording(path)
        t1, c1 = time.perf_counter(), time.process_time()
        project.add_recording_data([rec])
        t2, c2 = time.perf_counter(), time.process_time()
    finally:
        project.close()
    return (t2 - t0, c2 - c0), (t2 - t1, c2 - c1)


def best(runs: list[tuple[float, float]]) -> tuple[float, float]:
    """The best wall time and the best CPU time of several runs."""
    return min(w for w, _ in runs), min(c for _, c in runs)


def load() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg()) + f" on {os.cpu_count()} cores"


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--format", nargs="+", choices=["csv", "parquet"], default=["csv", "parquet"])
    ap.add_argument("--data", type=Path, help="keep the recording files here (reused when there)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        data = args.data or tmp
        data.mkdir(parents=True, exist_ok=True)
        stem = f"bench-{args.hours:g}h"
        files = {fmt: data / f"{stem}.{fmt}" for fmt in args.format}
        if all(f.exists() for f in files.values()):
            print(f"recording: {args.hours:g} h at 50 Hz, files reused from {data}")
        else:
            (t_sim, _), sim = timed(lambda: simulate_recording(args.hours * 3600, seed=7, person=1,
                                                               name="bench"))
            t0 = time.perf_counter()
            if "csv" in files:
                sim.frame.assign(time=sim.frame["time"].map("{:.4f}".format)).to_csv(
                    files["csv"], index=False, float_format="%.5g")
            if "parquet" in files:
                sim.frame.to_parquet(files["parquet"])
            t_write = time.perf_counter() - t0
            n_rows = len(sim.frame)
            del sim
            print(f"recording: {args.hours:g} h, {n_rows} rows x 12 channels at 50 Hz; set-up: "
                  f"simulate {t_sim:.1f} s, write files {t_write:.1f} s")
        for fmt, path in files.items():
            peer_name = "pandas.read_csv" if fmt == "csv" else "pandas.read_parquet"
            peer_fn = (lambda p=path: pd.read_csv(p)) if fmt == "csv" else (
                lambda p=path: pd.read_parquet(p))
            peer, read, whole, parts = [], [], [], []
            for i in range(args.repeats):
                order = ["peer", "read", "whole"] if i % 2 == 0 else ["whole", "read", "peer"]
                for what in order:
                    if what == "peer":
                        peer.append(timed(peer_fn)[0])
                    elif what == "read":
                        t, rec = timed(lambda p=path: read_recording(p))
                        read.append(t)
                        n_samples = rec.n_samples
                        del rec
                    else:
                        gc.collect()
                        w, rest = add_whole(path, tmp / "bench.labeler")
                        whole.append(w)
                        parts.append(rest)
            size = (tmp / "bench.labeler").stat().st_size
            p, r, w, rest = (best(v) for v in (peer, read, whole, parts))
            print(f"\n{fmt} ({path.stat().st_size / 1e6:.0f} MB, {n_samples} grid samples), "
                  f"best of {args.repeats}; load {load()}:")
            print(f"  {peer_name:<36} {p[0]:7.2f} s  (CPU {p[1]:6.2f} s)")
            print(f"  {'read+check+repair (read_recording)':<36} {r[0]:7.2f} s  (CPU {r[1]:6.2f} s)"
                  f"   ratio {r[1] / p[1]:5.2f}x   (goal <= {GOAL:g}x; wall {r[0] / p[0]:5.2f}x)")
            print(f"  {'whole add (file -> project)':<36} {w[0]:7.2f} s  (CPU {w[1]:6.2f} s)"
                  f"   ratio {w[1] / p[1]:5.2f}x")
            print(f"  {'  of which windows+features+write':<36} {rest[0]:7.2f} s  "
                  f"(CPU {rest[1]:6.2f} s)")
            print(f"  project file {size / 1e6:.1f} MB")
        print(f"\npeak memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


if __name__ == "__main__":
    main()
