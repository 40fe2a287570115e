"""Audits and the accuracy estimate: how right the proposals are, and what that rests on.

An audit draws proposed, unconfirmed windows at random within bands of confidence (stratified) and
stores the proposal, its band and the band's size with the draw; the annotator labels them without
seeing it. The estimate (:mod:`labeler.estimate`) is computed once per proposal run and stored with
it: time-blocked cross-validation of the confirmed windows (answers the review queue drew at random
weighted by their probability), the confidence calibrated on it. The answered audit joins into one
headline when the estimate is asked for: each answer the run learned from is scored by proposals
made without it (computed with the run), each answer given since by the run's own proposal, so an
audit keeps measuring the proposals as they improve and its answers count at once. Where the
cross-validation has no figure yet (a class confirmed in one stretch or one action only), the
answered audit alone gives it, and the report says an audit would.
"""

from __future__ import annotations

import json
import os
from typing import TYPE_CHECKING

from labeler.answers import ANSWERS
from labeler.errors import InputError
from labeler.results import AccuracyReport
from labeler.service.catalog import Catalog
from labeler.service.context import Context
from labeler.service.ledger import Ledger
from labeler.service.proposals import GRAPH_PARAMS, Proposals

if TYPE_CHECKING:  # pandas is imported where a table is made
    import pandas as pd

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

AUDIT_COLUMNS = ["id", "run_id", "window_id", "position", "drawn_at", "drawn_by",
                 "proposed_class_id", "confidence", "stratum", "stratum_size"]
ESTIMATE_BLOB = "proposals/estimate"
#: Form of the stored part of the estimate; a part stored in another form is computed again
#: (4: the logistic calibration's Newton steps damped, so a fit that swung is fitted again).
ESTIMATE_FORM = 4
#: Seed of the deal of an audit's answers into held-out folds and of the audit's bootstrap: the
#: same for every proposal run (see :meth:`Audits.compute`).
AUDIT_FOLD_SEED = 0


class Audits:
    """Audit draws, their answers and the accuracy estimate of one project."""

    def __init__(self, ctx: Context, catalog: Catalog, ledger: Ledger, proposals: Proposals):
        self.ctx = ctx
        self.catalog = catalog
        self.ledger = ledger
        self.proposals = proposals

    def open_windows(self) -> np.ndarray:
        """Windows drawn into an audit and not answered yet."""
        named = self.ctx.store.window_names(self.ctx.store.audited_window_ids())
        live = np.array([w for w, (_, _, removed) in named.items() if not removed], dtype=np.int64)
        return np.setdiff1d(live, self.ledger.labeled_ids())

    def draw(self, n: int = 30, *, random_state=None) -> pd.DataFrame:
        """Draw ``n`` proposed, unconfirmed windows for an audit, at random within bands of
        confidence (:func:`labeler.estimate.draw_stratified_audit`).

        The proposal, its confidence and its band are stored with the draw (for the accuracy
        estimate) and are not returned, so the annotator labels the windows without seeing them.
        Returns window_id, position, recording, start_s (in random order). Confirm the windows
        with source "audit".
        """
        import pandas as pd

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
        import pandas as pd

        df = pd.DataFrame(self._audited(), columns=AUDIT_COLUMNS + ["answer_class_id"])
        names = self.ledger.class_names()
        df["proposed"] = df["proposed_class_id"].map(names)
        df["answer"] = df["answer_class_id"].map(names)
        df["correct"] = np.where(df["answer_class_id"].isna() | (df["answer"] == ANSWERS["unsure"]),
                                 None,
                                 df["answer_class_id"] == df["proposed_class_id"])
        return df[["window_id", "run_id", "position", "proposed", "confidence", "answer", "correct",
                   "stratum", "stratum_size"]]

    def accuracy_estimate(self) -> AccuracyReport:
        """The accuracy estimate of the latest proposal run.

        The slow part (cross-validation of the confirmations, the audit answers the run had
        scored without them) is computed once per run and stored with it (a read-only project
        computes without storing); the answered audit joins when asked, so answers given since
        the run count at once, scored against the run's proposals.
        """
        run = self.ctx.store.latest_run("proposals")
        if run is None:
            raise InputError(f"{self.ctx.path}: no proposals yet; run `labeler propose` first")
        got = self.ctx.store.get_blob(ESTIMATE_BLOB)
        if (got is not None and got[1].get("run_id") == run["id"]
                and got[1].get("form") == ESTIMATE_FORM):
            part = json.loads(got[0])
        else:
            part = self.compute(run)
            if not self.ctx.store.readonly:  # read-only: computed, not kept
                from labeler.exporting import json_ready

                data = json.dumps(json_ready(part)).encode()
                self.ctx.store.put_blob(ESTIMATE_BLOB, data,
                                        {"run_id": int(run["id"]), "form": ESTIMATE_FORM},
                                        run_id=int(run["id"]))
        return self._report(run, part)

    def _audited(self) -> list[dict]:
        """Every drawn audit row (as ``Store.audits`` gives it) of a window whose recording is
        in the project, with ``answer_class_id``: the class id of the window's current label
        (None while unanswered). Read without pandas and without the window table."""
        drawn = self.ctx.store.audits()
        if not drawn:
            return []
        named = self.ctx.store.window_names(r["window_id"] for r in drawn)
        cur = {int(w): int(c) for w, c, *_ in self.ctx.store.current_labels()}
        return [{**r, "answer_class_id": cur.get(int(r["window_id"]))} for r in drawn
                if int(r["window_id"]) in named and not named[int(r["window_id"])][2]]

    def _latest_audit(self, run_id: int) -> list[dict]:
        """Answered windows of the latest audit drawn from run ``run_id`` or before ("not sure"
        left out: it says nothing about the proposal), windows of removed recordings left out:
        window_id, run_id, answer (class name), stratum, stratum_size of each, in the order
        drawn. Read without pandas and without the window table (`labeler accuracy` reads it)."""
        names = self.ledger.class_names()
        done = []
        for r in self._audited():
            if int(r["run_id"]) > run_id or r["answer_class_id"] is None:
                continue
            answer = names.get(r["answer_class_id"])
            if answer is None or answer == ANSWERS["unsure"]:
                continue
            done.append({"window_id": int(r["window_id"]), "run_id": int(r["run_id"]),
                         "answer": answer, "stratum": r["stratum"],
                         "stratum_size": r["stratum_size"]})
        if not done:
            return done
        last = max(r["run_id"] for r in done)
        return [r for r in done if r["run_id"] == last]

    def compute(self, run: dict) -> dict:
        """The slow part of the estimate of ``run`` (the latest proposal run; see the module
        docstring): cross-validation of the confirmations (the latest audit's answers left to the
        audit), and the label each audit answer the run learned from gets when it is hidden."""
        import pandas as pd

        from labeler.estimate import audit_held_out, importance_weights, proposal_accuracy

        p = self.proposals.latest_arrays()
        ids = self.catalog.windows()["id"].to_numpy(np.int64)
        if p is None or p["meta"].get("run_id") != run["id"] or not np.array_equal(p["window_id"], ids):
            raise InputError(f"{self.ctx.path}: the windows changed since the last proposals; run "
                             "`labeler propose` again")
        y = p["y"].astype(np.int64)  # the confirmations the run spread
        W, key, _ = self.proposals.graph({k: run["params"][k] for k in GRAPH_PARAMS})
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
        audit = self._latest_audit(int(run["id"]))
        in_audit = np.isin(ids, np.array([r["window_id"] for r in audit], dtype=np.int64)) & (y >= 0)
        # the proposer as the run used it: the held-out folds score the proposals it stored
        spreader = self.proposals.proposer(float(run["params"]["alpha"]),
                                           float(run["params"].get("classifier_weight", 0.0)), key,
                                           float(run["params"].get("stay", 0.0)))
        cv, cal = proposal_accuracy(
            W, y, conf, recording=rid, seq=seq, weights=weights, batch=batch, spreader=spreader,
            init=p["F"].astype(np.float64), init_classes=p["classes"], classes=codes,
            class_names=names, proposed_label=p["label"], random_state=int(run["id"]),
            exclude=in_audit)
        if len(draws) and cv.basis != "none":
            cv.note += (f"; {len(draws)} answer(s) the review queue drew at random weighted by "
                        "how likely they were to be drawn")
        # the answers are dealt into folds the same way for every run (not by the run's id): an
        # answer whose class only the audit holds is scored wrong when the other answers of its
        # class share its fold, so a deal drawn anew per run moved the headline by several points
        # from one confirmation to the next
        held = audit_held_out(W, y, in_audit, recording=rid, seq=seq, spreader=spreader,
                              init=p["F"].astype(np.float64), init_classes=p["classes"],
                              random_state=AUDIT_FOLD_SEED)
        return {"cv": AccuracyReport(run_id=int(run["id"]), estimate=cv,
                                     calibration=None if cal is None else cal.as_dict()).as_dict(),
                "audit_held": {str(int(ids[i])): [int(lab_), float(c_)]
                               for i, lab_, c_ in zip(held.index, held.predicted, held.confidence)}}

    def _report(self, run: dict, part: dict) -> AccuracyReport:
        """The report of ``run`` from its stored part and the audit as answered now."""
        from labeler.quality import (audit_would_narrow, calibrate, training_set_estimate,
                                     with_audit)

        cv = AccuracyReport.from_dict(part["cv"])
        held = {int(k): (int(v[0]), float(v[1])) for k, v in part["audit_held"].items()}
        p = self.proposals.latest_arrays()
        y = p["y"].astype(np.int64)
        ids = p["window_id"].astype(np.int64)
        conf = p["confidence"].astype(np.float64)
        rows, n_held = [], 0  # (correct, confidence, stratum, stratum size)
        # no audit drawn: nothing to read (keeps `labeler accuracy` quick in a large project)
        d = self._latest_audit(int(run["id"]))
        if d:
            pos = np.searchsorted(ids, np.array([r["window_id"] for r in d], dtype=np.int64))
            pos = np.minimum(pos, max(ids.size - 1, 0))
            unconfirmed = {int(r["window_id"]): (int(p["label"][i]), float(conf[i]))
                           for r, i in zip(d, pos) if ids[i] == r["window_id"] and y[i] < 0}
            code = {str(v): int(k) for k, v in self.ledger.class_names().items()}
            for r in d:
                wid = r["window_id"]
                if wid in held:  # the run learned from it: scored by proposals made without it
                    lab_, c_ = held[wid]
                    n_held += 1
                elif wid in unconfirmed:  # answered since the run: the run's own proposal
                    lab_, c_ = unconfirmed[wid]
                else:
                    continue
                # "mixed" counts against the proposal: it gave one activity to a window of two
                right = r["answer"] != ANSWERS["mixed"] and lab_ == code.get(str(r["answer"]), -1)
                rows.append((right, c_, r["stratum"], r["stratum_size"], r["run_id"]))
        audit, audit_cal, audit_runs = None, None, ()
        if rows:
            from labeler.estimate import audit_accuracy

            c, x, st, size, drawn = (np.array(v, dtype=object) for v in zip(*rows))
            if any(v is None or v != v for v in st):  # drawn without bands: one band of all
                st, size = np.zeros(len(rows)), np.full(len(rows), max(int((y < 0).sum()), 1))
            audit, audit_cal = audit_accuracy(c.astype(bool), x.astype(np.float64),
                                              st.astype(np.int64), size.astype(np.int64),
                                              conf[y < 0], random_state=AUDIT_FOLD_SEED)
            audit.note = (f"audit: {len(rows)} window(s) drawn at random within confidence bands "
                          f"from proposal run {int(drawn[0])} and answered blind, scored against "
                          f"proposal run {int(run['id'])}"
                          + (f" ({n_held} of them hidden from it in turn, as it learned from "
                             "them)" if n_held else "")
                          + ", its confidence calibrated on them")
            audit_runs = (int(drawn[0]),)
        est = with_audit(cv.estimate, audit)
        if est.basis == "none":
            est.note += ("; or answer a blind audit of about 30 windows: the figure then rests on "
                         "it")
        report = AccuracyReport(run_id=int(run["id"]), estimate=est, audit_runs=audit_runs,
                                needs_audit=est.basis == "none",
                                audit_advised=audit_would_narrow(est))
        proposed = y < 0
        conf = p["confidence"].astype(np.float64)
        if cv.calibration or (audit_cal is not None and est.basis == "audit"):
            report.calibration = cv.calibration or audit_cal.as_dict()
            pc = calibrate(conf[proposed], report.calibration)
            report.expected_wrong = float((1 - pc).sum())
            report.likely_wrong = int((pc < 0.5).sum())
        elif est.basis != "none":
            report.expected_wrong = float((1 - est.value) * proposed.sum())
        n_conf, n_prop = int((y >= 0).sum()), int(proposed.sum())
        if est.basis != "none" and n_conf + n_prop:
            report.training_set = training_set_estimate(est, n_conf, n_prop)
        return report

    def calibrated_confidence(self, confidence: np.ndarray) -> np.ndarray | None:
        """The latest run's calibration applied to ``confidence`` (None without a figure)."""
        cal = self.accuracy_estimate().calibration
        if not cal:
            return None
        from labeler.quality import calibrate

        return calibrate(confidence, cal)
