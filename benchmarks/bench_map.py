"""Map benchmark: t-SNE map time, comparison with scikit-learn, placement, and a 1M-window map.

Feature matrices are realistic: recordings of the simulated orchard shift (labeler.synthetic, several
people and seeds, 30 min each), cut into the default windows (2.56 s every 1.28 s at 50 Hz) and
turned into features by labeler.features.window_features. Larger sizes tile these windows; each
tile gets independent noise of 5 % of each feature's standard deviation so no two windows coincide.

Prints, with the targets beside them:
- 100k windows: t-SNE map time (target <= 120 s on this 2-core machine)
- 20k windows: our t-SNE vs scikit-learn TSNE in the same run: time ratio (target >= 4x) and
  trustworthiness (k = 10; Venna & Kaski 2001, sklearn.manifold.trustworthiness) within 0.01.
  Trustworthiness needs all pairwise distances, so it is computed on the same random subsample of
  5,000 windows of both maps.
- 20k new windows placed into an existing 100k map (target <= 15 s)
- 1M windows: subsample fit + placement; time and peak memory (resource.getrusage)
Run: python benchmarks/bench_map.py [--parts 100k,20k,place,1m]
"""

from __future__ import annotations

import argparse
import os
import resource
import time

import numpy as np

from labeler.embedding import MapMaker, place
from labeler.features import window_features
from labeler.synthetic import simulate_recording
from labeler.windows import cut_windows, window_samples

CHANNELS = [f"{s}_{k}_{a}" for s in ("wrist", "hip") for k in ("acc", "gyr") for a in "xyz"]


def simulated_features(n_recordings: int = 8, seconds: float = 1800.0) -> tuple[np.ndarray, np.ndarray]:
    """Features of simulated recordings (people 1..4, two seeds each) and their recording ids."""
    blocks, ids = [], []
    for i in range(n_recordings):
        rec = simulate_recording(seconds, seed=100 + i, person=1 + i % 4)
        sig = rec.frame[CHANNELS].to_numpy(dtype=np.float64)
        valid = np.isfinite(sig).all(axis=1)
        length, step = window_samples(rec.rate, 2.56, 1.28)
        starts = cut_windows(valid, length, step)
        X, _ = window_features(sig, starts, length, rec.rate, CHANNELS)
        blocks.append(X)
        ids.append(np.full(X.shape[0], i))
    return np.vstack(blocks), np.concatenate(ids)


def tiled(base: np.ndarray, base_ids: np.ndarray, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    reps = -(-n // base.shape[0])
    sd = base.std(axis=0, keepdims=True)
    X = np.empty((reps * base.shape[0], base.shape[1]), dtype=np.float32)
    ids = np.empty(reps * base.shape[0], dtype=np.int64)
    for r in range(reps):
        sl = slice(r * base.shape[0], (r + 1) * base.shape[0])
        X[sl] = base + rng.normal(0, 0.05, base.shape).astype(np.float32) * sd
        ids[sl] = base_ids + r * (base_ids.max() + 1)
    return X[:n], ids[:n]


def load() -> str:
    a, b, c = os.getloadavg()
    return f"load average {a:.2f} {b:.2f} {c:.2f} on {os.cpu_count()} cores"


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def trust(Xs, Ys) -> float:
    from sklearn.manifold import trustworthiness
    from sklearn.preprocessing import StandardScaler

    return float(trustworthiness(StandardScaler().fit_transform(Xs), Ys, n_neighbors=10))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--parts", default="100k,20k,place,1m")
    ap.add_argument("--n-jobs", type=int, default=2)
    args = ap.parse_args()
    parts = set(args.parts.split(","))
    t0 = time.perf_counter()
    base, base_ids = simulated_features()
    print(f"set-up: {base.shape[0]} simulated windows x {base.shape[1]} features in "
          f"{time.perf_counter() - t0:.1f} s; {load()}", flush=True)

    if "100k" in parts or "place" in parts:
        X, ids = tiled(base, base_ids, 100_000, seed=1)
        t = time.perf_counter()
        mm = MapMaker("tsne", random_state=0, n_jobs=args.n_jobs).fit(X, strata=ids)
        dt = time.perf_counter() - t
        print(f"100k windows: t-SNE map {dt:.1f} s (target <= 120 s); "
              f"neighbours {mm.params_['neighbors']}, perplexity {mm.params_['perplexity']}, "
              f"learning rate {mm.params_['learning_rate']:.0f}, plain iterations run "
              f"{mm.params_['n_iter_run']} of {mm.params_['n_iter']}; {load()}", flush=True)
        sub = np.random.default_rng(0).choice(X.shape[0], 5000, replace=False)
        print(f"100k windows: trustworthiness on a 5k subsample {trust(X[sub], mm.embedding_[sub]):.4f}",
              flush=True)
        if "place" in parts:
            Xn, _ = tiled(base, base_ids, 20_000, seed=2)
            t = time.perf_counter()
            Yn = place(mm.state_, Xn, n_jobs=args.n_jobs)
            dt = time.perf_counter() - t
            print(f"20k new windows placed into the 100k map: {dt:.1f} s (target <= 15 s); "
                  f"inside the map's box: {np.mean((Yn >= mm.embedding_.min(0)) & (Yn <= mm.embedding_.max(0))):.3f}",
                  flush=True)

    if "20k" in parts:
        from sklearn.manifold import TSNE

        X, ids = tiled(base, base_ids, 20_000, seed=3)
        t = time.perf_counter()
        ours = MapMaker("tsne", random_state=0, n_jobs=args.n_jobs).fit(X)
        t_ours = time.perf_counter() - t
        Z = (X - X.mean(0)) / np.where(X.std(0) > 0, X.std(0), 1)
        from sklearn.decomposition import PCA
        Zp = PCA(n_components=50, random_state=0).fit_transform(Z)
        t = time.perf_counter()
        theirs = TSNE(n_components=2, perplexity=30, init="pca", learning_rate="auto",
                      random_state=0, n_jobs=args.n_jobs).fit_transform(Zp)
        t_sk = time.perf_counter() - t
        sub = np.random.default_rng(0).choice(X.shape[0], 5000, replace=False)
        tw_ours, tw_sk = trust(X[sub], ours.embedding_[sub]), trust(X[sub], theirs[sub])
        print(f"20k windows: ours {t_ours:.1f} s, scikit-learn TSNE {t_sk:.1f} s: "
              f"{t_sk / t_ours:.1f}x faster (target >= 4x); trustworthiness on 5k subsample "
              f"ours {tw_ours:.4f}, scikit-learn {tw_sk:.4f}, difference {tw_ours - tw_sk:+.4f} "
              f"(target >= -0.01); plain iterations run {ours.params_['n_iter_run']} of "
              f"{ours.params_['n_iter']}; {load()}", flush=True)

    if "1m" in parts:
        X, ids = tiled(base, base_ids, 1_000_000, seed=4)
        t = time.perf_counter()
        mm = MapMaker("tsne", random_state=0, n_jobs=args.n_jobs).fit(X, strata=ids)
        dt = time.perf_counter() - t
        print(f"1M windows: map in {dt:.1f} s (fitted {mm.params_['n_fitted']}, placed the rest), "
              f"peak memory {peak_mb():.0f} MB", flush=True)
    print(f"peak memory of the run {peak_mb():.0f} MB")


if __name__ == "__main__":
    main()
