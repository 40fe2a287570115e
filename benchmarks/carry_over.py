"""How far confirmations carry: data sets with several seeds, proposal methods, an oracle annotator.

Used by ``bench_proposals.py --part confirmations`` and ``--part start``; run alone for the table:

    python benchmarks/carry_over.py [--quick] [--seeds 3] [--methods a,b] [--sets a,b]

Two measures, each averaged over seeds (a new simulated shift per seed; for the open data sets a
new random order and a new drawn queue):

- confirmations to 90 / 95 % window accuracy (confirmed + proposed) from nothing confirmed, the
  windows picked by the review queue (drawn as Project draws it) or in random order, 5 per round;
- the "first bouts" start: one bout of each class confirmed on the first recording only (what a
  user imports first), then the true accuracy of the proposals on the windows not confirmed, at
  that start and after 25 / 50 / 100 answers from the review queue.

Data sets: the demo shift (three pickers, labeler.synthetic), one long recording of the simulator,
the crew of six (labeler.crew, strong person differences), BasicMotions (Bagnall et al., "The UEA
multivariate time series classification archive, 2018", shipped in aeon; each series one window)
and scikit-learn's digits (each image one window).
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import dataclass

import numpy as np

from labeler.graph import build_graph
from labeler.review import review_queue
from labeler.spreading import LabelSpreader

BATCH = 5
PCA = 30
QUEUE_POWER, QUEUE_FLOOR = 32.0, 0.05  # as Project draws the queue (labeler.service.proposals)
CHECKPOINTS = (25, 50, 100)


@dataclass
class Data:
    name: str
    X: np.ndarray  # features as Project computes them
    t: np.ndarray  # truth codes
    rec: np.ndarray | None
    seq: np.ndarray | None
    start: np.ndarray  # window indices of the "first bouts" start
    names: list | None = None  # feature names (None: not sensor data)
    n_v1: int | None = None  # the first n_v1 columns are feature set 1


# ---------------------------------------------------------------- data

def _first_bouts(truth: np.ndarray, rec: np.ndarray, seq: np.ndarray, min_windows: int = 15):
    """Windows of the first bout (a run of one truth in consecutive windows, at least
    ``min_windows`` long, about 20 s) of each class in recording 0; the shortest run is taken
    for a class that has no run that long."""
    idx = np.flatnonzero(rec == rec.min())
    t = truth[idx]
    new = np.ones(idx.size, bool)
    new[1:] = (t[1:] != t[:-1]) | (np.diff(seq[idx]) != 1)
    run = np.cumsum(new) - 1
    picked, fallback = {}, {}
    for r in range(run.max() + 1):
        w = idx[run == r]
        c = t[run == r][0]
        if c == "transition":
            continue
        if w.size >= min_windows and c not in picked:
            picked[c] = w
        elif c not in fallback or w.size > fallback[c].size:
            fallback[c] = w
    for c, w in fallback.items():
        picked.setdefault(c, w)
    return np.concatenate(list(picked.values()))


def sim_windows(sims, salt):
    """Features (with their names), truth, recording and sequence of simulated recordings, each
    cut into the project's default windows (one recording per simulation)."""
    from labeler.features import window_features
    from labeler.recordings import recording_from_frame
    from labeler.synthetic import window_truth
    from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples

    Xs, truths, recs, seqs, names = [], [], [], [], []
    for k, sim in enumerate(sims):
        rec = recording_from_frame(sim.frame, where="simulator", content_hash=f"{salt}-{k}",
                                   name=sim.name)
        length, step = window_samples(rec.rate, DEFAULT_LENGTH_S, DEFAULT_STEP_S)
        starts = cut_windows(rec.valid, length, step)
        X, names = window_features(rec.signal, starts, length, rec.rate, rec.channels)
        Xs.append(X)
        truths.append(window_truth(sim.truth, starts / rec.rate,
                                   (starts + length) / rec.rate).astype(str))
        recs.append(np.full(len(starts), k, dtype=np.int64))
        seqs.append(np.concatenate([[0], np.cumsum(np.where(np.diff(starts) == step, 1, 2))]))
    return (np.vstack(Xs), names, np.concatenate(truths), np.concatenate(recs),
            np.concatenate(seqs))


def _from_sims(name, sims, salt):
    X, names, truth, rec, seq = sim_windows(sims, salt)
    start = _first_bouts(truth, rec, seq)
    _, t = np.unique(truth, return_inverse=True)
    return Data(name, X, t, rec, seq, start, names, _n_v1(sims[0].frame.columns[1:]))


def _n_v1(channels):
    from labeler.features import feature_names

    return len(feature_names(list(channels), "1"))


def demo_shift(seed: int, minutes: float = 40.0, people: int = 3) -> Data:
    from labeler.synthetic import simulate_shift

    return _from_sims("demo shift", simulate_shift(people, minutes * 60, seed=2026 + seed),
                      f"demo{seed}")


def long_recording(seed: int, hours: float = 8.0) -> Data:
    from labeler.synthetic import simulate_recording

    return _from_sims("8-hour recording" if hours == 8 else f"{hours:g}-hour recording",
                      [simulate_recording(hours * 3600, seed=1 + seed)], f"long{seed}")


def crew(seed: int, minutes: float = 20.0, people: int = 6) -> Data:
    from labeler.crew import simulate_crew

    return _from_sims("crew of six", simulate_crew(people, minutes * 60, seed=21 + 100 * seed),
                      f"crew{seed}")


def _one_per_class(t: np.ndarray, seed: int) -> np.ndarray:
    rng = np.random.default_rng(1000 + seed)
    return np.array([rng.choice(np.flatnonzero(t == c)) for c in np.unique(t)])


def basic_motions(seed: int) -> Data:
    """BasicMotions (Bagnall et al. 2018, aeon): 80 series of 6 channels x 100 samples at 10 Hz."""
    from aeon.datasets import load_basic_motions

    from labeler.features import window_features

    Xa, ya = load_basic_motions(split="train")
    Xb, yb = load_basic_motions(split="test")
    S = np.concatenate([Xa, Xb])
    n, c, L = S.shape
    signal = S.transpose(0, 2, 1).reshape(n * L, c)
    channels = ["dev_acc_x", "dev_acc_y", "dev_acc_z", "dev_gyr_x", "dev_gyr_y", "dev_gyr_z"]
    X, names = window_features(signal, np.arange(n) * L, L, 10.0, channels)
    _, t = np.unique(np.concatenate([ya, yb]), return_inverse=True)
    return Data("BasicMotions", X, t, None, None, _one_per_class(t, seed), names,
                _n_v1(channels))


def digits(seed: int) -> Data:
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    return Data("digits", X.astype(np.float32), t, None, None, _one_per_class(t, seed))


def data_sets(quick: bool):
    """(name, loader(seed), budget to 95 %)."""
    return {
        "demo": (lambda s: demo_shift(s, 15.0 if quick else 40.0), 200 if quick else 300),
        "long": (lambda s: long_recording(s, 2.0 if quick else 8.0), 150 if quick else 400),
        "crew": (lambda s: crew(s, 10.0 if quick else 20.0), 250 if quick else 400),
        "basicmotions": (basic_motions, 60),
        "digits": (digits, 300),
    }


# ---------------------------------------------------------------- methods

def features_of(d: Data, variant: str) -> np.ndarray:
    """The features a method sees: "2" (feature set 2, what new projects compute), "1" (set 1)."""
    if variant == "1" and d.n_v1 is not None:
        return d.X[:, :d.n_v1]
    return d.X


class Spreading:
    """Label spreading alone on the window graph (what Project did before the classifier)."""

    def __init__(self, d: Data, temporal_weight: float = 0.5, features: str = "2"):
        X = features_of(d, features)
        self.graph = build_graph(X, recording=d.rec, seq=d.seq, temporal_weight=temporal_weight,
                                 pca_components=PCA if X.shape[1] > PCA else None)
        self.spreader = LabelSpreader(warm_start=True)

    def __call__(self, y):
        self.spreader.fit(self.graph, y)
        return self.spreader.outputs(y)


class Proposing:
    """labeler.proposing.Proposer as Project runs it: the graph on every feature, the classifier
    on the orientation-free ones (labeler.proposing.classifier_view), optional smoothing."""

    def __init__(self, d: Data, temporal_weight: float = 0.5, features: str = "2",
                 all_columns: bool = False, graph_features: str | None = None, **kw):
        from labeler.proposing import Proposer, classifier_view

        X = features_of(d, features)
        G = features_of(d, graph_features or features)
        self.graph = build_graph(G, recording=d.rec, seq=d.seq, temporal_weight=temporal_weight,
                                 pca_components=PCA if G.shape[1] > PCA else None)
        names = [f"c{i}" for i in range(X.shape[1])] if all_columns or d.names is None \
            else d.names[:X.shape[1]]
        self.features = classifier_view(X, names)
        self.rec, self.seq = d.rec, d.seq
        self.proposer = Proposer(**kw)

    def __call__(self, y):
        self.proposer.fit(self.graph, y, features=self.features, recording=self.rec, seq=self.seq)
        return self.proposer.outputs(y)


def methods():
    """Named proposal methods. "before": spreading on feature set 1 (the default before the
    classifier); "no smoothing": the spreading times the classifier (the default before smoothing
    along time); "project": what Project does now; the rest: "project" with one change."""
    from functools import partial

    from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT as W

    project = partial(Proposing, classifier_weight=W, graph_features="1")
    out = {"before": partial(Spreading, features="1"),
           "no smoothing": partial(project, stay=0.0),
           "project": project}
    for st in (0.7, 0.9):
        out[f"stay {st:g}"] = partial(project, stay=st)
    out["temper 0.5"] = partial(project, temper=0.5)
    out["stay .9 T.5"] = partial(project, stay=0.9, temper=0.5)
    out["temporal 2"] = partial(project, temporal_weight=2.0)
    out["margin smooth"] = partial(project, uncertainty="smoothed")
    for w in (0.2, 0.5):
        out[f"clf {w:g}"] = partial(project, classifier_weight=w)
    out["graph set2"] = partial(project, graph_features="2")
    out["clf allcols"] = partial(project, all_columns=True)
    return out


# ---------------------------------------------------------------- the oracle

def _queue_pick(method, outputs, y, d: Data, seed: int, rnd: int):
    labeled = y >= 0
    return review_queue(method.graph, outputs, labeled, d.rec, d.seq, n=BATCH, exclude=labeled,
                        sample_power=QUEUE_POWER, sample_floor=QUEUE_FLOOR,
                        random_state=seed * 7919 + rnd).index


def run_order(method, d: Data, order: str, budget: int, seed: int, y0=None, record_at=None):
    """Confirmations and accuracy after each round. ``y0``: confirmed at the start;
    ``record_at``: answer counts at which the accuracy on unconfirmed windows is kept."""
    t = d.t
    n = t.size
    y = np.full(n, -1) if y0 is None else y0.copy()
    base = int((y >= 0).sum())
    rng = np.random.default_rng(seed)
    random_order = rng.permutation(n)
    outputs = method(y) if base else None
    counts, accs = [base], [float((outputs.label == t).mean()) if base else 0.0]
    kept = {}
    if base and record_at is not None:
        kept[0] = float((outputs.label[y < 0] == t[y < 0]).mean())
    rnd = 0
    while (y >= 0).sum() - base < budget:
        labeled = y >= 0
        if order == "queue":
            pick = _queue_pick(method, outputs, y, d, seed, rnd)
        else:
            pick = [i for i in random_order if not labeled[i]][:BATCH]
        rnd += 1
        if len(pick) == 0:
            break
        pick = np.asarray(pick)
        y[pick] = t[pick]
        outputs = method(y)
        counts.append(int((y >= 0).sum()))
        accs.append(float((outputs.label == t).mean()))
        answered = counts[-1] - base
        if record_at is not None and answered in record_at:
            kept[answered] = float((outputs.label[y < 0] == t[y < 0]).mean())
    return np.array(counts), np.array(accs), kept


def needed(counts, accs, target):
    hit = np.flatnonzero(accs >= target)
    return int(counts[hit[0]]) if hit.size else None


# ---------------------------------------------------------------- tables

def measure(set_names, method_names, seeds: int, quick: bool, parts=("zero", "start"),
            echo=print):
    """Per data set and method, the mean over seeds of confirmations to 90/95 % (queue, random)
    and of the start's accuracy at the checkpoints. Returns rows (dicts)."""
    sets = data_sets(quick)
    ms = methods()
    rows = []
    for sname in set_names:
        load, budget = sets[sname]
        per = {m: {"q90": [], "q95": [], "r90": [], "r95": [], "start": {}} for m in method_names}
        n_windows = 0
        for s in range(seeds):
            t0 = time.perf_counter()
            d = load(s)
            n_windows = d.t.size
            for mname in method_names:
                m = ms[mname](d)
                if "zero" in parts:
                    for order, key in (("queue", "q"), ("random", "r")):
                        c, a, _ = run_order(m, d, order, budget, s)
                        per[mname][key + "90"].append(needed(c, a, 0.90))
                        per[mname][key + "95"].append(needed(c, a, 0.95))
                if "start" in parts:
                    m = ms[mname](d)
                    y0 = np.full(d.t.size, -1)
                    y0[d.start] = d.t[d.start]
                    _, _, kept = run_order(m, d, "queue", max(CHECKPOINTS), s, y0=y0,
                                           record_at=CHECKPOINTS)
                    for k, v in kept.items():
                        per[mname]["start"].setdefault(k, []).append(v)
            echo(f"  {d.name} seed {s}: {d.t.size} windows ({time.perf_counter() - t0:.0f} s)")
        for mname in method_names:
            p = per[mname]
            rows.append({"set": d.name, "windows": n_windows, "method": mname, "budget": budget,
                         **{k: p[k] for k in ("q90", "q95", "r90", "r95")},
                         "start": {k: float(np.mean(v)) for k, v in sorted(p["start"].items())}})
            echo("  " + format_row(rows[-1]), flush=True)
    return rows


def _mean(v, budget):
    """Mean over seeds; a seed that did not get there counts as the budget (shown with >)."""
    if not v:
        return "-"
    miss = any(x is None for x in v)
    m = np.mean([budget if x is None else x for x in v])
    return f"{'>' if miss else ''}{m:.0f}"


def format_row(r) -> str:
    b = r["budget"]
    q95 = [b if x is None else x for x in r["q95"]]
    r95 = [b if x is None else x for x in r["r95"]]
    share = f"{np.mean(q95) / r['windows']:.1%}" if q95 else "-"
    ratio = f"{np.mean(r95) / np.mean(q95):.1f}x" if q95 and r95 else "-"
    start = " ".join(f"{r['start'].get(k, float('nan')):.3f}" for k in (0, *CHECKPOINTS))
    return (f"{r['set']:16s} {r['windows']:6d} {r['method']:12s} {_mean(r['q90'], b):>6s} "
            f"{_mean(r['q95'], b):>6s} {_mean(r['r90'], b):>6s} {_mean(r['r95'], b):>6s} "
            f"{share:>6s} {ratio:>6s}  {start}")


HEAD = (f"{'data set':16s} {'windows':>6s} {'method':12s} {'q90':>6s} {'q95':>6s} {'r90':>6s} "
        f"{'r95':>6s} {'q95/n':>6s} {'r/q':>6s}  start: +0 +25 +50 +100 answers")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--sets", default="demo,long,crew,basicmotions,digits")
    ap.add_argument("--methods", default=",".join(methods()))
    ap.add_argument("--parts", default="zero,start")
    a = ap.parse_args(argv)
    print(f"== confirmations to 90 / 95 % (mean of {a.seeds} seeds; > = a seed did not get there "
          f"within the budget) and the first-bouts start (accuracy on unconfirmed windows) ==")
    rows = measure(a.sets.split(","), a.methods.split(","), a.seeds, a.quick,
                   parts=tuple(a.parts.split(",")))
    print()
    print(HEAD)
    for r in rows:
        print(format_row(r))


if __name__ == "__main__":
    sys.exit(main())
