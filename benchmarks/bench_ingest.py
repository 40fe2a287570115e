"""Ingest benchmark: an 8-hour, 2-site, 12-channel 50 Hz recording, from a file to a project.

The same simulated recording is written as CSV and as Parquet. For each file it prints, measured in
the same run (best of ``--repeats``, the order of the contenders alternating, so that a busy machine
hurts both alike):

- pandas reading the file (``pandas.read_csv`` / ``pandas.read_parquet``, default options): the peer;
- ``read_recording``: read, check and repair (onto the uniform grid), and its ratio to the peer;
- the whole ``labeler add`` (``Project.add_recordings``: read, check, repair, windows, features,
  one transaction into a new project file), and its ratio to the peer (goal: within 2x);
- the parts of the whole add: windows and features, and the write of the project file.

Set-up (simulation, writing the files) is not timed. Run:
    python benchmarks/bench_ingest.py [--hours 8] [--repeats 3] [--format csv parquet]
"""

from __future__ import annotations

import argparse
import gc
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
    gc.collect()
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def add_whole(path: Path, project_path: Path) -> tuple[float, float, float]:
    """(whole add, read+check+repair, windows+features+write) of one file into a new project."""
    if project_path.exists():
        project_path.unlink()
    project = Project.create(project_path, annotator="bench")
    try:
        t0 = time.perf_counter()
        rec = read_recording(path)
        t1 = time.perf_counter()
        project.add_recording_data([rec])
        t2 = time.perf_counter()
    finally:
        project.close()
    return t2 - t0, t1 - t0, t2 - t1


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--format", nargs="+", choices=["csv", "parquet"], default=["csv", "parquet"])
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        t_sim, sim = timed(lambda: simulate_recording(args.hours * 3600, seed=7, person=1,
                                                      name="bench"))
        files = {}
        t0 = time.perf_counter()
        if "csv" in args.format:
            files["csv"] = tmp / "bench.csv"
            sim.frame.assign(time=sim.frame["time"].map("{:.4f}".format)).to_csv(
                files["csv"], index=False, float_format="%.5g")
        if "parquet" in args.format:
            files["parquet"] = tmp / "bench.parquet"
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
                        w, _, rest = add_whole(path, tmp / "bench.labeler")
                        whole.append(w)
                        parts.append(rest)
            size = (tmp / "bench.labeler").stat().st_size
            p, r, w = min(peer), min(read), min(whole)
            print(f"\n{fmt} ({path.stat().st_size / 1e6:.0f} MB, {n_samples} grid samples), "
                  f"best of {args.repeats}:")
            print(f"  {peer_name:<36} {p:7.2f} s")
            print(f"  {'read+check+repair (read_recording)':<36} {r:7.2f} s   ratio {r / p:5.2f}x")
            print(f"  {'whole add (file -> project)':<36} {w:7.2f} s   ratio {w / p:5.2f}x   "
                  f"(goal <= {GOAL:g}x)")
            print(f"  {'  of which windows+features+write':<36} {min(parts):7.2f} s")
            print(f"  project file {size / 1e6:.1f} MB")
        print(f"\npeak memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


if __name__ == "__main__":
    main()
