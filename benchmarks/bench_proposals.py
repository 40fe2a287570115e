"""Benchmark of the proposals: a simulated annotator, refresh speed, graph build time.

Run:  python benchmarks/bench_proposals.py [--part confirmations|start|annotator|speed|tune|
      estimate|all] [--quick] [--seeds N]

confirmations: confirmations to 90 / 95 % for the review queue (drawn as Project draws it) and
    random order on the 8-hour recording, the crew of six (labeler.crew), the demo shift,
    BasicMotions and digits, mean of --seeds seeds (a new simulated shift per seed; a new order and
    queue draw for the open data sets), for "no smoothing" (the spreading times the classifier,
    the default before smoothing along time) and "project" (what Project proposes now). Code in
    benchmarks/carry_over.py.
start: one bout of each class confirmed on the first recording (what a user imports first), then
    the accuracy of the proposals on the windows not confirmed, at that start and after 25 / 50 /
    100 answers from the review queue; same data sets and methods.
tune-proposals: both measures for variants of the proposals (classifier weight and columns,
    temporal weight, smoothing along time); not part of "all" (a long grid).

annotator: an oracle answers from ground truth. From zero confirmations it confirms the top
    unconfirmed windows of an ordering (batch of 5 per round), proposals refresh (warm start), and
    the window accuracy of (confirmed + proposed) against the truth is recorded. Orderings: our
    review queue, random order, margin only (lowest margin first, no diversification). Prints the
    confirmations needed to reach 90 % and 95 %, then the accuracy estimates (audit of 50 random
    proposed windows answered by the oracle, and cross-validation on the confirmations) minus the
    true accuracy. Data: the demo simulator (8-hour recording, labeler.synthetic), three simulated
    pickers of one hour each (examples from one picker carry over to the others only in part),
    BasicMotions (aeon; each series one window) and scikit-learn's digits.
speed: graph build time at 100k windows and where it goes; refresh time after one more
    confirmation with warm start; scikit-learn LabelSpreading.fit on the same data for comparison.
tune: accuracy with random confirmations for alpha and the temporal weight on all three data sets.
estimate: the accuracy estimate minus the truth at 25/50/100/200 confirmations, per data set and
    order of confirmation (random, drawn review queue, bulk map picks), and how often its 95 %
    interval held the truth (benchmarks/estimate_orderings.py).
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings

import numpy as np

from labeler.graph import (build_graph, local_scaling_weights, nearest_neighbors, reduce,
                           standardize, temporal_edges)
from labeler.quality import audit_accuracy, cross_validated_accuracy, draw_audit
from labeler.review import review_queue
from labeler.spreading import LabelSpreader

BATCH = 5
PCA = 30  # components for the simulator's 294 features (same accuracy, 3x faster graph)


# ---------------------------------------------------------------- data

def synthetic(hours: float = 8.0, seed: int = 1, person: int = 0):
    """Windows, features and truth of one simulated recording (demo scenario)."""
    from labeler.synthetic import simulate_recording

    return _windows_of([simulate_recording(hours * 3600, seed=seed, person=person)],
                       f"{seed}-{person}")


def synthetic_crew(people: int = 3, hours: float = 1.0, seed: int = 11):
    """Windows, features and truth of several simulated pickers (one recording each): the other
    pickers move differently, so examples from one generalise only in part."""
    from labeler.synthetic import simulate_recording

    return _windows_of([simulate_recording(hours * 3600, seed=seed + k, person=k)
                        for k in range(people)], str(seed))


def basic_motions():
    """BasicMotions (Bagnall et al. 2018, aeon): 80 series of 6 channels x 100 samples at 10 Hz,
    one window each."""
    d = _carry().basic_motions(0)
    return d.X, d.t, None, None


def _windows_of(sims, hash_prefix: str):
    """Features, truth codes, recording and sequence of simulated recordings (one recording each)."""
    X, _, truth, rec, seq = _carry().sim_windows(sims, hash_prefix)
    _, t = np.unique(truth, return_inverse=True)
    return X, t, rec, seq


def crew_of_six(hours: float = 1.0, seed: int = 21):
    """Six simulated crew members with strong person differences (labeler.crew), one recording
    each: sensor turned on the wrist and around the waist, cadence, amplitude, noise."""
    from labeler.crew import simulate_crew

    return _windows_of(simulate_crew(6, hours * 3600, seed=seed), f"crew{seed}")


def digits():
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    return X, t, None, None


# ---------------------------------------------------------------- simulated annotator

def simulate(W, t, rec, seq, order: str, budget: int, seed: int = 0, batch: int = BATCH,
             **queue_kw):
    """Confirmations so far and accuracy of (confirmed + proposed) after each round.

    The oracle's confirmations are right, so conflicts it has already answered are not shown again
    (``exclude`` = confirmed windows); the queue then holds only unconfirmed windows.
    """
    n = t.size
    y = np.full(n, -1)
    rng = np.random.default_rng(seed)
    random_order = rng.permutation(n)
    spreader = LabelSpreader(warm_start=True)
    outputs = None
    counts, accs = [0], [0.0]
    refresh_times = []
    while (y >= 0).sum() < budget:
        labeled = y >= 0
        if order == "queue":
            q = review_queue(W, outputs, labeled, rec, seq, n=batch, exclude=labeled, **queue_kw)
            pick = list(q.index)
        elif order == "margin" and outputs is not None:
            m = np.where(labeled, np.inf, outputs.margin)
            pick = np.lexsort((np.arange(n), m))[:batch]
        else:  # random order (also margin's first round, when there is no margin yet)
            pick = [i for i in random_order if not labeled[i]][:batch]
        if len(pick) == 0:
            break
        y[np.asarray(pick)] = t[np.asarray(pick)]
        t0 = time.perf_counter()
        spreader.fit(W, y)
        outputs = spreader.outputs(y)
        refresh_times.append(time.perf_counter() - t0)
        counts.append(int((y >= 0).sum()))
        accs.append(float((outputs.label == t).mean()))
    return np.array(counts), np.array(accs), y, spreader, outputs, refresh_times


def needed(counts, accs, target):
    hit = np.flatnonzero(accs >= target)
    return int(counts[hit[0]]) if hit.size else None


def fmt(v, budget):
    return f"{v:>5d}" if v is not None else f">{budget:<4d}"


def estimate_error(W, t, y, spreader, outputs, seed=0, n_audit=50):
    """Audit (oracle answers a random sample of proposed windows) and CV, each minus the truth."""
    unconf = y < 0
    true_acc = float((outputs.label[unconf] == t[unconf]).mean())
    sample = draw_audit(unconf, n_audit, random_state=seed)
    audit = audit_accuracy(outputs.label[sample], t[sample], outputs.confidence[sample])
    cv = cross_validated_accuracy(W, y, spreader=LabelSpreader(alpha=spreader.alpha))
    return true_acc, audit, cv


def part_annotator(quick: bool):
    sets = [("simulator 8 h", lambda: synthetic(1.0 if quick else 8.0), 300 if quick else 400),
            ("simulator, 3 pickers x 1 h", lambda: synthetic_crew(3, 0.5 if quick else 1.0), 400),
            ("BasicMotions", basic_motions, 60),
            ("digits", digits, 300)]
    print("== simulated annotator (oracle from ground truth), batch of", BATCH, "per round ==")
    summary = {}
    for name, load, budget in sets:
        t0 = time.perf_counter()
        X, t, rec, seq = load()
        W = build_graph(X, recording=rec, seq=seq, pca_components=PCA if X.shape[1] > PCA else None)
        print(f"\n{name}: {t.size} windows, {X.shape[1]} features, {np.unique(t).size} classes, "
              f"graph {time.perf_counter() - t0:.1f} s (incl. data)")
        print(f"  {'order':8s} {'to 90%':>7s} {'to 95%':>7s}  final acc at {budget}  mean refresh")
        res = {}
        for order in ("queue", "random", "margin"):
            counts, accs, y, sp, out, rt = simulate(W, t, rec, seq, order, budget)
            res[order] = (needed(counts, accs, 0.90), needed(counts, accs, 0.95), accs[-1], y, sp, out)
            print(f"  {order:8s} {fmt(res[order][0], budget):>7s} {fmt(res[order][1], budget):>7s}"
                  f"  {accs[-1]:.3f}            {np.mean(rt) * 1000:.0f} ms", flush=True)
        _, _, _, y, sp, out = res["queue"]
        true_acc, audit, cv = estimate_error(W, t, y, sp, out)
        print(f"  estimates after {int((y >= 0).sum())} queue confirmations: proposals' true "
              f"accuracy {true_acc:.3f}")
        print(f"    audit of {audit.n}: {audit.value:.3f} [{audit.low:.3f}, {audit.high:.3f}] -> "
              f"estimate - truth = {audit.value - true_acc:+.3f}; ECE {audit.ece:.3f}")
        print(f"    cross-validation on {cv.n} confirmed: {cv.value:.3f} -> estimate - truth = "
              f"{cv.value - true_acc:+.3f} (confirmations from the queue are hard windows)")
        summary[name] = res
    s = summary[sets[0][0]]
    q95, r95 = s["queue"][1], s["random"][1]
    print("\ngoals on the simulator: >= 95 % with <= 150 confirmations; queue >= 2x fewer than random")
    print(f"  queue reaches 95 % at {q95} confirmations "
          f"({'met' if q95 is not None and q95 <= 150 else 'MISSED'})")
    if q95 is not None and r95 is not None:
        print(f"  random needs {r95}: ratio {r95 / q95:.2f}x ({'met' if r95 >= 2 * q95 else 'MISSED'})")
    else:
        print(f"  random reaches 95 % at {r95} (None = not within the budget)")


# ---------------------------------------------------------------- confirmations to 90 / 95 %

def _carry():
    import os

    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    import carry_over

    return carry_over


def carry_over(X, t, rec):
    """Share of the graph's edge weight inside one recording, and how often the nearest
    neighbour from another recording (resp. the same recording) has the same truth."""
    Z = reduce(standardize(X), PCA if X.shape[1] > PCA else None)
    W = build_graph(X, pca_components=PCA if X.shape[1] > PCA else None).tocoo()
    inside = float(W.data[rec[W.row] == rec[W.col]].sum() / W.data.sum())
    from sklearn.neighbors import NearestNeighbors

    other, same = [], []
    rng = np.random.default_rng(0)
    for r in np.unique(rec):
        mine = np.flatnonzero(rec == r)
        rest = np.flatnonzero(rec != r)
        q = rng.choice(mine, min(400, mine.size), replace=False)
        _, j = NearestNeighbors(n_neighbors=1).fit(Z[rest]).kneighbors(Z[q])
        other.append(t[rest[j[:, 0]]] == t[q])
        _, j = NearestNeighbors(n_neighbors=6).fit(Z[mine]).kneighbors(Z[q])
        # skip self and the windows overlapping it in time (a window step either side)
        pos = np.searchsorted(mine, q)
        far = np.array([next((m for m in row if abs(int(m) - p) > 1), row[-1])
                        for row, p in zip(j, pos)])
        same.append(t[mine[far]] == t[q])
    return inside, float(np.mean(np.concatenate(other))), float(np.mean(np.concatenate(same)))


def part_confirmations(quick: bool, seeds: int = 3, methods=("no smoothing", "project")):
    """Confirmations to 90 / 95 % for the review queue and random order, per data set and method,
    averaged over seeds (benchmarks/carry_over.py)."""
    co = _carry()
    print(f"== confirmations to 90 / 95 % window accuracy (oracle answers, {co.BATCH} per round, "
          f"mean of {seeds} seeds) ==")
    for name in ("crew",):
        d = co.data_sets(quick)[name][0](0)
        inside, other, same = carry_over(co.features_of(d, "1"), d.t, d.rec)  # Project's graph
        print(f"{d.name}: {inside:.0%} of the edge weight inside one recording; nearest window "
              f"of another recording right {other:.1%}, of the same recording {same:.1%}")
    rows = co.measure(["long", "crew", "demo", "basicmotions", "digits"], list(methods), seeds,
                      quick, parts=("zero",))
    print()
    print(co.HEAD)
    for r in rows:
        print(co.format_row(r))
    print("goals: queue to 95 % with <= 1 % of the windows on the 8-hour recording, <= 2 % on the "
          "crew; random order needs >= 2x the queue's confirmations")


def part_start(quick: bool, seeds: int = 3, methods=("no smoothing", "project")):
    """The first-bouts start: one bout per class from the first recording, then the queue."""
    co = _carry()
    print(f"== first bouts of each class from one recording, then the review queue: accuracy of "
          f"the proposals on unconfirmed windows (mean of {seeds} seeds) ==")
    rows = co.measure(["demo", "crew", "long", "basicmotions", "digits"], list(methods), seeds,
                      quick, parts=("start",))
    print()
    print(co.HEAD)
    for r in rows:
        print(co.format_row(r))


def part_tune_proposals(quick: bool, seeds: int = 3):
    """Both measures for variants of the proposals (classifier weight, its columns, temporal
    weight, smoothing)."""
    co = _carry()
    names = [m for m in co.methods()]
    print("== tuning the proposals: both measures, every variant ==")
    rows = co.measure(["demo", "crew", "long", "basicmotions", "digits"], names, seeds, quick)
    print()
    print(co.HEAD)
    for r in rows:
        print(co.format_row(r))


# ---------------------------------------------------------------- speed

def part_speed(quick: bool):
    from sklearn.semi_supervised import LabelSpreading

    print("== speed (2-core machine) ==")
    hours = 4.0 if quick else 8.0
    n_rec = 1 if quick else 5
    parts = [synthetic(hours, seed=10 + k, person=k) for k in range(n_rec)]
    X = np.concatenate([p[0] for p in parts])
    t = np.concatenate([p[1] for p in parts])
    rec = np.concatenate([np.full(p[1].size, k) for k, p in enumerate(parts)])
    seq = np.concatenate([p[3] for p in parts])
    n = t.size
    print(f"{n} windows ({n_rec} simulated recordings of {hours:g} h), {X.shape[1]} features")
    tt = {}
    t0 = time.perf_counter(); Z = standardize(X); tt["standardize"] = time.perf_counter() - t0
    t0 = time.perf_counter(); Z = reduce(Z, PCA); tt[f"PCA to {PCA}"] = time.perf_counter() - t0
    t0 = time.perf_counter(); ind, dist = nearest_neighbors(Z, 10, method="exact")
    tt["exact 10-NN (scikit-learn)"] = time.perf_counter() - t0
    t0 = time.perf_counter(); Wk = local_scaling_weights(ind, dist)
    tt["local-scaling weights"] = time.perf_counter() - t0
    t0 = time.perf_counter(); W = (Wk + 0.5 * temporal_edges(rec, seq)).tocsr()
    tt["temporal edges"] = time.perf_counter() - t0
    total = sum(tt.values())
    print(f"graph build at {n} windows: {total:.1f} s")
    for k, v in tt.items():
        print(f"  {k:28s} {v:7.2f} s  ({v / total:.0%})")
    # approximate neighbours, for the switch point (compilation measured separately)
    if not quick:
        t0 = time.perf_counter(); nearest_neighbors(Z[:2000], 10, method="approximate")
        jit = time.perf_counter() - t0
        t0 = time.perf_counter(); ia, _ = nearest_neighbors(Z, 10, method="approximate")
        ta = time.perf_counter() - t0
        recall = np.mean([np.intersect1d(a, b).size / 10 for a, b in zip(ia[:5000], ind[:5000])])
        print(f"  approximate 10-NN (pynndescent): first call (compiles) {jit:.1f} s, then "
              f"{ta:.1f} s at {n}, recall {recall:.3f}")
    # a state with 150 confirmations from the queue, then one more
    rng = np.random.default_rng(0)
    y = np.full(n, -1)
    idx = rng.choice(n, 150, replace=False)
    y[idx] = t[idx]
    sp = LabelSpreader(warm_start=True)
    t0 = time.perf_counter(); sp.fit(W, y); cold = time.perf_counter() - t0
    t0 = time.perf_counter(); sp.reference_mass(); tref = time.perf_counter() - t0
    times, iters = [], []
    for k in range(5):
        j = int(np.flatnonzero(y < 0)[rng.integers(0, (y < 0).sum())])
        y[j] = t[j]
        t0 = time.perf_counter()
        sp.fit(W, y)
        o = sp.outputs(y)
        times.append(time.perf_counter() - t0)
        iters.append(sp.n_iter_)
    t0 = time.perf_counter(); q = review_queue(W, o, y >= 0, rec, seq, n=50); tq = time.perf_counter() - t0
    ours_acc = float((o.label == t).mean())
    print(f"spreading at {n}: cold fit {cold:.2f} s, support reference (once per graph) {tref:.2f} s")
    print(f"refresh after one more confirmation (warm start, fit + outputs): median "
          f"{np.median(times):.3f} s, max {max(times):.3f} s, {int(np.median(iters))} iterations "
          f"(goal <= 0.3 s: {'met' if np.median(times) <= 0.3 else 'MISSED'})")
    print(f"review queue of 50: {tq:.2f} s")
    # scikit-learn on the same data; its knn kernel at full size takes long, so a subset too
    for m in ([n] if quick else [20000, n]):
        sub = np.arange(m)
        ys = y[sub]
        if (ys >= 0).sum() == 0:
            continue
        Xs = Z[sub]
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            sk = LabelSpreading(kernel="knn", n_neighbors=10, alpha=0.2, max_iter=30).fit(Xs, ys)
        tsk = time.perf_counter() - t0
        Ws = build_graph(X[sub], recording=rec[sub], seq=seq[sub], pca_components=PCA) if m != n else W
        sp2 = LabelSpreader(warm_start=True).fit(Ws, ys)
        ys2 = ys.copy()
        j = int(np.flatnonzero(ys < 0)[0])
        ys2[j] = t[sub][j]
        t0 = time.perf_counter(); sp2.fit(Ws, ys2); tr = time.perf_counter() - t0
        acc_sk = float((sk.transduction_ == t[sub]).mean())
        acc_us = float((sp2.transduction_ == t[sub]).mean())
        print(f"scikit-learn LabelSpreading(knn, defaults) at {m}: fit {tsk:.2f} s, accuracy "
              f"{acc_sk:.3f}; ours refresh {tr:.3f} s ({tsk / tr:.0f}x faster, goal >= 50x), "
              f"accuracy {acc_us:.3f}")
    del q, ours_acc


# ---------------------------------------------------------------- tuning

def part_tune(quick: bool):
    print("== tuning: accuracy with random confirmations (mean of 3 draws) ==")
    sets = [("simulator", lambda: synthetic(2.0 if quick else 8.0), [50, 150]),
            ("BasicMotions", basic_motions, [8, 16]), ("digits", digits, [30, 100])]
    for name, load, budgets in sets:
        X, t, rec, seq = load()
        for tw in ([0.0, 0.1, 0.5] if rec is not None else [0.0]):
            W = build_graph(X, recording=rec, seq=seq, temporal_weight=tw,
                            pca_components=PCA if X.shape[1] > PCA else None)
            for alpha in (0.5, 0.8, 0.9, 0.95, 0.99):
                accs = []
                for b in budgets:
                    a = []
                    for s in range(3):
                        rng = np.random.default_rng(s)
                        y = np.full(t.size, -1)
                        i = rng.choice(t.size, b, replace=False)
                        y[i] = t[i]
                        a.append((LabelSpreader(alpha=alpha).fit(W, y).transduction_ == t).mean())
                    accs.append(f"{b}: {np.mean(a):.3f}")
                print(f"  {name:12s} temporal {tw:<4g} alpha {alpha:<5g} " + "  ".join(accs), flush=True)


# ---------------------------------------------------------------- accuracy estimate

def part_estimate(quick: bool):
    import os

    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from estimate_orderings import DATASETS, ORDERS, speed, table

    table(list(DATASETS), list(ORDERS), repeats=3 if quick else 10, quick=quick)
    speed(20_000 if quick else 134_000)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--part", default="all", choices=["confirmations", "start", "tune-proposals",
                                                      "annotator", "speed", "tune", "estimate",
                                                      "all"],
                    help="all runs every part but tune-proposals (a long grid)")
    ap.add_argument("--quick", action="store_true", help="smaller data, for a smoke run")
    ap.add_argument("--seeds", type=int, default=3,
                    help="seeds to average over (confirmations, start, tune-proposals)")
    a = ap.parse_args(argv)
    seeded = {"confirmations", "start", "tune-proposals"}
    for part, fn in (("confirmations", part_confirmations), ("start", part_start),
                     ("tune-proposals", part_tune_proposals), ("tune", part_tune),
                     ("annotator", part_annotator), ("speed", part_speed),
                     ("estimate", part_estimate)):
        if a.part == part or (a.part == "all" and part != "tune-proposals"):
            fn(a.quick, a.seeds) if part in seeded else fn(a.quick)
            print(flush=True)


if __name__ == "__main__":
    sys.exit(main())
