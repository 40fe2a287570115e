"""Quick check of the features on the scenario: kNN (k=5) on window features vs the truth.

Run: python demo/check_features.py [hours] [seed]

Prints cross-validated accuracy three ways, from optimistic to honest:
- shuffled stratified 5-fold over windows (neighbouring, overlapping windows of one bout land in
  both train and test: optimistic);
- 5-fold grouped by bout (all windows of a bout in one fold: no bout is seen in training);
- across people: train on one picker, test on another (other cadence, other sensor orientation).
"""

from __future__ import annotations

import sys
import time

import numpy as np
from sklearn.model_selection import GroupKFold, StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from labeler.features import window_features
from labeler.recordings import recording_from_frame
from labeler.synthetic import simulate_recording, window_truth
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples


def windows_of(sim):
    """Windows as labeler makes them: onto the sample grid (short NaN runs interpolated, gaps
    left out), cut, features; truth per window."""
    rec = recording_from_frame(sim.frame, where="simulator", content_hash=sim.name, name=sim.name)
    length, step = window_samples(rec.rate, DEFAULT_LENGTH_S, DEFAULT_STEP_S)
    starts = cut_windows(rec.valid, length, step)
    X, names = window_features(rec.signal, starts, length, rec.rate, rec.channels)
    t0 = starts / rec.rate
    y = window_truth(sim.truth, t0, t0 + length / rec.rate).astype(str)
    # bout id of each window: the truth interval holding its centre
    mid = t0 + length / rec.rate / 2
    bout = np.searchsorted(sim.truth["end_s"].to_numpy(), mid, side="right")
    return X, y, bout, names


def main(hours: float = 2.0, seed: int = 7) -> None:
    t = time.perf_counter()
    rec = simulate_recording(hours * 3600, seed=seed, person=1)
    X, y, bout, names = windows_of(rec)
    print(f"{rec.name}: {hours:g} h, {len(y)} windows, {X.shape[1]} features "
          f"({time.perf_counter() - t:.1f} s)")
    labels, counts = np.unique(y, return_counts=True)
    labels = [str(v) for v in labels]
    print("windows per class:", dict(zip(labels, counts.tolist())))
    model = make_pipeline(StandardScaler(), KNeighborsClassifier(n_neighbors=5))
    shuffled = cross_val_score(model, X, y, cv=StratifiedKFold(5, shuffle=True, random_state=0))
    grouped = cross_val_score(model, X, y, cv=GroupKFold(5), groups=bout)
    keep = y != "transition"
    grouped_nt = cross_val_score(model, X[keep], y[keep], cv=GroupKFold(5), groups=bout[keep])
    print(f"kNN k=5, shuffled stratified 5-fold:      {shuffled.mean():.3f}")
    print(f"kNN k=5, 5-fold grouped by bout:          {grouped.mean():.3f}")
    print(f"  same, transition windows left out:      {grouped_nt.mean():.3f}")
    other = simulate_recording(hours * 3600, seed=seed + 1, person=2)
    X2, y2, _, _ = windows_of(other)
    model.fit(X, y)
    cross = (model.predict(X2) == y2).mean()
    print(f"kNN k=5, trained on picker01, tested on picker02: {cross:.3f}")
    from sklearn.metrics import confusion_matrix
    pred = np.empty_like(y)
    for tr, te in GroupKFold(5).split(X, y, bout):
        pred[te] = model.fit(X[tr], y[tr]).predict(X[te])
    print("confusion (grouped by bout), rows = truth, columns = predicted:", labels)
    print(confusion_matrix(y, pred, labels=labels))


if __name__ == "__main__":
    args = sys.argv[1:]
    main(float(args[0]) if args else 2.0, int(args[1]) if len(args) > 1 else 7)
