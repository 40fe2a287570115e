"""Classes and labels: who said which window is what, when, and the way back (undo).

Every change is one batch of events in one transaction (see :mod:`storage.store`); nothing in the
history is ever deleted.
"""

from __future__ import annotations

import os
import re
from pathlib import Path
from typing import TYPE_CHECKING, Iterable

from labeler.answers import ANSWER_COLOUR, answer_class, is_answer, is_reserved
from labeler.errors import InputError, ProjectError
from labeler.results import ClassCount, ImportReport, ImportRow, LabelBatch, label_batch
from labeler.service.catalog import Catalog
from labeler.service.context import Context
from storage import StoreError

if TYPE_CHECKING:  # pandas is imported where a table is made
    import pandas as pd

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

# Okabe & Ito, "Color universal design: how to make figures and presentations that are friendly to
# colorblind people", 2008: eight colours distinguishable with the common colour-vision deficiencies.
# Ordered so that the first classes get the most distinct (orange, blue, green, purple); the two
# blues and the two oranges are kept apart. Black is last; it is used for the eighth class.
PALETTE = ("#E69F00", "#0072B2", "#009E73", "#CC79A7", "#F0E442", "#56B4E9", "#D55E00", "#000000")
SOURCES = ("map", "timeline", "queue", "audit", "import", "cli", "api", "class-merge", "undo")
_CLASS_NAME = re.compile(r"^[^\x00-\x1f\x7f]{1,60}$")
CLASS_COLUMNS = ["id", "name", "colour", "position", "created_at", "created_by", "retired_at",
                 "merged_into"]
EVENT_COLUMNS = ["id", "at", "annotator", "action", "window_id", "class_id", "source", "batch_id",
                 "note"]


def check_class_name(name: str) -> str:
    name = str(name).strip()
    if not _CLASS_NAME.match(name):
        raise InputError(f"class name {name!r} must be 1-60 printable characters")
    if is_reserved(name):
        raise InputError(f"class name {name!r}: names in parentheses are kept for the answers "
                         "(mixed) and (not sure); choose a name without them")
    return name


class Ledger:
    """Classes, labels, the label history and several annotators' views of one project."""

    def __init__(self, ctx: Context, catalog: Catalog):
        self.ctx = ctx
        self.catalog = catalog

    # ------------------------------------------------------------------ classes
    def classes(self, include_retired: bool = True) -> pd.DataFrame:
        import pandas as pd

        return pd.DataFrame(self.ctx.store.classes(include_retired), columns=CLASS_COLUMNS)

    def class_names(self) -> dict[int, str]:
        """Class id -> name, retired classes included."""
        return {int(r["id"]): r["name"] for r in self.ctx.store.classes()}

    def active_classes(self) -> list[str]:
        """Names of the classes that take confirmations (answers that are not an activity, such
        as "(mixed)", are not among them)."""
        return [r["name"] for r in self.ctx.store.classes(include_retired=False)
                if not is_answer(r["name"])]

    def add_class(self, name: str, colour: str | None = None) -> int:
        name = check_class_name(name)
        if colour is None:
            used = len(self.ctx.store.classes())
            colour = PALETTE[used % len(PALETTE)]
        if not re.fullmatch(r"#[0-9A-Fa-f]{6}", colour):
            raise InputError(f"colour {colour!r} is not a #RRGGBB colour; give e.g. #0072B2")
        try:
            return self.ctx.store.add_class(name, colour, self.ctx.annotator)
        except StoreError as exc:
            raise InputError(str(exc)) from None

    def class_id(self, name: str, *, create: bool = False, allow_retired: bool = False) -> int:
        row = self.ctx.store.class_by_name(str(name).strip())
        if row is None:
            if create:
                return self.add_class(name)
            known = ", ".join(self.active_classes()) or "none yet"
            raise InputError(f"no class {name!r}; classes: {known}; add it with `labeler class add`")
        if row["retired_at"] is not None and not allow_retired:
            if row["merged_into"] is not None:
                into = self.class_name(row["merged_into"])
                raise InputError(f"class {row['name']!r} was merged into {into!r}; use {into!r}")
            raise InputError(f"class {row['name']!r} is retired; it takes no new confirmations")
        return int(row["id"])

    def class_name(self, class_id: int) -> str:
        return str(self.class_names()[int(class_id)])

    def rename_class(self, old: str, new: str) -> None:
        _not_an_answer(old, "renamed")
        cid = self.class_id(old, allow_retired=True)
        new = check_class_name(new)
        try:
            self.ctx.store.rename_class(cid, new, self.ctx.annotator)
        except StoreError as exc:
            raise InputError(str(exc)) from None

    def recolour_class(self, name: str, colour: str) -> None:
        cid = self.class_id(name, allow_retired=True)
        if not re.fullmatch(r"#[0-9A-Fa-f]{6}", str(colour)):
            raise InputError(f"colour {colour!r} is not a #RRGGBB colour; give e.g. #0072B2")
        self.ctx.store.set_class_colour(cid, str(colour), self.ctx.annotator)

    def retire_class(self, name: str) -> None:
        _not_an_answer(name, "retired")
        self.ctx.store.retire_class(self.class_id(name), self.ctx.annotator)

    def merge_classes(self, source: str, target: str) -> LabelBatch:
        """Move every label of ``source`` to ``target`` (one batch), then retire ``source``.

        The windows keep their history: the move is a batch of events of its own (no batch when no
        window carried the class: ``batch_id`` None).
        """
        store = self.ctx.store
        _not_an_answer(source, "merged")
        _not_an_answer(target, "merged")
        src = self.class_id(source)
        dst = self.class_id(target)
        if src == dst:
            raise InputError(f"cannot merge class {source!r} into itself; give two classes")
        with store.atomic():
            rows = [(w, who) for w, who, c in store.annotations() if c == src]
            changes = [(w, dst) for w, _ in rows]
            batch = None
            if rows:
                batch = store.apply_batch(
                    self.ctx.annotator, "merge", "class-merge", changes,
                    note=f"merged {source} into {target}", per_annotator=[who for _, who in rows])
            store.retire_class(src, self.ctx.annotator, merged_into=dst)
        return label_batch(batch, "merge", changes)

    # ------------------------------------------------------------------ labels
    def confirm(self, window_ids: Iterable[int], class_name: str, *, source: str = "api",
                note: str | None = None, create_class: bool = False) -> LabelBatch:
        """Confirm windows as one class: one batch of events."""
        if is_reserved(str(class_name).strip()):
            raise InputError(f"{class_name!r} is an answer, not a class; give it with "
                             "`labeler answer` (Project.answer): mixed or unsure")
        ids = self.check_window_ids(window_ids)
        if source not in SOURCES:
            raise InputError(f"unknown source {source!r}; use one of {', '.join(SOURCES)}")
        cid = self.class_id(class_name, create=create_class)
        changes = [(int(w), cid) for w in ids]
        batch = self.ctx.store.apply_batch(self.ctx.annotator, "confirm", source, changes,
                                           note=note)
        return label_batch(batch, "confirm", changes)

    def answer(self, window_ids: Iterable[int], answer: str, *, source: str = "api",
               note: str | None = None) -> LabelBatch:
        """Answer windows with "mixed" (the window spans activities) or "unsure" (cannot tell):
        one batch of events, like a confirmation (see :mod:`labeler.answers`). The answer is
        kept out of proposals and of the training set, and the windows leave the review queue."""
        name = answer_class(answer)
        ids = self.check_window_ids(window_ids)
        if source not in SOURCES:
            raise InputError(f"unknown source {source!r}; use one of {', '.join(SOURCES)}")
        store = self.ctx.store
        with store.atomic():
            row = store.class_by_name(name)
            cid = store.add_class(name, ANSWER_COLOUR, self.ctx.annotator) if row is None \
                else int(row["id"])
            changes = [(int(w), cid) for w in ids]
            batch = store.apply_batch(self.ctx.annotator, "answer", source, changes, note=note)
        return label_batch(batch, "answer", changes)

    def answered(self) -> np.ndarray:
        """Ids of windows whose current label is an answer (mixed, not sure), sorted."""
        lab = self.labels()
        return np.sort(lab.loc[lab["class"].map(is_answer).astype(bool), "window_id"]
                       .to_numpy(np.int64))

    def withdraw(self, window_ids: Iterable[int], *, source: str = "api",
                 note: str | None = None) -> LabelBatch:
        """Withdraw this annotator's labels of the windows (one batch)."""
        ids = self.check_window_ids(window_ids)
        changes = [(int(w), None) for w in ids]
        batch = self.ctx.store.apply_batch(self.ctx.annotator, "withdraw", source, changes,
                                           note=note)
        return label_batch(batch, "withdraw", changes)

    def check_window_ids(self, window_ids: Iterable[int]) -> list[int]:
        try:
            ids = sorted({int(w) for w in window_ids})
        except (TypeError, ValueError):
            raise InputError("window ids must be whole numbers; list them like 12 13 14") from None
        if not ids:
            raise InputError("no windows given; select or list at least one window")
        known = self.catalog.windows()["id"].to_numpy()
        if known.size == 0:
            raise InputError(f"{self.ctx.path}: the project has no windows yet; add recordings "
                             "first with `labeler add`")
        missing = np.setdiff1d(ids, known)
        if missing.size:
            raise InputError(f"window {int(missing[0])} is not in the project (window ids run from "
                             f"{int(known.min())} to {int(known.max())}); give ids in that range")
        return ids

    def undo(self, batch_id: str | None = None) -> LabelBatch:
        """Undo a batch (default: this annotator's last one not yet undone) by appending events.

        Each window touched by the batch gets back the label it had before the batch, unless its label
        has changed since (a later batch set another class): then the later change stands and the window
        is left alone. ``batch_id`` may be the first characters of an id when they name one batch.
        """
        store, me = self.ctx.store, self.ctx.annotator
        with store.atomic():
            if batch_id is None:
                target = store.last_undoable_batch(me)
                if target is None:
                    raise InputError(f"nothing to undo for annotator {me!r}")
            else:
                target = store.batch(self.find_batch(batch_id))
                if target["undone_by"] is not None:
                    raise InputError(f"batch {target['id']} was undone already (by "
                                     f"{target['undone_by']})")
            changes, whose = [], []
            for ev in store.batch_events(target["id"]):
                now = store.annotation(ev["window_id"], ev["annotator"])
                now_class = None if now is None else now["class_id"]
                if now_class != ev["class_id"]:  # changed since; the later change stands
                    continue
                before = store.state_before(ev["id"], ev["window_id"], ev["annotator"])
                changes.append((ev["window_id"], before))
                whose.append(ev["annotator"])
            batch = store.apply_batch(me, "undo", "undo", changes,
                                      note=f"undo of batch {target['id']}", undoes=target["id"],
                                      per_annotator=whose)
        return label_batch(batch, "undo", changes, undoes=target["id"])

    def find_batch(self, batch_id: str) -> str:
        """The full id of the batch whose id is or starts with ``batch_id``."""
        batch_id = str(batch_id).strip()
        if self.ctx.store.batch(batch_id) is not None:
            return batch_id
        full = [b["id"] for b in self.ctx.store.batches() if b["id"].startswith(batch_id)]
        if len(full) == 0:
            raise InputError(f"no batch {batch_id!r}; list batches with `labeler history`")
        if len(full) > 1:
            raise InputError(f"batch {batch_id!r}: matches {len(full)} batches; give more of the id")
        return full[0]

    def labels(self) -> pd.DataFrame:
        """Current label of every labeled window: window_id, class, class_id, annotator, at, source."""
        import pandas as pd

        rows = self.ctx.store.current_labels()
        df = pd.DataFrame(rows, columns=["window_id", "class_id", "annotator", "at", "source"])
        df.insert(1, "class", df["class_id"].map(self.class_names()))
        return df

    def label_vector(self) -> tuple[np.ndarray, list[str]]:
        """(y, class names): y[i] is the index into class names of window i's current label, -1 when
        unlabeled or answered (mixed, not sure: not an activity); rows in window-id order. Class
        names are the active classes plus any retired class that still carries labels."""
        import pandas as pd

        w = self.catalog.windows()
        lab = self.labels()
        lab = lab[~lab["class"].map(is_answer).astype(bool)]
        names = self.active_classes()
        for c in lab["class"].unique():
            if c not in names:
                names.append(c)
        index = {c: i for i, c in enumerate(names)}
        y = np.full(len(w), -1, dtype=np.int64)
        pos = pd.Index(w["id"]).get_indexer(lab["window_id"])
        y[pos] = lab["class"].map(index).to_numpy()
        return y, names

    def class_codes(self) -> np.ndarray:
        """Current label of every window as its class id (stable across runs), -1 unlabeled or
        answered (what :meth:`label_vector` gives, each name taken to the id of that name; read
        as arrays, without the window table)."""
        ids = self.catalog.window_arrays()["id"]  # sorted: window-id order
        y = np.full(ids.size, -1, dtype=np.int64)
        rows = self.ctx.store.current_labels()
        if not rows:
            return y
        names = self.class_names()
        by_name = {str(n): int(i) for i, n in names.items()}
        code = {c: -1 if is_answer(names[c]) else by_name[str(names[c])]
                for c in {int(r[1]) for r in rows}}
        wid = np.fromiter((r[0] for r in rows), dtype=np.int64, count=len(rows))
        pos = np.searchsorted(ids, wid)
        if not (pos < ids.size).all() or not np.array_equal(ids[np.minimum(pos, ids.size - 1)],
                                                             wid):
            raise ProjectError(f"{self.ctx.path}: a current label names a window the project "
                               "does not have; the file is damaged, restore it from a backup")
        y[pos] = np.fromiter((code[int(r[1])] for r in rows), dtype=np.int64, count=len(rows))
        return y

    def history(self, *, annotator: str | None = None, class_name: str | None = None,
                source: str | None = None, since: str | None = None,
                until: str | None = None, batch_id: str | None = None) -> pd.DataFrame:
        """Label events matching every filter given, oldest first: id, at, annotator (whose label
        the event set), action, window_id, class_id, class, source, batch_id, note, by (who acted:
        differs from annotator for undo and class merges)."""
        import pandas as pd

        rows = self.history_rows(annotator=annotator, class_name=class_name, source=source,
                                 since=since, until=until, batch_id=batch_id)
        columns = EVENT_COLUMNS[:6] + ["class"] + EVENT_COLUMNS[6:] + ["by"]
        return pd.DataFrame(rows, columns=columns)

    def history_rows(self, *, annotator: str | None = None, class_name: str | None = None,
                     source: str | None = None, since: str | None = None,
                     until: str | None = None, batch_id: str | None = None) -> list[dict]:
        """:meth:`history` as a list of dicts, one per event (class and by None when unknown)."""
        cid = None if not class_name else self.class_id(class_name, allow_retired=True)
        rows = self.ctx.store.events(annotator=annotator or None, class_id=cid,
                                     source=source or None, since=since or None,
                                     until=until or None, batch_id=batch_id or None)
        names = self.class_names()
        by = {b["id"]: b["annotator"] for b in self.ctx.store.batches()}
        for r in rows:
            r["class"] = names.get(r["class_id"])
            r["by"] = by.get(r["batch_id"])
        return rows

    def class_log(self, annotator: str | None = None) -> pd.DataFrame:
        """Changes of classes, oldest first: at, annotator (who), action (add, rename, colour,
        merge, retire), class_id, class (its name now), detail (a dict; a merge names the class
        merged into by name under "into")."""
        import json

        import pandas as pd

        names = self.class_names()
        rows = []
        for r in self.ctx.store.class_log():
            if annotator is not None and r["annotator"] != annotator:
                continue
            detail = json.loads(r["detail"] or "{}")
            if "merged_into" in detail:
                into = detail["merged_into"]
                detail = {"into": names.get(into, into)} if into is not None else {}
            rows.append({"at": r["at"], "annotator": r["annotator"], "action": r["action"],
                         "class_id": r["class_id"], "class": names.get(r["class_id"]),
                         "detail": detail})
        return pd.DataFrame(rows, columns=["at", "annotator", "action", "class_id", "class",
                                           "detail"])

    # ------------------------------------------------------------------ interval import
    def import_intervals(self, path: str | os.PathLike, *, dry_run: bool = False,
                         create_classes: bool = True, tz: str | None = None) -> ImportReport:
        """Confirm the windows inside each interval of an interval-label file (source "import").

        One batch per annotator named in the file (rows without one are this annotator's). With
        ``dry_run`` nothing is written; the report says what would change. Windows take an interval's
        label by the majority rule of :mod:`labeler.importing`; start and end may be clock times
        (``tz`` is the zone of those written without one).
        """
        from labeler import importing

        self.ctx.refuse_own_file(path)
        recs = self.catalog.recordings()
        intervals = importing.read_intervals(path, tz=tz, start_times={
            n: (t if isinstance(t, str) else None) for n, t in zip(recs["name"], recs["start_time"])})
        importing.check_recordings(intervals, dict(zip(recs["name"], recs["n_samples"] / recs["rate"])),
                                   path)
        known = list(self.classes()["name"])
        new_classes = importing.new_class_names(intervals, known)
        if new_classes and not create_classes:
            raise InputError(f"{path}: unknown class {new_classes[0]!r}; add it first or allow new "
                             "classes")
        by_lower = {c.lower(): c for c in known}
        for iv in intervals:
            if iv.label.lower() in by_lower:
                self.class_id(by_lower[iv.label.lower()])  # refuses retired classes, naming them
        names = self.class_names()
        current = {(w, who): names.get(c) for w, who, c in self.ctx.store.annotations()}
        match = importing.match_intervals(intervals, self.catalog.windows(), known, current,
                                          self.ctx.annotator)
        per_who = match.per_annotator
        report = ImportReport(intervals=len(intervals),
                              windows=sum(len(m) for m in per_who.values()),
                              changes=match.changes, relabels=match.relabels,
                              new_classes=new_classes,
                              rows=[ImportRow(**r) for r in match.rows],
                              annotators=sorted(per_who), dry_run=dry_run)
        if dry_run:
            return report
        with self.ctx.store.atomic():
            for name in new_classes:
                self.add_class(name)
            ids_by_name = {n: int(i) for i, n in self.class_names().items()}
            for who, m in per_who.items():
                if not m:
                    continue
                changes = [(w, ids_by_name[c]) for w, c in sorted(m.items())]
                batch = self.ctx.store.apply_batch(who, "confirm", "import", changes,
                                                   note=f"imported from {Path(path).name}")
                report.batches.append(label_batch(batch, "confirm", changes))
        return report

    # ------------------------------------------------------------------ summaries
    def counts(self) -> pd.DataFrame:
        """Confirmed windows per class (all classes, retired ones included): class, confirmed,
        retired."""
        import pandas as pd

        rows = [(c.name, c.confirmed, c.retired) for c in self.class_counts()]
        return pd.DataFrame(rows, columns=["class", "confirmed", "retired"]).astype(
            {"confirmed": int, "retired": bool})

    def label_annotators(self) -> list[str]:
        """Who set the current labels, sorted."""
        return self.ctx.store.label_annotators()

    def class_counts(self) -> list[ClassCount]:
        """Windows whose current label is each class (all classes, retired ones included, in
        the classes' order)."""
        per_class = self.ctx.store.label_counts()
        return [ClassCount(r["name"], int(per_class.get(r["id"], 0)), r["retired_at"] is not None)
                for r in self.ctx.store.classes()]

    # ------------------------------------------------------------------ several annotators
    def annotations(self) -> pd.DataFrame:
        """Every annotator's current label of every window they labeled: window_id, annotator,
        class_id, label."""
        import pandas as pd

        df = pd.DataFrame(self.ctx.store.annotations(),
                          columns=["window_id", "annotator", "class_id"])
        df["label"] = df["class_id"].map(self.class_names())
        return df

    def disagreements(self) -> np.ndarray:
        """Ids of windows whose annotators' current labels differ (for the review queue),
        sorted."""
        seen: dict[int, set] = {}
        for window_id, _who, class_id in self.ctx.store.annotations():
            if class_id is not None:
                seen.setdefault(int(window_id), set()).add(int(class_id))
        return np.array(sorted(w for w, c in seen.items() if len(c) > 1), dtype=np.int64)

    def labeled_ids(self, sources: Iterable[str] | None = None) -> np.ndarray:
        """Ids of the windows with a current label (set through one of ``sources``, when
        given), sorted."""
        keep = None if sources is None else set(sources)
        return np.array([r[0] for r in self.ctx.store.current_labels()
                         if keep is None or r[4] in keep], dtype=np.int64)

    def agreement(self) -> dict:
        """Agreement between annotators on the windows several of them labeled: pairwise confusion
        tables and Cohen's kappa, Fleiss' kappa over windows all of three or more labeled
        (see :mod:`labeler.agreement`)."""
        from labeler.agreement import agreement_report

        return agreement_report(self.annotations())


def _not_an_answer(name: str, what: str) -> None:
    if is_answer(str(name).strip()):
        raise InputError(f"{name!r} is an answer (mixed, not sure), not a class; it cannot be "
                         f"{what}")
