"""Audits and the accuracy estimate: how right the proposals are, and what that rests on.

An audit draws proposed, unconfirmed windows uniformly at random and stores the proposal with the
draw; the annotator labels them without seeing it. The estimate prefers an answered audit and falls
back on cross-validation over the confirmed windows (see :mod:`labeler.quality`).
"""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from labeler.answers import ANSWERS
from labeler.errors import InputError
from labeler.results import AccuracyReport
from labeler.service.catalog import Catalog
from labeler.service.context import Context
from labeler.service.ledger import Ledger
from labeler.service.proposals import GRAPH_PARAMS, Proposals

AUDIT_COLUMNS = ["id", "run_id", "window_id", "position", "drawn_at", "drawn_by",
                 "proposed_class_id", "confidence"]


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
        """Draw a uniformly random sample of ``n`` proposed, unconfirmed windows for an audit.

        The proposal and its confidence are stored with the draw (for the accuracy estimate) and
        are not returned, so the annotator labels the windows without seeing them. Returns
        window_id, position, recording, start_s. Confirm the windows with source "audit".
        """
        from labeler.quality import draw_audit as _draw

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
        pick = _draw(cand, int(n), random_state=seed)
        start = self.ctx.store.add_audit(
            p["meta"]["run_id"], self.ctx.annotator,
            [(ids[i], p["label"][i], p["confidence"][i]) for i in pick])
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
        return df[["window_id", "run_id", "position", "proposed", "confidence", "answer", "correct"]]

    def accuracy_estimate(self, *, cross_validate: bool = True) -> AccuracyReport:
        """Accuracy of the proposals, with what it rests on (see :mod:`labeler.quality`).

        An audit of at least ``quality.MIN_AUDIT`` answered windows is preferred; otherwise
        cross-validation on the confirmed windows (biased; the note says why).
        """
        from labeler.quality import (accuracy_estimate as _choose, audit_accuracy,
                                     cross_validated_accuracy, training_set_estimate)
        from labeler.spreading import LabelSpreader

        run = self.ctx.store.latest_run("proposals")
        if run is None:
            raise InputError(f"{self.ctx.path}: no proposals yet; run `labeler propose` first")
        a = self.status()
        # "not sure" says nothing about the proposal; "mixed" counts against it (the proposal
        # gave one activity to a window that spans two)
        done = a[a["answer"].notna() & (a["answer"] != ANSWERS["unsure"])]
        audit = audit_accuracy(done["proposed"].to_numpy(object), done["answer"].to_numpy(object),
                               done["confidence"].to_numpy(np.float64) if len(done) else None) \
            if len(done) else None
        cv = None
        if cross_validate and (audit is None or audit.n < 30):
            W, _, _ = self.proposals.graph({k: run["params"][k] for k in GRAPH_PARAMS})
            cv = cross_validated_accuracy(W, self.ledger.class_codes(),
                                          spreader=LabelSpreader(alpha=run["params"]["alpha"]))
        est = _choose(audit=audit, cv=cv)
        report = AccuracyReport(run_id=int(run["id"]), estimate=est)
        if audit is not None and est.basis == "audit":
            report.audit_runs = tuple(sorted(set(done["run_id"].astype(int))))
            est.note += f"; drawn from proposal run(s) {', '.join(map(str, report.audit_runs))}"
        p = self.proposals.table()
        lab = self.ledger.labels()
        n_conf = int(len(lab))
        n_prop = int(max(0, len(p) - p["window_id"].isin(lab["window_id"]).sum()))
        if est.basis != "none" and n_conf + n_prop:
            report.training_set = training_set_estimate(est, n_conf, n_prop)
        return report
