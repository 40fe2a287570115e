"""Benchmark of the simulator and the window features.

Run: python benchmarks/bench_features.py [hours] [repeats]

For an 8-hour, 2-site, 12-channel 50 Hz simulated recording (the demo scenario) it prints: the
simulation time, the number of windows (2.56 s, step 1.28 s), feature extraction in windows/s, the
time of a bare numpy rfft over the same windows and channels (gathered into (channels, length) rows,
256 windows per call, the fastest layout for numpy) in float64 and in float32, the ratio to the
float64 one (goal: within 3x) and peak memory. The contenders alternate; times are the best of
``repeats`` runs, wall and CPU, single-threaded numpy/scipy calls, beside the load average.
"""

from __future__ import annotations

import os
import platform
import resource
import sys
import time
import tracemalloc

import numpy as np
import scipy

from labeler.features import window_features
from labeler.recordings import recording_from_frame
from labeler.synthetic import simulate_recording
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples, window_view


def best(fn, repeats):
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def bare_rfft(signal, starts, length, dtype, chunk=256):
    """numpy's rfft of every window of every channel, ``dtype`` being the precision it computes
    in (numpy 2 transforms float32 in float32): the windows gathered into (channels, length)
    rows, ``chunk`` windows per call."""
    for a in range(0, starts.size, chunk):
        w = np.ascontiguousarray(window_view(signal, starts[a:a + chunk], length).transpose(0, 2, 1),
                                 dtype=dtype)
        np.fft.rfft(w, axis=-1)


def main(hours: float = 8.0, repeats: int = 3) -> None:
    print(f"python {platform.python_version()}, numpy {np.__version__}, scipy {scipy.__version__}, "
          f"{os.cpu_count()} CPUs")
    t_sim, sim = best(lambda: simulate_recording(hours * 3600, seed=1, person=1), 1)
    print(f"simulation: {hours:g} h, {len(sim.frame)} rows x {sim.frame.shape[1] - 1} channels "
          f"in {t_sim:.2f} s")
    t = time.perf_counter()
    rec = recording_from_frame(sim.frame, where="simulator", content_hash="bench", name=sim.name)
    print(f"onto the sample grid (labeler.recordings): {time.perf_counter() - t:.2f} s")
    length, step = window_samples(rec.rate, DEFAULT_LENGTH_S, DEFAULT_STEP_S)
    starts = cut_windows(rec.valid, length, step)
    n = starts.size
    print(f"windows: {n} of {length} samples, step {step}")

    def feats():
        return window_features(rec.signal, starts, length, rec.rate, rec.channels)

    def rfft64():
        bare_rfft(rec.signal, starts, length, np.float64)

    def rfft32():
        bare_rfft(rec.signal, starts, length, np.float32)

    X, names = feats()
    # the contenders alternate, so that a busy machine hurts them alike
    wall = {"features": [], "rfft64": [], "rfft32": []}
    cpu = {"features": [], "rfft64": [], "rfft32": []}
    for _ in range(repeats):
        for key, fn in (("features", feats), ("rfft64", rfft64), ("rfft32", rfft32)):
            w, c = time.perf_counter(), time.process_time()
            fn()
            cpu[key].append(time.process_time() - c)
            wall[key].append(time.perf_counter() - w)
    t_feat, t_fft, t_f32 = (min(wall[k]) for k in ("features", "rfft64", "rfft32"))
    c_feat, c_fft, c_f32 = (min(cpu[k]) for k in ("features", "rfft64", "rfft32"))
    print(f"load {' '.join(f'{v:.2f}' for v in os.getloadavg())} on {os.cpu_count()} cores; "
          f"best of {repeats}, wall (CPU)")
    print(f"features: {X.shape[1]} per window in {t_feat:.2f} s ({c_feat:.2f}) = "
          f"{n / t_feat:,.0f} windows/s")
    print(f"bare numpy rfft of the same windows and channels, float64: {t_fft:.2f} s ({c_fft:.2f}); "
          f"float32: {t_f32:.2f} s ({c_f32:.2f})")
    print(f"ratio features / float64 rfft: {t_feat / t_fft:.2f}x wall, {c_feat / c_fft:.2f}x CPU "
          f"(goal: within 3x); against the float32 rfft {c_feat / c_f32:.2f}x CPU")

    tracemalloc.start()
    window_features(rec.signal, starts, length, rec.rate, rec.channels)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    out_mb = X.nbytes / 2 ** 20
    print(f"peak memory allocated by window_features: {peak / 2 ** 20:.0f} MiB "
          f"(of which the output matrix {out_mb:.0f} MiB; input signal {rec.signal.nbytes / 2 ** 20:.0f} MiB)")
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak resident memory of the whole run: {rss:.0f} MiB")


if __name__ == "__main__":
    args = sys.argv[1:]
    main(float(args[0]) if args else 8.0, int(args[1]) if len(args) > 1 else 3)
