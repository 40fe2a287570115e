"""Does the accuracy estimate tell the truth, whatever order people confirm windows in?

Used by ``benchmarks/bench_proposals.py --part estimate`` (and runnable alone):

    python benchmarks/estimate_orderings.py [--quick] [--repeats R]

A simulated annotator answers from ground truth in one of three orders, refreshing the proposals
after every batch of 5:

- ``random``: windows in random order;
- ``queue``: the review queue, drawn as the project draws it (``QUEUE_POWER``), so each shown
  window's probability is known and weights the estimate;
Each round is one user action (batch): the estimate hides the windows of one action together.
Classes are made as the annotator meets them (a class nobody has confirmed yet is unknown to the
tool, and its windows count as wrong in the truth).

- ``map``: bulk picks as on the map: an unconfirmed window in a part of the map with no
  confirmation yet (drawn among the half farthest from any confirmed window) and its 9 nearest
  unconfirmed neighbours on a 2-D PCA map, each confirmed with its true label (the person
  corrects strays).

At 25, 50, 100 and 200 confirmations the estimate, computed as the project computes it
(:func:`labeler.estimate.proposal_accuracy` and the answered audit,
:func:`labeler.estimate.with_audit`), is compared with the true accuracy of the proposals on the
unconfirmed windows. Where it has no figure, the annotator does what the project then asks: answers
a blind audit of 30 windows drawn within confidence bands (once; the audit's answers are not
counted in the confirmations), and the figure is read again. Printed per data
set and order: mean estimate minus truth, mean |estimate - truth|, and how often the 95 %
interval held the truth. Goal: |error| <= 0.05 from 50 confirmations on, coverage >= 90 %.

Data: the demo simulator (one recording; a crew of pickers with their own ways of moving),
BasicMotions (Bagnall et al. 2018, shipped in aeon; each 10 s series cut into 5 overlapping
windows, one recording per series) and scikit-learn's digits (no time order).
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np

from labeler.estimate import (audit_accuracy, audit_held_out, draw_stratified_audit,
                              proposal_accuracy, with_audit)
from labeler.graph import build_graph
from labeler.review import review_queue
from labeler.service.proposals import QUEUE_FLOOR, QUEUE_POWER
from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT, DEFAULT_STAY, Proposer
from labeler.quality import audit_would_narrow
from labeler.spreading import LabelSpreader
from sklearn.base import clone

CHECKPOINTS = (25, 50, 100, 200)
ORDERS = ("random", "queue", "map")
BATCH = 5
PCA = 30


def simulator(hours: float = 1.0, seed: int = 1, person: int = 0):
    from labeler.features import window_features
    from labeler.recordings import recording_from_frame
    from labeler.synthetic import simulate_recording, window_truth
    from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples

    sim = simulate_recording(hours * 3600, seed=seed, person=person)
    rec = recording_from_frame(sim.frame, where="simulator", content_hash=f"{seed}-{person}",
                               name=sim.name)
    length, step = window_samples(rec.rate, DEFAULT_LENGTH_S, DEFAULT_STEP_S)
    starts = cut_windows(rec.valid, length, step)
    X, names = window_features(rec.signal, starts, length, rec.rate, rec.channels)
    truth = window_truth(sim.truth, starts / rec.rate, (starts + length) / rec.rate).astype(str)
    seq = np.concatenate([[0], np.cumsum(np.where(np.diff(starts) == step, 1, 2))])
    return X, truth, np.zeros(truth.size, dtype=np.int64), seq, names


def crew(people: int = 3, hours: float = 0.5, seed: int = 11):
    parts = [simulator(hours, seed + k, k) for k in range(people)]
    X = np.vstack([p[0] for p in parts])
    truth = np.concatenate([p[1] for p in parts])
    rec = np.concatenate([np.full(p[1].size, k) for k, p in enumerate(parts)])
    seq = np.concatenate([p[3] for p in parts])
    return X, truth, rec, seq, parts[0][4]


def basic_motions(per_series: int = 5):
    """BasicMotions (Bagnall et al. 2018; aeon): 80 series of 6 channels x 100 samples at 10 Hz,
    cut into ``per_series`` windows of 30 samples (3 s); one recording per series."""
    from aeon.datasets import load_basic_motions

    from labeler.features import window_features

    Xa, ya = load_basic_motions(split="train")
    Xb, yb = load_basic_motions(split="test")
    S = np.concatenate([Xa, Xb]).astype(np.float64)
    S[:, :3] /= 9.80665  # m/s2 -> g
    S[:, 3:] *= 180 / np.pi  # rad/s -> deg/s (see tests/test_basicmotions.py)
    n, c, L = S.shape
    length = 30
    step = (L - length) // (per_series - 1)
    signal = S.transpose(0, 2, 1).reshape(n * L, c)
    starts = (np.arange(n)[:, None] * L + np.arange(per_series)[None, :] * step).ravel()
    channels = ["dev_acc_x", "dev_acc_y", "dev_acc_z", "dev_gyr_x", "dev_gyr_y", "dev_gyr_z"]
    X, names = window_features(signal, starts, length, 10.0, channels)
    y = np.repeat(np.concatenate([ya, yb]), per_series)
    rec = np.repeat(np.arange(n), per_series)
    seq = np.tile(np.arange(per_series), n)
    return X, y.astype(str), rec, seq, names


def digits():
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    return X, t.astype(str), None, None, [f"pixel{i}" for i in range(X.shape[1])]


DATASETS = {"simulator": simulator, "crew": crew, "BasicMotions": basic_motions, "digits": digits}


def prepare(name: str, quick: bool = False):
    """The data set's graph, truth, time and 2-D map, and the classifier's features as the
    project makes them (the graph from :func:`labeler.features.graph_columns`, the classifier's
    view from :func:`labeler.proposing.classifier_view`)."""
    from labeler.features import graph_columns
    from labeler.proposing import classifier_view

    X, truth, rec, seq, names = (simulator(0.5) if (quick and name == "simulator")
                                 else crew(3, 0.25) if (quick and name == "crew")
                                 else DATASETS[name]())
    _, t = np.unique(truth, return_inverse=True)
    Zc = classifier_view(X, names)
    X = X[:, graph_columns(names)]
    W = build_graph(X, recording=rec, seq=seq, pca_components=PCA if X.shape[1] > PCA else None)
    from sklearn.decomposition import PCA as _PCA
    from sklearn.preprocessing import StandardScaler

    Z = StandardScaler().fit_transform(np.nan_to_num(X.astype(np.float64)))
    xy = _PCA(2, random_state=0).fit_transform(Z)
    return {"W": W, "t": t, "rec": rec, "seq": seq, "xy": xy, "Zc": Zc}


AUDIT = 30  # answers of the blind audit the estimate asks for when it has no figure


def _estimate(W, y, sp, rec, seq, weight, batch, audit, level, n_boot, seed):
    """The estimate as the project computes it: cross-validation of the confirmations (the
    audit's answers left to the audit), the audit's answers scored by proposals made without
    them, joined into one headline."""
    mask = np.zeros(y.size, dtype=bool)
    if audit is not None:
        mask[audit[0]] = True
    base = getattr(sp, "spreader_", sp)  # the spreading inside the proposer
    kw = dict(recording=rec, seq=seq, spreader=clone(sp), init=base.label_mass_,
              init_classes=base.classes_)
    cv, _ = proposal_accuracy(W, y, sp.label_distributions_.max(axis=1), weights=weight,
                              proposed_label=sp.transduction_, batch=batch, level=level,
                              n_boot=n_boot, random_state=seed, exclude=mask, **kw)
    if audit is None:
        return cv
    idx, stratum, size = audit  # idx sorted
    h = audit_held_out(W, y, mask, random_state=seed, **kw)
    j = np.searchsorted(idx, h.index)
    a, _ = audit_accuracy(h.correct, h.confidence, stratum[j], size[j],
                          sp.label_distributions_.max(axis=1)[y < 0], level=level,
                          n_boot=n_boot, random_state=seed)
    return with_audit(cv, a, level=level)


def run(data: dict, order: str, seed: int, checkpoints=CHECKPOINTS, level: float = 0.95,
        n_boot: int = 200, audit_size: int = AUDIT, proposer: str = "project", on_check=None):
    """One simulated annotator; returns rows (confirmed, truth, estimate, low, high, basis,
    audited). Where the estimate has no figure the annotator answers the blind audit it asks for
    (``audit_size`` windows drawn within confidence bands; 0: never) and the figure is read
    again; ``audited``: an audit has been answered by then (its answers are not counted in
    ``confirmed``). ``proposer``: "project" (what Project proposes: the spreading times a
    logistic regression on the orientation-free features, smoothed along time) or "spreading"
    (the spreading alone). ``on_check(state)``: called at each checkpoint with the annotator's
    state (confirmations, weights, actions, audit, proposer), to study other estimates on the
    same runs."""
    W, t, rec, seq, xy = data["W"], data["t"], data["rec"], data["seq"], data["xy"]
    n = t.size
    rng = np.random.default_rng(seed)
    y = np.full(n, -1)
    weight = np.ones(n)
    batch = np.full(n, -1)  # the round (one user action) that confirmed each window
    if proposer == "project":
        sp = Proposer(classifier_weight=DEFAULT_CLASSIFIER_WEIGHT, stay=DEFAULT_STAY,
                      warm_start=True, classifier_features=data["Zc"], recording=rec, seq=seq)
    elif proposer == "spreading":
        sp = LabelSpreader(warm_start=True)
    else:
        raise ValueError(f"proposer must be 'project' or 'spreading', got {proposer!r}")
    out = None
    audit = None  # (index, stratum, stratum size) of the answered audit
    rows = []
    cps = [c for c in checkpoints if c < n - 10 - audit_size]
    while cps:
        labeled = y >= 0
        k = int(labeled.sum()) - (0 if audit is None else audit[0].size)
        if k >= cps[0]:
            cps.pop(0)
            est = _estimate(W, y, sp, rec, seq, weight, batch, audit, level, n_boot, seed)
            # the annotator does what the estimate asks: an audit where it has no figure, or
            # where its interval is wide (labeler.quality.audit_would_narrow)
            if (est.basis == "none" or audit_would_narrow(est)) and audit is None and audit_size:
                conf = sp.label_distributions_.max(axis=1)
                audit = draw_stratified_audit(~labeled, conf, audit_size, random_state=rng)
                y[audit[0]] = t[audit[0]]
                batch[audit[0]] = -2 - np.arange(audit[0].size)  # one answer at a time
                sp.fit(W, y)
                out = sp.outputs(y)
                est = _estimate(W, y, sp, rec, seq, weight, batch, audit, level, n_boot, seed)
            unconf = y < 0
            truth = float((out.label[unconf] == t[unconf]).mean())
            rows.append((k, truth, est.value, est.low, est.high, est.basis, audit is not None))
            if on_check is not None:
                on_check(dict(y=y.copy(), weight=weight.copy(), batch=batch.copy(), audit=audit,
                              sp=sp, row=rows[-1], seed=seed))
            continue
        room = cps[0] - k
        if order == "queue" and out is not None:
            q = review_queue(W, out, labeled, rec, seq, n=min(BATCH, room), exclude=labeled,
                             sample_power=QUEUE_POWER, sample_floor=QUEUE_FLOOR,
                             random_state=rng)
            pick = q.index
            weight[pick] = 1.0 / (q.pool * q.probability)
        elif order == "map":
            free = np.flatnonzero(~labeled)
            if labeled.any():
                from scipy.spatial import cKDTree

                far = cKDTree(xy[labeled]).query(xy[free])[0]
                free_far = free[far >= np.median(far)]
            else:
                free_far = free
            s = free_far[rng.integers(free_far.size)]
            d = np.sum((xy[free] - xy[s]) ** 2, axis=1)
            pick = free[np.argsort(d, kind="stable")[:min(2 * BATCH, room)]]
        else:  # random (and the queue's first batch: nothing to rank yet but density)
            free = np.flatnonzero(~labeled)
            pick = rng.choice(free, size=min(BATCH, room, free.size), replace=False)
        y[pick] = t[pick]
        batch[pick] = k
        sp.fit(W, y)
        out = sp.outputs(y)
    return rows


def table(names, orders, repeats: int, quick: bool, checkpoints=CHECKPOINTS, out=print,
          audit_size: int = AUDIT, proposer: str = "project"):
    out("== accuracy estimate against the truth, per data set and order of confirmation ==")
    out(f"   {repeats} repeat(s) each; cells: mean(estimate - truth) / mean |estimate - truth| / "
        "share of 95 % intervals holding the truth; (N none): runs without a figure; "
        f"(N aud): runs where the annotator had answered the blind audit of {audit_size} the "
        "estimate asked for when it had no figure (not counted in the confirmations); "
        f"proposals: {proposer}")
    head = f"  {'data':13s} {'order':7s}" + "".join(f"{c:>30d}" for c in checkpoints)
    out(head)
    summary = {}
    for name in names:
        t0 = time.perf_counter()
        data = prepare(name, quick)
        for order in orders:
            per = {c: [] for c in checkpoints}
            for r in range(repeats):
                for k, truth, v, lo, hi, basis, audited in run(data, order, seed=r,
                                                               checkpoints=checkpoints,
                                                               audit_size=audit_size,
                                                               proposer=proposer):
                    c = min(checkpoints, key=lambda c: abs(c - k))
                    per[c].append((v - truth if basis != "none" else np.nan,
                                   basis != "none" and lo <= truth <= hi, audited))
            cells = []
            for c in checkpoints:
                v = per[c]
                if not v:
                    cells.append(f"{'-':>30s}")
                    continue
                e = np.array([a for a, _, _ in v], dtype=float)
                none = int(np.isnan(e).sum())
                aud = int(sum(a for _, _, a in v))
                cov = np.mean([b for a, b, _ in v if not np.isnan(a)]) if none < len(v) else np.nan
                ee = e[~np.isnan(e)]
                cell = (f"{ee.mean():+.3f}/{np.abs(ee).mean():.3f}/{cov:4.0%}" if ee.size
                        else "no figure")
                if none:
                    cell += f" ({none} none)"
                if aud:
                    cell += f" ({aud} aud)"
                cells.append(f"{cell:>30s}")
                summary[(name, order, c)] = (ee, cov, none, aud, len(v))
            out(f"  {name:13s} {order:7s}" + "".join(cells))
        out(f"  ({name}: {data['t'].size} windows, {time.perf_counter() - t0:.0f} s)")
    late = {key: v for key, v in summary.items() if key[2] >= 50}
    errs = np.concatenate([v[0] for v in late.values()]) if late else np.zeros(0)
    covs = [v[1] for v in late.values() if not np.isnan(v[1])]
    cell_err = [np.abs(v[0]).mean() for v in late.values() if v[0].size]
    none_cells = sum(1 for v in late.values() if v[2])
    none_runs = sum(v[2] for v in late.values())
    aud_runs = sum(v[3] for v in late.values())
    runs = sum(v[4] for v in late.values())
    out(f"  from 50 confirmations on: mean |error| {np.abs(errs).mean():.3f}, worst cell "
        f"{max(cell_err):.3f} (goal <= 0.05); coverage worst cell {min(covs):.0%}, mean "
        f"{np.mean(covs):.0%} (goal >= 90 %); cells with a run without a figure: {none_cells} of "
        f"{len(late)} ({none_runs} of {runs} runs); runs resting on an audit: {aud_runs}")
    return summary


def speed(n_windows: int = 134_000, out=print):
    """Time of the estimate in a project of ``n_windows`` windows: computing it once after a
    proposal run, reading it back, and `labeler accuracy` as a process. Goal: the command < 0.5 s."""
    import subprocess
    import tempfile
    from pathlib import Path

    from bench_app import make_project

    from labeler.project import Project

    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        path = make_project(Path(tmp), n_windows)
        with Project.open(path, annotator="bench") as p:
            w = p.windows()
            second = w[w["recording_id"] == w["recording_id"].max()]
            for j, name in enumerate(("slow", "steady", "brisk")):  # a second stretch per class
                p.confirm(second["id"].iloc[j * 47:j * 47 + 30].tolist(), name, source="import")
            build = time.perf_counter() - t0
            t0 = time.perf_counter()
            p.refresh_proposals(estimate=False)
            t_prop = time.perf_counter() - t0
            t0 = time.perf_counter()
            e = p.accuracy_estimate()
            t_est = time.perf_counter() - t0
            t0 = time.perf_counter()
            p.accuracy_estimate()
            t_read = time.perf_counter() - t0
            # a proposal run as `labeler propose` makes it: the estimate computed and stored
            # with it, so the command below only reads it
            p.confirm(second["id"].iloc[200:205].tolist(), "slow", source="import")
            t0 = time.perf_counter()
            p.refresh_proposals()
            t_run = time.perf_counter() - t0
        t0 = time.perf_counter()
        r = subprocess.run([sys.executable, "-m", "labeler.cli", "accuracy", str(path)],
                           capture_output=True, text=True)
        t_cli = time.perf_counter() - t0
    out(f"== the estimate in a project of {len(w)} windows (built in {build:.0f} s) ==")
    out(f"  proposals run {t_prop:.1f} s; estimate computed once {t_est:.1f} s "
        f"({e.basis}, {e.n} confirmed windows scored); read back {t_read * 1000:.0f} ms; "
        f"a run with its estimate {t_run:.1f} s")
    out(f"  `labeler accuracy` as a process: {t_cli:.2f} s (goal < 0.5 s"
        f"{'' if r.returncode == 0 else ', FAILED: ' + r.stderr.strip()[-200:]})")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--data", nargs="*", default=list(DATASETS))
    ap.add_argument("--orders", nargs="*", default=list(ORDERS))
    ap.add_argument("--proposer", choices=["project", "spreading"], default="project",
                    help="what proposes: as Project does (spreading and classifier) or the "
                         "spreading alone")
    ap.add_argument("--audit", type=int, default=AUDIT, metavar="N",
                    help="size of the audit answered where the estimate has no figure (0: never)")
    ap.add_argument("--speed", type=int, default=None, metavar="N",
                    help="only time the estimate in a project of N windows")
    a = ap.parse_args(argv)
    if a.speed:
        speed(a.speed)
        return
    table(a.data, a.orders, a.repeats or (3 if a.quick else 10), a.quick, audit_size=a.audit,
          proposer=a.proposer)


if __name__ == "__main__":
    sys.exit(main())
