"""Neighbour search for the window graph: exact, approximate and "auto", each in a new process.

Every rebuild of the graph by `labeler propose` runs in a new process, where the approximate index
(pynndescent) must first be compiled. This benchmark prepares the standardized, PCA-reduced
features of simulated recordings (the demo scenario, several pickers), saves them, and then times
the 10-nearest-neighbour search in a fresh Python process for each method: wall seconds and CPU
seconds of the call (imports and compilation included, loading the features not). It prints the
pair exact / approximate, what "auto" chose and its ratio to the exact search (goal: <= 1, no
rebuild slower than the exact search), and the recall of the approximate neighbours.

Run: python benchmarks/bench_neighbours.py [--recordings 5] [--hours 8]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

CHILD = r"""
import json, sys, time
import numpy as np
Z = np.load(sys.argv[1])
t0, c0 = time.perf_counter(), time.process_time()
from labeler import graph
ind, dist = graph.nearest_neighbors(Z, 10, method=sys.argv[2])
wall, cpu = time.perf_counter() - t0, time.process_time() - c0
np.save(sys.argv[3], ind)
chosen = sys.argv[2]
if chosen == "auto":
    chosen = "approximate" if graph._APPROX["compiled"] else "exact"
print(json.dumps({"wall": wall, "cpu": cpu, "chosen": chosen}))
"""


def features(recordings: int, hours: float) -> np.ndarray:
    from labeler.features import window_features
    from labeler.graph import reduce, standardize
    from labeler.recordings import recording_from_frame
    from labeler.synthetic import simulate_recording
    from labeler.windows import cut_windows, window_samples

    parts = []
    for k in range(recordings):
        sim = simulate_recording(hours * 3600, seed=10 + k, person=k)
        rec = recording_from_frame(sim.frame, where="simulator", content_hash=str(k), name=str(k))
        length, step = window_samples(rec.rate, 2.56, 1.28)
        starts = cut_windows(rec.valid, length, step)
        parts.append(window_features(rec.signal, starts, length, rec.rate, rec.channels)[0])
    return reduce(standardize(np.concatenate(parts)), 30)


def run(method: str, z_path: Path, out: Path) -> dict:
    res = subprocess.run([sys.executable, "-c", CHILD, str(z_path), method, str(out)],
                         capture_output=True, text=True, check=True)
    return json.loads(res.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--recordings", type=int, default=5)
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--methods", nargs="+", default=["exact", "approximate", "auto"])
    args = ap.parse_args()
    t0 = time.perf_counter()
    Z = features(args.recordings, args.hours)
    print(f"{Z.shape[0]} windows ({args.recordings} simulated recordings of {args.hours:g} h), "
          f"PCA to {Z.shape[1]}; set-up {time.perf_counter() - t0:.0f} s")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        np.save(tmp / "Z.npy", Z)
        results, inds = {}, {}
        for m in args.methods:
            results[m] = run(m, tmp / "Z.npy", tmp / f"{m}.npy")
            inds[m] = np.load(tmp / f"{m}.npy")
            r = results[m]
            print(f"  {m:<12} new process: {r['wall']:7.1f} s wall, {r['cpu']:7.1f} s CPU"
                  + (f"  (chose {r['chosen']})" if m == "auto" else ""))
        if "exact" in results and "approximate" in results:
            e, a = results["exact"], results["approximate"]
            recall = np.mean([np.intersect1d(p, q).size / p.size
                              for p, q in zip(inds["approximate"][:5000], inds["exact"][:5000])])
            print(f"  pair exact / approximate (compilation included): {e['wall']:.1f} s / "
                  f"{a['wall']:.1f} s wall = {a['wall'] / e['wall']:.2f}x; recall of the "
                  f"approximate 10 neighbours {recall:.3f}")
        if "exact" in results and "auto" in results:
            e, u = results["exact"], results["auto"]
            print(f"  auto / exact: {u['wall']:.1f} s / {e['wall']:.1f} s wall = "
                  f"{u['wall'] / e['wall']:.2f}x (goal <= 1: no rebuild slower than the exact "
                  "search; auto measures the exact cost on 2000 rows first)")


if __name__ == "__main__":
    main()
