"""Warm proposal refresh: one more confirmation on a graph of simulated windows.

Builds the window graph of simulated recordings (the demo scenario, several pickers; 10 neighbours
of the standardized features reduced to 30 principal axes, local scaling, temporal edges),
confirms 150 random windows with their true activity, fits once, and then times refreshes after
one more confirmation each: ``LabelSpreader.fit`` (warm start) + ``outputs``, as the app and
`labeler propose` do. Beside it, in the same run, the same refresh from a new spreader started from
the previous solution (``init=``), which checks the graph again and solves every class again.
Goal: <= 0.2 s at 100k windows.

Run: python benchmarks/bench_refresh.py [--recordings 5] [--hours 8] [--refreshes 5]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from labeler.graph import build_graph
from labeler.spreading import LabelSpreader


def simulated(recordings: int, hours: float):
    from labeler.features import window_features
    from labeler.recordings import recording_from_frame
    from labeler.synthetic import simulate_recording, window_truth
    from labeler.windows import cut_windows, window_samples

    X, truth, rec, seq, names = [], [], [], [], None
    for k in range(recordings):
        sim = simulate_recording(hours * 3600, seed=10 + k, person=k)
        r = recording_from_frame(sim.frame, where="simulator", content_hash=str(k), name=str(k))
        length, step = window_samples(r.rate, 2.56, 1.28)
        starts = cut_windows(r.valid, length, step)
        F, names = window_features(r.signal, starts, length, r.rate, r.channels)
        X.append(F)
        truth.append(window_truth(sim.truth, starts / r.rate, (starts + length) / r.rate).astype(str))
        rec.append(np.full(starts.size, k))
        # consecutive windows are `step` samples apart; a gap breaks the sequence
        seq.append(np.concatenate([[0], np.cumsum(np.where(np.diff(starts) == step, 1, 2))]))
    truth = np.concatenate(truth)
    codes = np.unique(truth, return_inverse=True)[1]
    return np.concatenate(X), codes, np.concatenate(rec), np.concatenate(seq), names


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--recordings", type=int, default=5)
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--refreshes", type=int, default=5)
    args = ap.parse_args()
    X, t, rec, seq, names = simulated(args.recordings, args.hours)
    n = t.size
    t0 = time.perf_counter()
    from labeler.features import graph_columns

    W = build_graph(X[:, graph_columns(names)], recording=rec, seq=seq, pca_components=30)
    print(f"{n} windows ({args.recordings} simulated recordings of {args.hours:g} h); graph "
          f"{time.perf_counter() - t0:.1f} s")
    rng = np.random.default_rng(0)
    y = np.full(n, -1)
    idx = rng.choice(n, 150, replace=False)
    y[idx] = t[idx]
    sp = LabelSpreader(warm_start=True)
    t0 = time.perf_counter()
    sp.fit(W, y)
    sp.outputs(y)
    print(f"first fit + outputs (cold, support reference included): {time.perf_counter() - t0:.2f} s")
    warm, again, iters = [], [], []
    for _ in range(args.refreshes):
        j = int(rng.choice(np.flatnonzero(y < 0)))
        y[j] = t[j]
        previous, classes, reference = sp.label_mass_, sp.classes_, sp.reference_mass()
        t0 = time.perf_counter()
        sp.fit(W, y)
        sp.outputs(y)
        warm.append(time.perf_counter() - t0)
        iters.append(sp.n_iter_)
        other = LabelSpreader()
        t0 = time.perf_counter()
        other.fit(W, y, init=previous, init_classes=classes)
        other.outputs(y, reference=reference)
        again.append(time.perf_counter() - t0)
    w, a = float(np.median(warm)), float(np.median(again))
    print(f"refresh after one more confirmation (fit + outputs), median of {args.refreshes}: "
          f"{w:.3f} s, {int(np.median(iters))} iterations (goal <= 0.2 s)")
    print(f"same refresh checking the graph and solving every class again: {a:.3f} s "
          f"(ratio {w / a:.2f})")
    # what Project refreshes: the spreading times the logistic regression on the confirmed
    # windows, smoothed along each recording
    from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT, DEFAULT_STAY, Proposer, classifier_view

    t0 = time.perf_counter()
    Z = classifier_view(X, names)
    print(f"classifier's features (orientation-free columns, 30 principal axes; once per graph): "
          f"{time.perf_counter() - t0:.2f} s")
    pr = Proposer(classifier_weight=DEFAULT_CLASSIFIER_WEIGHT, stay=DEFAULT_STAY,
                  classifier_features=Z, recording=rec, seq=seq)
    pr.fit(W, y)
    reference = pr.spreader_.reference_mass()
    times = []
    for _ in range(args.refreshes):
        j = int(rng.choice(np.flatnonzero(y < 0)))
        y[j] = t[j]
        t0 = time.perf_counter()
        pr.fit(W, y)
        pr.outputs(y, reference=reference)
        times.append(time.perf_counter() - t0)
    print(f"Project's refresh (spreading warm, classifier weight {DEFAULT_CLASSIFIER_WEIGHT:g}, "
          f"smoothed along time with stay {DEFAULT_STAY:g}, "
          f"{int((y >= 0).sum())} confirmed), median of {args.refreshes}: "
          f"{float(np.median(times)):.3f} s")


if __name__ == "__main__":
    main()
