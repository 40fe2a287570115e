"""Audits and the accuracy estimate: how right the proposals are, and what that rests on.

An audit draws proposed, unconfirmed windows at random within bands of confidence (stratified) and
stores the proposal, its band and the band's size with the draw; the annotator labels them without
seeing it. The estimate (:mod:`labeler.estimate`) is computed once per proposal run and stored with
it: time-blocked cross-validation of the confirmed windows (answers the review queue drew at random
weighted by their probability), the confidence calibrated on it, and the answered audit combined
into one headline.
"""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd

from labeler.answers import ANSWERS
from labeler.errors import InputError
from labeler.exporting import json_ready
from labeler.results import AccuracyReport
from labeler.service.catalog import Catalog
from labeler.service.context import Context
from labeler.service.ledger import Ledger
from labeler.service.proposals import GRAPH_PARAMS, Proposals

AUDIT_COLUMNS = ["id", "run_id", "window_id", "position", "drawn_at", "drawn_by",
                 "proposed_class_id", "confidence", "stratum", "stratum_size"]
ESTIMATE_BLOB = "proposals/estimate"


class Audits:
    """Audit draws, their answers and the accuracy estimate of one project."""

    def __init__(self, ctx: Context, catalog: Catalog, ledger: Ledger, proposals: Proposals):
        self.ctx = ctx
        self.catalog = catalog
        self.ledger = ledger
        self.proposals = proposals

    def open_windows(self) -> np.ndarray:
        """Windows drawn into an audit and not answered yet."""
        lab = set(self.ledger.labels()["window_id"].tolist())
        live = set(self.catalog.windows()["id"].tolist())
        return np.array(sorted((set(self.ctx.store.audited_window_ids()) & live) - lab),
                        dtype=np.int64)

    def draw(self, n: int = 30, *, random_state=None) -> pd.DataFrame:
        """Draw ``n`` proposed, unconfirmed windows for an audit, at random within bands of
        confidence (:func:`labeler.estimate.draw_stratified_audit`).

        The proposal, its confidence and its band are stored with the draw (for the accuracy
        estimate) and are not returned, so the annotator labels the windows without seeing them.
        Returns window_id, position, recording, start_s (in random order). Confirm the windows
        with source "audit".
        """
        from labeler.estimate import draw_stratified_audit

        if int(n) != n or n < 1:
            raise InputError(f"audit size {n} must be a whole number >= 1; give e.g. 30")
        p = self.proposals.latest_arrays()
        if p is None:
            raise InputError(f"{self.ctx.path}: no proposals yet; run `labeler propose` first")
        w = self.catalog.windows()
        ids = p["window_id"]
        known = np.isin(ids, w["id"].to_numpy())
        labeled = np.isin(ids, self.ledger.labels()["window_id"].to_numpy())
        in_audit = np.isin(ids, self.ctx.store.audited_window_ids())
        cand = known & ~labeled & ~in_audit & (p["support"] > 0)
        if not cand.any():
            raise InputError(f"{self.ctx.path}: no unconfirmed window with a proposal is left to "
                             "audit")
        seed = random_state if random_state is not None else int.from_bytes(os.urandom(4), "little")
        rng = np.random.default_rng(seed)
        pick, stratum, size = draw_stratified_audit(cand, p["confidence"], int(n), random_state=rng)
        order = rng.permutation(pick.size)  # shown in random order, not by band
        pick, stratum, size = pick[order], stratum[order], size[order]
        start = self.ctx.store.add_audit(
            p["meta"]["run_id"], self.ctx.annotator,
            [(ids[i], p["label"][i], p["confidence"][i], h, m)
             for i, h, m in zip(pick, stratum, size)])
        wi = w.set_index("id").loc[ids[pick]]
        return pd.DataFrame({"window_id": ids[pick], "position": start + np.arange(pick.size),
                             "recording": wi["recording"].to_numpy(),
                             "start_s": wi["start_s"].to_numpy()})

    def status(self) -> pd.DataFrame:
        """Every audited window: window_id, run_id, proposed (at draw time), confidence, answer
        (its current label, None while unanswered), correct."""
        df = pd.DataFrame(self.ctx.store.audits(), columns=AUDIT_COLUMNS)
        df = df[df["window_id"].isin(self.catalog.windows()["id"])]  # not of removed recordings
        lab = self.ledger.labels()
        cur = dict(zip(lab["window_id"], lab["class_id"]))
        names = self.ledger.class_names()
        df["answer_class_id"] = df["window_id"].map(cur)
        df["proposed"] = df["proposed_class_id"].map(names)
        df["answer"] = df["answer_class_id"].map(names)
        df["correct"] = np.where(df["answer_class_id"].isna() | (df["answer"] == ANSWERS["unsure"]),
                                 None,
                                 df["answer_class_id"] == df["proposed_class_id"])
        return df[["window_id", "run_id", "position", "proposed", "confidence", "answer", "correct",
                   "stratum", "stratum_size"]]

    def accuracy_estimate(self) -> AccuracyReport:
        """The accuracy estimate of the latest proposal run: the one stored with the run, or
        computed now and stored (once per run; a read-only project computes without storing)."""
        run = self.ctx.store.latest_run("proposals")
        if run is None:
            raise InputError(f"{self.ctx.path}: no proposals yet; run `labeler propose` first")
        got = self.ctx.store.get_blob(ESTIMATE_BLOB)
        if got is not None and got[1].get("run_id") == run["id"]:
            return AccuracyReport.from_dict(json.loads(got[0]))
        report = self.compute(run)
        if not self.ctx.store.readonly:  # read-only: computed, not kept
            data = json.dumps(json_ready(report.as_dict())).encode()
            self.ctx.store.put_blob(ESTIMATE_BLOB, data, {"run_id": int(run["id"])},
                                    run_id=int(run["id"]))
        return report

    def compute(self, run: dict) -> AccuracyReport:
        """The estimate of ``run`` (the latest proposal run; see the module docstring)."""
        from labeler.estimate import (combine, importance_weights, proposal_accuracy,
                                      stratified_accuracy)
        from labeler.quality import audit_accuracy, training_set_estimate
        from labeler.spreading import LabelSpreader

        p = self.proposals.latest_arrays()
        ids = self.catalog.windows()["id"].to_numpy(np.int64)
        if p is None or p["meta"].get("run_id") != run["id"] or not np.array_equal(p["window_id"], ids):
            raise InputError(f"{self.ctx.path}: the windows changed since the last proposals; run "
                             "`labeler propose` again")
        y = p["y"].astype(np.int64)  # the confirmations the run spread
        W, _, _ = self.proposals.graph({k: run["params"][k] for k in GRAPH_PARAMS})
        rid, seq = self.catalog.window_sequence()
        names = self.ledger.class_names()
        active = set(self.ledger.active_classes())
        codes = [c for c, nm in names.items() if nm in active]
        lab = self.ledger.labels()
        draws = pd.DataFrame(self.ctx.store.queue_draws(),
                             columns=["window_id", "run_id", "probability", "pool", "drawn_at",
                                      "drawn_by"])
        by_queue = lab.loc[lab["source"] == "queue", "window_id"]
        draws = draws[draws["window_id"].isin(by_queue)]
        weights = importance_weights(ids, draws["window_id"].to_numpy(np.int64),
                                     draws["probability"].to_numpy(np.float64),
                                     draws["pool"].to_numpy(np.float64))
        conf = p["confidence"].astype(np.float64)
        lb = self.ctx.store.label_batches()
        batch = np.full(ids.size, -1, dtype=np.int64)
        if lb:
            wb = np.array([w for w, _ in lb], dtype=np.int64)
            _, code = np.unique(np.array([b for _, b in lb], dtype=object).astype(str),
                                return_inverse=True)
            pos = np.searchsorted(ids, wb)
            ok = (pos < ids.size) & (ids[np.minimum(pos, ids.size - 1)] == wb)
            batch[pos[ok]] = code[ok]
        cv, cal = proposal_accuracy(
            W, y, conf, recording=rid, seq=seq, weights=weights, batch=batch,
            spreader=LabelSpreader(alpha=run["params"]["alpha"]), init=p["F"].astype(np.float64),
            init_classes=p["classes"], classes=codes, class_names=names, proposed_label=p["label"],
            random_state=int(run["id"]))
        if len(draws):
            cv.note += (f"; {len(draws)} answer(s) the review queue drew at random weighted by "
                        "how likely they were to be drawn")
        # the latest audit with answers, of this run or an earlier one
        a = self.status()
        # "not sure" says nothing about the proposal; "mixed" counts against it (the proposal
        # gave one activity to a window that spans two)
        done = a[a["answer"].notna() & (a["answer"] != ANSWERS["unsure"]) & (a["run_id"] <= run["id"])]
        audit, audit_runs = None, ()
        if len(done):
            last = int(done["run_id"].max())
            d = done[done["run_id"] == last]
            ok = (d["proposed"] == d["answer"]).to_numpy()
            if d["stratum"].notna().all():
                audit = stratified_accuracy(ok, d["stratum"].to_numpy(np.int64),
                                            d["stratum_size"].to_numpy(np.int64))
            else:
                audit = audit_accuracy(d["proposed"].to_numpy(object), d["answer"].to_numpy(object))
            audit.note += f"; of proposal run {last}"
            audit_runs = (last,)
        est = combine([cv, audit]) if audit is not None and cv.basis != "none" else \
            (cv if audit is None else audit)
        report = AccuracyReport(run_id=int(run["id"]), estimate=est, audit_runs=audit_runs)
        proposed = y < 0
        if cal is not None:
            from labeler.estimate import calibrate
            report.calibration = cal.as_dict()
            pc = calibrate(conf[proposed], report.calibration)
            report.expected_wrong = float((1 - pc).sum())
            report.likely_wrong = int((pc < 0.5).sum())
        n_conf, n_prop = int((y >= 0).sum()), int(proposed.sum())
        if est.basis != "none" and n_conf + n_prop:
            report.training_set = training_set_estimate(est, n_conf, n_prop)
        return report

    def calibrated_confidence(self, confidence: np.ndarray) -> np.ndarray | None:
        """The latest run's calibration applied to ``confidence`` (None without a figure)."""
        cal = self.accuracy_estimate().calibration
        if not cal:
            return None
        from labeler.estimate import calibrate
        return calibrate(confidence, cal)
