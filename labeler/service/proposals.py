"""Proposals: label spreading over the window graph and the review queue.

Label spreading over the window graph (:mod:`labeler.graph`, :mod:`labeler.spreading`) and the review
queue (:mod:`labeler.review`). The graph is cached as a blob and rebuilt only when the recordings, the
feature set or the graph parameters change; each refresh is a run (kind "proposals") with its
parameters and summary, and the latest per-window results are kept as one blob. Proposed labels are
suggestions for a person to review.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import hashlib
import io
import json
import time

from labeler.errors import InputError
from labeler.npzview import npz_arrays, npz_bytes
from labeler.results import ProposalRun, ReviewDraw
from labeler.service.catalog import Catalog
from labeler.service.context import Context, Progress
from labeler.service.ledger import Ledger

if TYPE_CHECKING:  # pandas is imported where a table is made
    import pandas as pd

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

GRAPH_BLOB = "proposals/graph"
LATEST_BLOB = "proposals/latest"
#: what the latest run's arrays go with and a refresh does not change: the window order
#: (window_id, recording_id, seq) and the reference mass; written only when the graph or alpha
#: change (meta: graph_key, alpha), in the transaction of the run that first uses it
FRAME_BLOB = "proposals/frame"
#: the spreading's label mass of one class (float32, one value per window), a blob per class:
#: "proposals/F/<class id>" (meta: the run that wrote it). A run writes the columns its fit
#: solved again (one more confirmation: one class) and names in its meta ("F_runs") the run
#: whose column it goes with for every class
COLUMN_PREFIX = "proposals/F/"
GRAPH_PARAMS = ("n_neighbors", "temporal_weight", "pca_components")
#: the review queue draws windows with probability ~ score**QUEUE_POWER, plus QUEUE_FLOOR spread
#: evenly, so each shown window's chance is known. On the simulator (1383 windows, 2 runs) the
#: proposals' accuracy after 100/200 answers was 0.985/0.997 ranked, 0.985/0.996 at power 32 with
#: floor 0.05 and 0.974/0.982 at power 4 with floor 0.1, so the draw stays close to the ranking.
QUEUE_POWER = 32.0
QUEUE_FLOOR = 0.05
QUEUE_COLUMNS = ["window_id", "reason", "score", "proposed", "confidence", "recording", "start_s"]
PROPOSAL_COLUMNS = ["window_id", "label", "class_id", "confidence", "margin", "support", "conflict",
                    "confirmed"]


def _frame_meta(meta: dict) -> dict:
    """The meta of the frame a run with this meta goes with."""
    return {"graph_key": meta.get("graph_key"), "alpha": meta.get("alpha")}


class Proposals:
    """The window graph, proposal runs and what to look at next."""

    def __init__(self, ctx: Context, catalog: Catalog, ledger: Ledger):
        self.ctx = ctx
        self.catalog = catalog
        self.ledger = ledger

    # ------------------------------------------------------------------ graph
    def _graph_key(self, params: dict) -> str:
        recs = self.ctx.store.recordings()
        ident = {"recordings": [[int(r["id"]), str(r["content_hash"])] for r in recs],
                 "features": self.catalog.feature_set_version,
                 "n_windows": self.catalog.n_windows(), **params}
        return hashlib.sha256(json.dumps(ident, sort_keys=True).encode()).hexdigest()[:16]

    def graph(self, params: dict, progress: Progress | None = None):
        """(graph, key, rebuilt): the cached window graph, built when missing or outdated."""
        from labeler.graph import build_graph

        key = self._graph_key(params)
        cached = self.ctx.cache.get("graph")
        if cached is not None and cached[1] == key:
            return cached[0], key, False
        got = self.ctx.store.get_blob(GRAPH_BLOB)
        if got is not None and got[1].get("key") == key:
            from scipy import sparse

            W = sparse.load_npz(io.BytesIO(got[0])).tocsr()
            self.ctx.cache["graph"] = (W, key)
            return W, key, False
        from labeler.features import graph_columns

        X, names = self.catalog.features()
        if X.shape[1]:
            X = X[:, graph_columns(names)]
        if X.shape[0] < 2:
            raise InputError(f"{self.ctx.path}: proposals need at least 2 windows; add recordings "
                             "first with `labeler add`")
        if progress:
            progress(0.1, f"graph of {X.shape[0]} windows")
        rid, seq = self.catalog.window_sequence()
        pca = params["pca_components"]
        W = build_graph(X, recording=rid, seq=seq, n_neighbors=params["n_neighbors"],
                        temporal_weight=params["temporal_weight"],
                        pca_components=pca if pca and pca < X.shape[1] else None)
        from scipy import sparse

        W = W.tocsr()
        # what scipy.sparse.save_npz(compressed=False) writes, its arrays aligned: read on every
        # queue, as views (no inflating, no copies)
        arrays = dict(indices=W.indices, indptr=W.indptr, format=W.format.encode("ascii"),
                      shape=W.shape, data=W.data)
        if isinstance(W, sparse.sparray):
            arrays["_is_array"] = True
        self.ctx.store.put_blob(GRAPH_BLOB, npz_bytes(arrays), {"key": key, **params})
        self.ctx.cache["graph"] = (W, key)
        return W, key, True

    def queue_graph(self, params: dict):
        """(graph as :class:`labeler.review.CSRGraph`, key): the stored graph's arrays read
        without scipy when it is current (a short command then imports no scipy), else
        :meth:`graph`."""
        from labeler.review import CSRGraph

        key = self._graph_key(params)
        cached = self.ctx.cache.get("graph")
        if cached is None or cached[1] != key:
            got = self.ctx.store.get_blob(GRAPH_BLOB)
            if got is not None and got[1].get("key") == key:
                z = npz_arrays(got[0])
                if z["format"].item() in (b"csr", "csr"):
                    return CSRGraph(z["indptr"], z["indices"], z["data"],
                                    tuple(int(v) for v in z["shape"])), key
            cached = self.graph(params)[:2]
        W = cached[0]
        return CSRGraph(W.indptr, W.indices, W.data, W.shape), key

    def graph_params(self) -> dict:
        """Graph parameters of the latest proposal run (the defaults before any run)."""
        run = self.ctx.store.latest_run("proposals")
        if run is not None:
            return {k: run["params"][k] for k in GRAPH_PARAMS}
        from labeler.graph import DEFAULT_TEMPORAL_WEIGHT
        return {"n_neighbors": 10, "temporal_weight": DEFAULT_TEMPORAL_WEIGHT, "pca_components": 30}

    def classifier_features(self, key: str) -> np.ndarray:
        """The classifier's view of the window features (:func:`labeler.proposing.classifier_view`),
        cached with the graph it goes with."""
        from labeler.proposing import classifier_view

        cached = self.ctx.cache.get("classifier_features")
        if cached is not None and cached[1] == key:
            return cached[0]
        X, names = self.catalog.features()
        Z = classifier_view(X, names)
        self.ctx.cache["classifier_features"] = (Z, key)
        return Z

    def proposer(self, alpha: float, classifier_weight: float, key: str, stay: float = 0.0):
        """An unfitted :class:`labeler.proposing.Proposer` as a run with these settings uses it
        (also what the accuracy estimate refits in its held-out folds): the classifier's
        features and, when ``stay`` > 0, each window's recording and sequence go with it, so a
        clone fits like the run."""
        from labeler.proposing import Proposer

        Z = self.classifier_features(key) if classifier_weight > 0 else None
        rid = seq = None
        if stay > 0:
            rid, seq = self.catalog.window_sequence()
        return Proposer(alpha=alpha, classifier_weight=classifier_weight, stay=stay,
                        classifier_features=Z, recording=rid, seq=seq)

    # ------------------------------------------------------------------ runs
    def run_id(self) -> int | None:
        """Id of the run that made the stored proposals (one small query), or None."""
        meta = self.ctx.store.blob_meta(LATEST_BLOB)
        return None if meta is None or meta.get("run_id") is None else int(meta["run_id"])

    def latest_arrays(self) -> dict | None:
        """The latest stored proposal arrays (npz) with their run, or None: the run's own
        arrays and the frame they go with (:data:`FRAME_BLOB`; a run stored before the frame was
        split off holds every array itself)."""
        # one statement, so one state of the file
        got = self.ctx.store.get_blobs([LATEST_BLOB, FRAME_BLOB], prefix=COLUMN_PREFIX)
        if LATEST_BLOB not in got:
            return None
        data, meta = got[LATEST_BLOB]
        out: dict = npz_arrays(data)  # read-only views of the blob
        if "window_id" not in out:
            frame = got.get(FRAME_BLOB)
            if frame is None or frame[1] != _frame_meta(meta):
                return None  # not written by any version: nothing to read the run with
            out.update(npz_arrays(frame[0]))
        if "F" not in out:  # the label mass, one blob per class
            runs = meta.get("F_runs") or {}
            cols = []
            for c in out["classes"]:
                col = got.get(f"{COLUMN_PREFIX}{int(c)}")
                if col is None or col[1].get("run_id") != runs.get(str(int(c))):
                    return None  # not written by any version: nothing to read the run with
                cols.append(npz_arrays(col[0])["F"])
            n = out["window_id"].size
            out["F"] = np.stack(cols, axis=1) if cols else np.zeros((n, 0), np.float32)
        out["meta"] = meta
        return out

    def refresh(self, *, alpha: float | None = None, n_neighbors: int = 10,
                temporal_weight: float | None = None, pca_components: int | None = 30,
                progress: Progress | None = None) -> ProposalRun:
        """Spread the confirmed labels over the window graph; store the result as a run.

        Starts from the previous run's scores (warm start) when the graph is unchanged.
        """
        from labeler.graph import DEFAULT_TEMPORAL_WEIGHT
        from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT, DEFAULT_STAY
        from labeler.spreading import DEFAULT_ALPHA

        t0 = time.perf_counter()
        alpha = DEFAULT_ALPHA if alpha is None else float(alpha)
        if not 0 < alpha < 1:
            raise InputError(f"alpha {alpha} must lie strictly between 0 and 1; give e.g. 0.9")
        tw = DEFAULT_TEMPORAL_WEIGHT if temporal_weight is None else float(temporal_weight)
        gparams = {"n_neighbors": int(n_neighbors), "temporal_weight": tw,
                   "pca_components": None if pca_components is None else int(pca_components)}
        y = self.ledger.class_codes()
        if not (y >= 0).any():
            raise InputError(f"{self.ctx.path}: no confirmed window yet; confirm a few windows of "
                             "each activity first (e.g. `labeler confirm` or the review queue)")
        try:
            W, key, rebuilt = self.graph(gparams, progress)
        except ValueError as exc:
            raise InputError(f"{self.ctx.path}: {exc}") from None
        if progress:
            progress(0.6, "spreading labels")
        cw = float(DEFAULT_CLASSIFIER_WEIGHT)
        stay = float(DEFAULT_STAY)
        # the stored run's meta alone first: with the proposer that made it kept by this process,
        # its arrays (about 10 MB at 100k windows) are not read
        meta = self.ctx.store.blob_meta(LATEST_BLOB)
        same = meta is not None and meta.get("graph_key") == key and meta.get("alpha") == alpha
        init = init_classes = None
        # the proposer that made the stored run, kept by this process: it warm-starts from its
        # own label mass (float64), solves again only the classes whose confirmed windows
        # changed, and keeps the normalized graph (no check and no normalization again); the
        # reference mass is kept with it as the run stored it (float32)
        kept = self.ctx.cache.get("proposer")
        settings = (key, alpha, cw, stay)
        if kept is not None and same and kept[0] == settings and kept[1] == meta.get(
                "run_id") and kept[2].spreader_.label_mass_.shape[0] == y.size:
            proposer, warm, reference = kept[2], True, kept[3]
        else:
            prev = self.latest_arrays()  # meta and arrays of one run, read together
            same = prev is not None and prev["meta"].get("graph_key") == key \
                and prev["meta"].get("alpha") == alpha
            proposer = self.proposer(alpha, cw, key, stay)
            if same and prev["F"].shape[0] == y.size:
                init, init_classes = prev["F"].astype(np.float64), prev["classes"]
            warm = init is not None
            reference = prev["reference"].astype(np.float64) if same and "reference" in prev \
                else None
        self.ctx.cache.pop("proposer", None)  # kept again once the run is stored
        proposer.fit(W, y, init=init, init_classes=init_classes)
        spreader = proposer.spreader_
        if reference is None:
            reference = spreader.reference_mass()
        out = proposer.outputs(y, reference=reference)
        unconf = y < 0
        names = self.ledger.class_names()
        counts = {names[int(c)]: int((y == c).sum()) for c in spreader.classes_}
        summary = {"confirmed": int((~unconf).sum()), "windows": int(y.size),
                   "classes": counts, "proposed": int(unconf.sum()),
                   "mean_confidence": float(out.confidence[unconf].mean()) if unconf.any() else None,
                   "low_support": int((out.support[unconf] < 0.05).sum()),
                   "conflicts": int(((~unconf) & (out.conflict > 0.5)).sum()),
                   "iterations": int(spreader.n_iter_), "warm_start": warm,
                   "graph_rebuilt": bool(rebuilt), "graph_edges": int(W.nnz // 2)}
        params = {"alpha": alpha, **gparams, "solver": spreader.solver, "tol": spreader.tol,
                  "classifier_weight": cw, "stay": stay,
                  "method": "label spreading (Zhou et al. 2004) on a kNN graph with local "
                            "scaling (Zelnik-Manor & Perona 2004)"
                            + (f", times a logistic regression on the confirmed windows' "
                               f"orientation-free features to the power {cw:g}" if cw > 0 else "")
                            + (f", smoothed along each recording by a forward-backward pass "
                               f"(Rabiner 1989) with stay probability {stay:g}" if stay > 0
                               else ""),
                  "graph_key": key}
        stored_reference = np.asarray(reference, dtype=np.float32)
        latest = npz_bytes(dict(
            classes=spreader.classes_, label=out.label, confidence=out.confidence.astype(np.float32),
            margin=out.margin.astype(np.float32), support=out.support.astype(np.float32),
            conflict=out.conflict.astype(np.float32), y=y))
        store = self.ctx.store
        frame_meta = _frame_meta({"graph_key": key, "alpha": alpha})
        summary["seconds"] = round(time.perf_counter() - t0, 3)
        # the run's few MB would make its commit copy the log into the file (the automatic
        # checkpoint): left to Project.checkpoint, which the app's worker calls once the
        # proposals are handed over (the commit is as durable)
        with store.atomic(defer_checkpoint=True):
            run_id = store.add_run("proposals", params, summary, created_by=self.ctx.annotator)
            if store.blob_meta(FRAME_BLOB) != frame_meta:
                # the window order (kept with the run: the queue reads no windows) and the
                # reference mass, written again only when the graph or alpha change
                rid, seq = self.catalog.window_sequence()
                store.put_blob(FRAME_BLOB, npz_bytes(dict(
                    window_id=self.catalog.window_arrays()["id"], recording_id=rid, seq=seq,
                    reference=stored_reference)), frame_meta, run_id=run_id)
            # the label mass per class: a column the fit did not solve again is the kept
            # proposer's as the stored run has it, so that run's blob of it stays
            before = meta.get("F_runs") if warm and meta is not None and kept is not None \
                and proposer is kept[2] else None
            F_runs = {}
            for j, c in enumerate(spreader.classes_):
                c = str(int(c))
                if before is not None and c in before and spreader.unchanged_columns_[j] \
                        and (store.blob_meta(f"{COLUMN_PREFIX}{c}") or {}).get(
                            "run_id") == before[c]:  # (another process may have run since)
                    F_runs[c] = before[c]
                    continue
                F_runs[c] = int(run_id)
                store.put_blob(f"{COLUMN_PREFIX}{c}", npz_bytes(dict(
                    F=spreader.label_mass_[:, j].astype(np.float32))), {"run_id": int(run_id)},
                    run_id=run_id)
            for k in store.blob_keys(COLUMN_PREFIX):  # classes no longer confirmed
                if k[len(COLUMN_PREFIX):] not in F_runs:
                    store.delete_blob(k)
            store.put_blob(LATEST_BLOB, latest,
                           {"run_id": run_id, "graph_key": key, "alpha": alpha,
                            "F_runs": F_runs}, run_id=run_id)
        self.ctx.invalidate("proposals")
        self.ctx.cache["proposer"] = (settings, int(run_id), proposer,
                                      stored_reference.astype(np.float64))
        if progress:
            progress(1.0, "done")
        return ProposalRun(run_id=int(run_id), **summary)

    def table(self) -> pd.DataFrame:
        """Latest proposals: window_id, label (class name), class_id, confidence, margin, support,
        conflict, confirmed (whether the window was confirmed at that run). Empty when none yet."""
        import pandas as pd

        cache = self.ctx.cache
        if "proposals" in cache:
            return cache["proposals"].copy()
        p = self.latest_arrays()
        if p is None:
            return pd.DataFrame(columns=PROPOSAL_COLUMNS)
        df = pd.DataFrame({"window_id": p["window_id"], "class_id": p["label"],
                           "confidence": p["confidence"].astype(np.float64),
                           "margin": p["margin"].astype(np.float64),
                           "support": p["support"].astype(np.float64),
                           "conflict": p["conflict"].astype(np.float64),
                           "confirmed": p["y"] >= 0})
        df.insert(1, "label", df["class_id"].map(self.ledger.class_names()))
        df = df[df["window_id"].isin(self.catalog.windows()["id"])][PROPOSAL_COLUMNS]
        df = df.reset_index(drop=True)
        cache["proposals"] = df
        return df.copy()

    # ------------------------------------------------------------------ review queue
    def review_queue(self, n: int = 50, *, exclude: np.ndarray | None = None,
                     random_state=None) -> pd.DataFrame:
        """:meth:`review_rows` as a table: window_id, reason, score, proposed, confidence,
        recording, start_s."""
        rows = self.review_rows(n, exclude=exclude, random_state=random_state)
        return self.queue_frame(rows)

    @staticmethod
    def queue_frame(rows) -> pd.DataFrame:
        """Rows of a review queue as its table."""
        import pandas as pd

        df = pd.DataFrame(list(rows), columns=QUEUE_COLUMNS)
        return df.astype({"window_id": np.int64, "score": np.float64, "confidence": np.float64,
                          "start_s": np.float64})

    def review_rows(self, n: int = 50, *, exclude: np.ndarray | None = None,
                    random_state=None) -> list[dict]:
        """:meth:`draw_review` with its draws kept at once (see there)."""
        drawn = self.draw_review(n, exclude=exclude, random_state=random_state)
        self.keep_draws(drawn)
        return [dict(r) for r in drawn.rows]

    def queue_mark(self, exclude: np.ndarray | None = None) -> str:
        """The state a review queue is drawn in: the proposal run, the newest label event, the
        windows and the windows left out (an open audit). One state gives one queue."""
        ex = np.unique(np.empty(0, np.int64) if exclude is None else np.asarray(exclude, np.int64))
        return (f"{self.run_id()}:{self.ctx.store.last_event_id()}:{self.catalog.n_windows()}:"
                + hashlib.sha256(ex.astype("<i8").tobytes()).hexdigest()[:12])

    def keep_draws(self, drawn: ReviewDraw) -> None:
        """Keep the random draws of a queue being shown, for the accuracy estimate's weights."""
        if drawn.draws and not self.ctx.store.readonly:
            self.ctx.store.add_queue_draws(drawn.run_id, self.ctx.annotator, drawn.draws)

    def draw_review(self, n: int = 50, *, exclude: np.ndarray | None = None,
                    random_state=None) -> ReviewDraw:
        """Windows to look at next, one dict each: window_id, reason (conflict, disagreement,
        uncertain, unexplored), score, proposed label and its confidence (None and NaN before
        proposals), recording, start_s. Uses the latest proposals; before
        any confirmation it spreads its picks over the graph. ``exclude``: window ids left out
        (drawn into an open audit). Windows are drawn at random (``QUEUE_POWER``, see
        :mod:`labeler.review`; the seed follows the run and the label history unless
        ``random_state`` is given, so one state gives one list) and each draw's probability is
        stored for the accuracy estimate by :meth:`keep_draws` (:meth:`review_rows` at once)."""
        from labeler.review import review_queue as _queue
        from labeler.outputs import WindowOutputs

        if int(n) != n or n < 1:
            raise InputError(f"queue length {n} must be a whole number >= 1")
        if self.catalog.n_windows() < 2:
            raise InputError(f"{self.ctx.path}: the project has fewer than 2 windows; add "
                             "recordings first")
        mark = self.queue_mark(exclude)  # before reading: a change meanwhile makes it stale
        W, key = self.queue_graph(self.graph_params())
        p = self.latest_arrays()
        if p is not None and p["meta"].get("graph_key") == key and "seq" in p:
            # the run's windows are the project's (the key names the recordings and the count)
            ids, rid, seq = p["window_id"], p["recording_id"], p["seq"]
        else:
            ids = self.catalog.window_arrays()["id"]
            rid, seq = self.catalog.window_sequence()
        labeled = np.isin(ids, self.ledger.labeled_ids())
        # a window confirmed while looked at alone (queue or audit) is not raised as a conflict
        # again: the person has seen its signal and the proposal; bulk picks are where slips hide
        looked = np.isin(ids, self.ledger.labeled_ids(("queue", "audit")))
        outputs = None
        if p is not None and p["meta"].get("graph_key") == key and p["window_id"].size == ids.size:
            outputs = WindowOutputs(p["classes"], p["label"], np.zeros((ids.size, 0)),
                                    p["confidence"], p["margin"], p["support"], p["conflict"])
            # a conflict is about the label confirmed at the run; newer confirmations are not
            outputs.conflict = np.where((p["y"] >= 0) & ~looked, p["conflict"], 0.0)
        dis = np.isin(ids, self.ledger.disagreements())
        excl = np.isin(ids, np.empty(0, np.int64) if exclude is None else exclude)
        if random_state is None:  # one draw per state of the labels: asking twice shows one list
            state = f"{None if p is None else p['meta'].get('run_id')}:{self.ctx.store.last_event_id()}"
            random_state = int.from_bytes(hashlib.sha256(state.encode()).digest()[:4], "little")
        seed = random_state
        q = _queue(W, outputs, labeled, rid, seq, n=int(n), disagreement=dis, exclude=excl,
                   sample_power=QUEUE_POWER, sample_floor=QUEUE_FLOOR, random_state=seed,
                   symmetric=True)  # build_graph's graphs are symmetric
        drawn = q.pool > 1  # drawn by chance, not shown first by rule
        run = None if p is None else p["meta"].get("run_id")
        draws = tuple((int(w), float(pr), int(m)) for w, pr, m in
                      zip(ids[q.index[drawn]], q.probability[drawn], q.pool[drawn]))
        names = self.ledger.class_names()
        recordings = {r["id"]: r["name"] for r in self.ctx.store.recordings()}
        starts = self.ctx.store.window_starts(ids[q.index].tolist())  # the shown windows only
        rows = []
        for k, i in enumerate(q.index):
            rows.append({
                "window_id": int(ids[i]), "reason": str(q.reason[k]), "score": float(q.score[k]),
                "proposed": None if outputs is None else names.get(int(outputs.label[i])),
                "confidence": float("nan") if outputs is None else float(outputs.confidence[i]),
                "recording": recordings[int(rid[i])],
                "start_s": float(starts[int(ids[i])])})
        return ReviewDraw(rows=tuple(rows), draws=draws,
                          run_id=None if run is None else int(run),
                          mark=mark)
