"""Ingest benchmark: an 8-hour, 2-site, 12-channel recording at 50 Hz, from a CSV file to a project.

Prints: simulation and CSV-writing time (set-up, not ingest), ingest time (read, check, repair, window,
features, write the project file) split into reading and the rest, windows, and the project file's size.
Run: python benchmarks/bench_ingest.py [--hours 8]
"""

from __future__ import annotations

import argparse
import resource
import tempfile
import time
from pathlib import Path

from labeler.project import Project
from labeler.recordings import read_recording
from labeler.synthetic import simulate_recording


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--format", choices=["csv", "parquet"], default="csv")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        rec = simulate_recording(args.hours * 3600, seed=7, person=1, name="bench")
        t_sim = time.perf_counter() - t0
        path = tmp / f"bench.{args.format}"
        t0 = time.perf_counter()
        if args.format == "csv":
            rec.frame.assign(time=rec.frame["time"].map("{:.4f}".format)).to_csv(
                path, index=False, float_format="%.5g")
        else:
            rec.frame.to_parquet(path)
        t_write = time.perf_counter() - t0
        t0 = time.perf_counter()
        r = read_recording(path)
        t_read = time.perf_counter() - t0
        project = Project.create(tmp / "bench.labeler", annotator="bench")
        t0 = time.perf_counter()
        added = project.add_recording_data([r])
        t_rest = time.perf_counter() - t0
        project.close()
        size = (tmp / "bench.labeler").stat().st_size
        print(f"recording: {args.hours:g} h, {r.n_samples} samples x {len(r.channels)} channels "
              f"at {r.rate:g} Hz ({path.stat().st_size / 1e6:.0f} MB {args.format})")
        print(f"set-up: simulate {t_sim:.1f} s, write file {t_write:.1f} s")
        print(f"ingest: {t_read + t_rest:.1f} s  (read+check+repair {t_read:.1f} s; "
              f"windows+features+write {t_rest:.1f} s)")
        print(f"windows: {added[0].n_windows}")
        print(f"project file: {size / 1e6:.1f} MB "
              f"(raw float32 signal alone: {r.signal.nbytes / 1e6:.1f} MB)")
        print(f"peak memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


if __name__ == "__main__":
    main()
