"""Export: read a consistent snapshot of a project and hand it to :mod:`labeler.exporting`."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Sequence

import numpy as np

import labeler
from labeler import exporting
from labeler.answers import is_answer
from labeler.errors import InputError, ProjectError
from labeler.results import ExportReport
from labeler.service.audits import Audits
from labeler.service.catalog import Catalog
from labeler.service.context import Context
from labeler.service.ledger import Ledger
from labeler.service.proposals import Proposals


class Exporter:
    """Writes the training set of one project."""

    def __init__(self, ctx: Context, catalog: Catalog, ledger: Ledger, proposals: Proposals,
                 audits: Audits):
        self.ctx = ctx
        self.catalog = catalog
        self.ledger = ledger
        self.proposals = proposals
        self.audits = audits

    def export(self, folder: str | os.PathLike, *, fmt: str = "csv", confirmed_only: bool = False,
               min_confidence: float | None = None, classes: Sequence[str] | None = None,
               overwrite: bool = False, features: bool = False,
               signal: bool = False, include_answers: bool = False) -> ExportReport:
        """Write ``windows.<fmt>``, ``segments.<fmt>`` and ``manifest.json`` to ``folder``, each file
        atomically, the manifest last (see :mod:`labeler.exporting`); with ``features`` the window
        rows carry their features, with ``signal`` the window signals go to ``signals.npz``.
        Windows answered "mixed" or "not sure" are left out unless ``include_answers`` (then they
        carry the answer as label)."""
        from dataclasses import replace

        from storage.store import utc_now

        targets, classes = exporting.check_request(
            folder, fmt=fmt, min_confidence=min_confidence, classes=classes,
            known_classes=self.ledger.classes()["name"], overwrite=overwrite, signal=signal)
        inputs = self.snapshot(include_answers=include_answers)
        if features:
            inputs = replace(inputs, features=self.catalog.features())
        if signal:
            inputs = replace(inputs, signal_of=lambda name: self.catalog.signal(name)[1])
        return exporting.write_training_set(
            inputs, targets, fmt=fmt, confirmed_only=confirmed_only,
            min_confidence=min_confidence, classes=classes, tool_version=labeler.__version__,
            created_at=utc_now(), created_by=self.ctx.annotator, where=str(self.ctx.path))

    def snapshot(self, attempts: int = 5, *, include_answers: bool = True
                 ) -> exporting.ExportInputs:
        """Labels, proposals and accuracy estimate that belong together: read again when another
        process changed the history while they were being read."""
        store = self.ctx.store
        for _ in range(attempts):
            before = store.last_event_id()
            windows, labels = self.catalog.windows(), self.ledger.labels()
            proposals, params, accuracy, absent = self._proposals()
            if not include_answers:  # answered windows are not one activity: not for training
                answered = labels["class"].map(is_answer).astype(bool)
                if proposals is not None:
                    proposals = proposals[~proposals["window_id"].isin(
                        labels.loc[answered, "window_id"])].reset_index(drop=True)
                labels = labels[~answered].reset_index(drop=True)
            if store.last_event_id() == before:
                meta = store.meta()
                project = {"file": Path(self.ctx.path).name, "project_id": meta.get("project_id"),
                           "schema_version": int(meta.get("schema_version", 0)),
                           "created_with": meta.get("tool_version"), "as_of_event": before}
                return exporting.ExportInputs(
                    windows=windows, labels=labels, proposals=proposals, proposal_params=params,
                    accuracy=accuracy, accuracy_absent=absent,
                    recordings=self.catalog.recordings(), classes=store.classes(),
                    project=project, feature_set_version=self.catalog.feature_set_version,
                    window_length_s=self.catalog.window_length_s,
                    window_step_s=self.catalog.window_step_s)
        raise ProjectError(f"{self.ctx.path}: labels kept changing while the export read them; "
                           "try again when the other annotators pause")

    def _proposals(self):
        """(proposals, run parameters, accuracy estimate, why the estimate is absent). The
        proposals' confidence is the calibrated one when the estimate has a calibration."""
        df = self.proposals.table()
        if len(df) == 0:
            return None, None, None, "no proposals in this project yet"
        prop = df.loc[df["label"].notna(), ["window_id", "label", "confidence", "margin"]]
        run = self.ctx.store.latest_run("proposals")
        params = None if run is None else {"run_id": run["id"], "created_at": run["created_at"],
                                            "created_by": run["created_by"], **run["params"]}
        try:
            report = self.audits.accuracy_estimate()
        except InputError as exc:  # e.g. recordings added since the last proposals
            return prop.reset_index(drop=True), params, None, str(exc)
        acc = report.as_dict()
        if report.calibration:
            from labeler.estimate import calibrate

            prop = prop.assign(confidence=calibrate(prop["confidence"].to_numpy(np.float64),
                                                    report.calibration))
            acc["confidence_column"] = ("calibrated: the estimated probability that the proposed "
                                        "label is right")
        else:
            acc["confidence_column"] = ("the spreading's own score, not calibrated (no accuracy "
                                        "figure yet)")
        return prop.reset_index(drop=True), params, acc, None
