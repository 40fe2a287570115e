"""Reading benchmark: one simulated recording written the ways devices write files, read back.

Prints, for each way, the seconds `read_recording` takes (read, check, repair, level-at-rest check;
no windows or features), the ratio to plain seconds in a CSV, and the largest difference of the
signal read back from the plain reading (in g or deg/s; the simulator's timestamps are jittered, so
times rounded to 1 ms move the resampled values a little). Run:
python benchmarks/bench_reading.py [--minutes 60]
"""

from __future__ import annotations

import argparse
import gzip
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from labeler.channels import STANDARD_GRAVITY
from labeler.recordings import read_recording
from labeler.synthetic import simulate_recording


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--minutes", type=float, default=60.0)
    args = ap.parse_args()
    sim = simulate_recording(args.minutes * 60, seed=3, person=2, name="bench")
    frame = sim.frame
    acc = [c for c in frame.columns if "_acc_" in c]
    start = pd.Timestamp("2026-09-14T06:30:00Z")
    clock = start + pd.to_timedelta(frame["time"], unit="s")
    ways = {
        "seconds": (frame.assign(time=frame["time"].map("{:.4f}".format)), {}, False, ""),
        "unix ms": (frame.assign(time=(clock.astype("int64") // 10**6)), {}, False, ""),
        "ISO with zone": (frame.assign(time=clock.dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")), {}, False,
                          ""),
        "ISO, --tz": (frame.assign(time=clock.dt.tz_convert("Europe/Vienna")
                                   .dt.strftime("%Y-%m-%dT%H:%M:%S.%f")),
                      {"tz": "Europe/Vienna"}, False, ""),
        "dd/mm/yyyy, --time-format": (frame.assign(time=clock.dt.strftime("%d/%m/%Y %H:%M:%S.%f")),
                                      {"time_format": "%d/%m/%Y %H:%M:%S.%f", "tz": "UTC"}, False,
                                      ""),
        "m/s2 found at rest": (frame.assign(time=frame["time"].map("{:.4f}".format),
                                            **{c: frame[c] * STANDARD_GRAVITY for c in acc}),
                               {}, False, ""),
        "gzip + preamble": (frame.assign(time=frame["time"].map("{:.4f}".format)), {}, True,
                            "Device: orchard band\nSerial: 7\n"),
    }
    print(f"{args.minutes:g} min at 50 Hz, {len(frame)} rows, {frame.shape[1] - 1} channels")
    print(f"{'file':28} {'read s':>8} {'ratio':>6}  {'samples':>8}  max |diff|")
    base_t = None
    base_sig = None
    with tempfile.TemporaryDirectory() as tmp:
        for name, (table, options, zipped, preamble) in ways.items():
            text = preamble + table.to_csv(index=False, float_format="%.5g")
            path = Path(tmp) / ("rec.csv.gz" if zipped else "rec.csv")
            path.write_bytes(gzip.compress(text.encode()) if zipped else text.encode())
            t0 = time.perf_counter()
            rec = read_recording(path, **options)
            took = time.perf_counter() - t0
            if base_t is None:
                base_t, base_sig = took, rec.signal
            n = min(len(rec.signal), len(base_sig))
            diff = np.nanmax(np.abs(rec.signal[:n] - base_sig[:n]))
            print(f"{name:28} {took:8.2f} {took / base_t:6.2f}  {rec.n_samples:8d}  {diff:.3g}")


if __name__ == "__main__":
    main()
