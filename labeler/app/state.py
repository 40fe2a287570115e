"""One session's view of a project: per-window arrays the panels draw, and the actions they call.

No Bokeh here: :class:`SessionState` holds numpy arrays in window-id order (the row order of every
per-window array of :class:`labeler.project.Project`) and turns panel actions into Project calls. Each
action returns the rows whose drawing changed, so the document sends only those.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

from labeler.answers import is_answer
from labeler.errors import InputError, LabelerError
from labeler.reduction import principal_components
from labeler.results import AccuracyReport, LabelBatch, ReviewDraw

#: Point sizes on the map (screen pixels): a proposed window's grows with its confidence, from
#: SIZE_MIN at 0 to SIZE_MIN + SIZE_SPAN at 1; a confirmed window is drawn at SIZE_CONFIRMED with an
#: outline; a window with neither at SIZE_NONE. Colour stays the class's own, opaque.
SIZE_MIN, SIZE_SPAN, SIZE_CONFIRMED, SIZE_NONE = 2.5, 5.5, 8.0, 3.0


@dataclass
class QueueItem:
    row: int                      # row in window-id order
    window_id: int
    reason: str = ""
    #: (annotator, class name) of each annotator's current label, for a disagreement
    labels: tuple[tuple[str, str], ...] = ()


@dataclass
class Proposals:
    """Per-window proposals in window-id order; class codes index SessionState.class_names."""

    proposed: np.ndarray          # int32, -1 where nothing is proposed
    confidence: np.ndarray        # float32 in [0, 1]
    support: np.ndarray           # float32 in [0, 1]; low = no confirmed window nearby
    note: str = ""


# ---------------------------------------------------------------------------- reading the project

def read_map(project, n: int) -> tuple[np.ndarray, np.ndarray, str]:
    """(x, y, name of the map) of every window, in window-id order.

    Uses the project's stored 2-D map (t-SNE when there is one, else PCA). A project without a map
    yet gets a plain PCA of its standardized features so the page is never empty.
    """
    try:
        method = project.map_method()
        got = project.map() if method is not None else None
    except LabelerError:
        method, got = None, None
    if got is not None and len(got) == n:
        # in window-id order, like every other per-window array
        got = got.set_index("window_id").reindex(project.windows()["id"].to_numpy())
    xy = _as_xy(got, n)
    if xy is not None:
        return xy[:, 0], xy[:, 1], method
    key = (str(project.path), n)
    if key not in _FALLBACK_MAPS:            # one per served file, not one per session
        X, _ = project.features()
        if X.shape[0] == 0:
            return np.zeros(0, np.float32), np.zeros(0, np.float32), "none"
        _FALLBACK_MAPS.clear()
        _FALLBACK_MAPS[key] = principal_components(X, 2)
    xy = _FALLBACK_MAPS[key]
    return xy[:, 0], xy[:, 1], "pca"


_FALLBACK_MAPS: dict[tuple[str, int], np.ndarray] = {}


def _as_xy(got, n: int) -> np.ndarray | None:
    """The map's x, y in window-id order, or None when it does not cover every window."""
    if got is None:
        return None
    arr = got[["x", "y"]].to_numpy(np.float32)
    if arr.shape != (n, 2) or not np.isfinite(arr).all():
        return None
    return arr


def stored_proposals(project) -> pd.DataFrame | None:
    """Project.proposals(), or None when there are none yet."""
    try:
        df = project.proposals()
    except LabelerError:
        return None
    return df if len(df) else None


@dataclass
class NamedProposals:
    """Proposals of every window in window-id order, classes by name (no session's codes yet):
    what the proposal worker hands to every page open on the file."""

    names: list[str]              # the proposed classes
    label: np.ndarray             # int32 index into names, -1 where nothing is proposed
    confidence: np.ndarray        # float32 in [0, 1]
    support: np.ndarray           # float32 in [0, 1]
    note: str = ""
    #: whether each window was confirmed when the proposals were spread (None: not known)
    confirmed: np.ndarray | None = None

    def coded(self, class_code: dict[str, int]) -> Proposals:
        """The same proposals in a session's class codes (a class it does not know: none)."""
        lut = np.array([class_code.get(c, -1) for c in self.names] + [-1], dtype=np.int32)
        return Proposals(lut[self.label], self.confidence, self.support, self.note)


def read_named_proposals(project, ids: np.ndarray | None = None) -> NamedProposals | None:
    """The project's stored proposals in window-id order (``ids``: the project's window ids, when
    the caller has them), or None when there are none yet."""
    df = stored_proposals(project)
    if df is None:
        return None
    ids = project.windows()["id"].to_numpy() if ids is None else ids
    n = ids.size
    pos = pd.Index(ids).get_indexer(df["window_id"])
    ok = pos >= 0
    labels = df["label"].to_numpy(object)
    known = np.array([isinstance(c, str) for c in labels], dtype=bool)
    codes, names = pd.factorize(pd.Series(np.where(known, labels, None), dtype=object))
    label = np.full(n, -1, np.int32)
    conf = np.zeros(n, np.float32)
    support = np.zeros(n, np.float32)
    label[pos[ok]] = codes[ok]
    conf[pos[ok]] = df["confidence"].to_numpy(np.float32)[ok]
    support[pos[ok]] = df["support"].to_numpy(np.float32)[ok]
    was = None
    if "confirmed" in df and np.unique(pos[ok]).size == n:     # every window has its row
        was = np.zeros(n, bool)
        was[pos[ok]] = df["confirmed"].to_numpy(bool)[ok]
    return NamedProposals([str(c) for c in names], label, np.clip(np.nan_to_num(conf), 0, 1),
                          np.clip(np.nan_to_num(support), 0, 1), confirmed=was)


def read_proposals(project, class_code: dict[str, int], n: int,
                   ids: np.ndarray | None = None) -> Proposals | None:
    """The project's stored proposals in window-id order, or None when there are none yet."""
    got = read_named_proposals(project, ids)
    if got is None or got.label.size != n:
        return None
    return got.coded(class_code)


@dataclass(frozen=True)
class FileLayout:
    """What every page open on one file shares and no label changes: the windows (in window-id
    order), the recordings, the map. Read once per served file (arrays read-only)."""

    key: tuple
    ids: np.ndarray
    index: pd.Index
    rec_names: tuple[str, ...]
    rec_code: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    rec_duration: tuple[float, ...]
    channels: tuple[str, ...]
    x: np.ndarray
    y: np.ndarray
    map_kind: str


_LAYOUTS: dict[str, FileLayout] = {}


def file_layout(project) -> FileLayout:
    """The :class:`FileLayout` of the project's file: read when first asked for, and again only
    when recordings were added or removed or a newer map was stored (two cheap queries)."""
    st = os.stat(project.path)                # opens nothing (a file made anew: another inode)
    key = (st.st_dev, st.st_ino, tuple(project.change_mark()[2:]), project.map_run_id())
    got = _LAYOUTS.get(str(project.path))
    if got is not None and got.key == key:
        return got
    w = project.windows()
    recs = project.recordings()
    ids = w["id"].to_numpy(np.int64)
    x, y, kind = read_map(project, ids.size)
    arrays = {"ids": ids,
              "rec_code": pd.Index(recs["id"]).get_indexer(w["recording_id"]).astype(np.int32),
              "start": w["start_s"].to_numpy(np.float64), "stop": w["stop_s"].to_numpy(np.float64),
              "x": np.asarray(x), "y": np.asarray(y)}
    for a in arrays.values():
        a.flags.writeable = False
    got = FileLayout(key=key, index=pd.Index(ids),
                     rec_names=tuple(str(r) for r in recs["name"]),
                     rec_duration=tuple(float(d) for d in (recs["n_samples"] / recs["rate"]))
                     if len(recs) else (),
                     channels=tuple(recs["channels"].iloc[0]) if len(recs) else (),
                     map_kind=kind, **arrays)
    _LAYOUTS[str(project.path)] = got
    return got


# ------------------------------------------------------------- what the pages of one file share

#: per served file: the current labels and the stored proposals as last read, each with the marks
#: it was read at (read again only when those change)
_SHARED_LABELS: dict[str, tuple[tuple, tuple[np.ndarray, np.ndarray, np.ndarray]]] = {}
_SHARED_PROPOSALS: dict[str, tuple[tuple, NamedProposals | None]] = {}


def _read_only(*arrays: np.ndarray) -> None:
    for a in arrays:
        if a is not None:
            a.flags.writeable = False


def shared_labels(project, layout: FileLayout) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The current label of every labeled window as (rows in window-id order, class ids,
    annotator names), read once for every page open on the file until a label or a class
    changes (``Project.change_mark``)."""
    key = (layout.key, tuple(project.change_mark()[:2]))
    got = _SHARED_LABELS.get(str(project.path))
    if got is not None and got[0] == key:
        return got[1]
    lab = project.labels()
    if len(lab):
        pos = layout.index.get_indexer(lab["window_id"].to_numpy())
        ok = pos >= 0
        value = (pos[ok].astype(np.int64), lab["class_id"].to_numpy(np.int64)[ok],
                 lab["annotator"].astype(str).to_numpy(object)[ok])
    else:
        value = (np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, object))
    _read_only(*value)
    _SHARED_LABELS[str(project.path)] = (key, value)
    return value


def shared_proposals(project, layout: FileLayout | None = None) -> NamedProposals | None:
    """The stored proposals in window-id order with classes by name (None when there are none),
    read once for every page open on the file until a proposal run is stored or a class changes
    (``Project.proposals_run_id``, ``Project.change_mark``). Arrays read-only."""
    layout = file_layout(project) if layout is None else layout
    key = (layout.key, project.proposals_run_id(), project.change_mark()[1])
    got = _SHARED_PROPOSALS.get(str(project.path))
    if got is not None and got[0] == key:
        return got[1]
    value = read_named_proposals(project, layout.ids)
    if value is not None:
        _read_only(value.label, value.confidence, value.support, value.confirmed)
    _SHARED_PROPOSALS[str(project.path)] = (key, value)
    return value


# ---------------------------------------------------------------------------- the session state

class SessionState:
    """Arrays and actions of one app session over an open :class:`Project`."""

    def __init__(self, project):
        self.project = project
        lay = self._layout = file_layout(project)
        self.ids, self.index, self.n = lay.ids, lay.index, lay.ids.size
        self.rec_names, self.rec_code = list(lay.rec_names), lay.rec_code
        self.start, self.stop = lay.start, lay.stop
        self.rec_duration, self.channels = list(lay.rec_duration), list(lay.channels)
        self.confirmed = np.full(self.n, -1, np.int32)
        self.who = np.full(self.n, -1, np.int32)
        self.annotators: list[str] = []
        self.proposals = Proposals(np.full(self.n, -1, np.int32), np.zeros(self.n, np.float32),
                                   np.zeros(self.n, np.float32))
        self.estimate: AccuracyReport | None = None   # the latest, computed off the page
        self.estimate_absent: str | None = None         # or why there is none
        self.reload_classes()
        self.x, self.y, self.map_kind = lay.x, lay.y, lay.map_kind
        self.sync_labels()
        got = shared_proposals(project, lay)
        if got is not None and got.label.size == self.n:
            self.proposals = got.coded(self.class_code)
        self.last_batch: LabelBatch | None = None
        self.queue: list[QueueItem] = []
        self.queue_mode = "review"
        self.queue_pos = 0
        #: the review queue drawn ahead off the page (the proposal worker), shown by the next R
        self.ready_queue: ReviewDraw | None = None

    # -------------------------------------------------------------- classes
    def reload_classes(self) -> None:
        c = self.project.classes()
        self.class_ids = [int(i) for i in c["id"]]
        self.class_names = [str(s) for s in c["name"]]
        self.class_colours = [str(s) for s in c["colour"]]
        # answers (mixed, not sure) are drawn in their colour but get no class button
        self.class_active = [(r is None or r != r) and not is_answer(n)
                             for r, n in zip(c["retired_at"], c["name"])]
        self.class_code = {name: k for k, name in enumerate(self.class_names)}
        self._code_of_id = {cid: k for k, cid in enumerate(self.class_ids)}

    def active_codes(self) -> list[int]:
        """Codes of the active classes, in the order of the class buttons (keys 1-9)."""
        return [k for k, a in enumerate(self.class_active) if a]

    def add_class(self, name: str) -> int:
        name = str(name).strip()
        if not name:
            raise InputError("type a class name first (1-60 printable characters)")
        cid = self.project.add_class(name)
        self.reload_classes()
        return self._code_of_id[int(cid)]

    def rename_class(self, code: int, new: str) -> None:
        self.project.rename_class(self.class_names[code], str(new).strip())
        self.reload_classes()

    def recolour_class(self, code: int, colour: str) -> None:
        self.project.recolour_class(self.class_names[code], colour)
        self.reload_classes()

    def retire_class(self, code: int) -> None:
        self.project.retire_class(self.class_names[code])
        self.reload_classes()

    def merge_class(self, code: int, into: int) -> np.ndarray:
        """Move every label of class ``code`` to ``into`` and retire ``code``; the changed rows."""
        self.project.merge_classes(self.class_names[code], self.class_names[into])
        self.reload_classes()
        return self.sync_labels()

    # -------------------------------------------------------------- labels
    def sync_labels(self) -> np.ndarray:
        """Read the current labels from the project file (shared by the pages of the file: see
        :func:`shared_labels`); return the rows that changed."""
        rows, class_ids, names = shared_labels(self.project, self._layout)
        conf = np.full(self.n, -1, np.int32)
        who = np.full(self.n, -1, np.int32)
        if rows.size:
            ids, inv = np.unique(class_ids, return_inverse=True)
            conf[rows] = np.array([self._code_of_id.get(int(c), -1) for c in ids],
                                  np.int32)[inv.ravel()]
            people, inv = np.unique(names, return_inverse=True)
            for name in people:
                if name not in self.annotators:
                    self.annotators.append(str(name))
            code = {a: i for i, a in enumerate(self.annotators)}
            who[rows] = np.array([code[str(a)] for a in people], np.int32)[inv.ravel()]
        changed = np.flatnonzero((conf != self.confirmed) | (who != self.who))
        self.confirmed, self.who = conf, who
        return changed

    def set_proposals(self, got: Proposals) -> np.ndarray:
        old = self.proposals
        self.proposals = got
        return np.flatnonzero((old.proposed != got.proposed) | (old.confidence != got.confidence)
                              | (old.support != got.support))

    def display_label(self, rows=None) -> np.ndarray:
        """Class code drawn per window: the confirmed one, else the proposed one, else -1."""
        c = self.confirmed if rows is None else self.confirmed[rows]
        p = self.proposals.proposed if rows is None else self.proposals.proposed[rows]
        return np.where(c >= 0, c, p).astype(np.int32)

    def display_size(self, rows=None) -> np.ndarray:
        """Point size per window: confidence by size for proposals, confirmed ones full size."""
        c = self.confirmed if rows is None else self.confirmed[rows]
        p = self.proposals.proposed if rows is None else self.proposals.proposed[rows]
        q = self.proposals.confidence if rows is None else self.proposals.confidence[rows]
        size = np.where(p >= 0, SIZE_MIN + SIZE_SPAN * q, SIZE_NONE)
        return np.where(c >= 0, SIZE_CONFIRMED, size).astype(np.float32)

    def pick_proposals(self, rows) -> list[tuple[int, int]]:
        """(class code or -1 for none, windows) of the proposals among ``rows``, most first."""
        rows = np.asarray(rows, dtype=np.int64)
        codes, n = np.unique(self.proposals.proposed[rows], return_counts=True)
        order = np.argsort(-n, kind="stable")
        return [(int(codes[i]), int(n[i])) for i in order]

    def confirm(self, rows, code: int, source: str) -> np.ndarray:
        rows = np.unique(np.asarray(rows, dtype=np.int64))
        if rows.size == 0:
            raise InputError("nothing selected: pick windows on the map or the timeline, or take a "
                             "queue item, then press a class")
        if not (0 <= code < len(self.class_names)) or not self.class_active[code]:
            raise InputError(f"no active class number {code + 1}; add the class first")
        batch = self.project.confirm(self.ids[rows].tolist(), self.class_names[code],
                                     source=source)
        self.last_batch = batch
        # the batch is now the latest event of its windows, so their current label is ours: no
        # need to read every label back (a file of 100k labels takes a while)
        me = self.project.annotator
        if me not in self.annotators:
            self.annotators.append(me)
        hit = self.index.get_indexer(batch.window_ids)
        hit = hit[hit >= 0]
        who = self.annotators.index(me)
        changed = hit[(self.confirmed[hit] != code) | (self.who[hit] != who)]
        self.confirmed[hit], self.who[hit] = code, who
        return changed

    def answer(self, rows, kind: str, source: str) -> np.ndarray:
        """Answer windows "mixed" (they span activities) or "unsure" (cannot tell): one batch
        (:meth:`Project.answer`); the answer's class is made on first use. The changed rows."""
        rows = np.unique(np.asarray(rows, dtype=np.int64))
        if rows.size == 0:
            raise InputError("nothing to answer: take a queue item (R) or pick windows first")
        batch = self.project.answer(self.ids[rows].tolist(), kind, source=source)
        self.last_batch = batch
        self.reload_classes()
        return self.sync_labels()

    def undo(self) -> np.ndarray:
        self.project.undo()
        return self.sync_labels()

    def answer_codes(self) -> np.ndarray:
        """Codes of the classes that carry an answer (mixed, not sure), not an activity."""
        return np.array([k for k, n in enumerate(self.class_names) if is_answer(n)], np.int32)

    def learned(self) -> np.ndarray:
        """Which windows proposals learn from: confirmed as an activity (an answer is not one)."""
        return (self.confirmed >= 0) & ~np.isin(self.confirmed, self.answer_codes())

    # -------------------------------------------------------------- counts and estimate
    def counts(self) -> list[tuple[int, str, str, int, int]]:
        """(code, name, colour, confirmed, proposed-and-not-confirmed) per class carrying labels or
        active."""
        conf = np.bincount(self.confirmed[self.confirmed >= 0], minlength=len(self.class_names))
        open_ = (self.confirmed < 0) & (self.proposals.proposed >= 0)
        prop = np.bincount(self.proposals.proposed[open_], minlength=len(self.class_names))
        out = []
        for k, name in enumerate(self.class_names):
            if self.class_active[k] or conf[k] or prop[k]:
                out.append((k, name, self.class_colours[k], int(conf[k]), int(prop[k])))
        return out

    def accuracy(self) -> AccuracyReport | None:
        """The latest accuracy estimate (computed off the page, after the proposals)."""
        return self.estimate

    # -------------------------------------------------------------- review queue and audit
    def load_queue(self, mode: str, n: int | None = None) -> list[QueueItem]:
        """Fill the queue from the project: ``review`` (Project.review_queue, 50 items unless
        ``n`` says) or ``audit`` (Project.draw_audit, a random sample within bands of confidence,
        of the size the accuracy note asks for unless ``n`` says)."""
        self.queue_mode = mode
        self.queue_pos = 0
        self.queue = []
        if mode == "review":
            ready, self.ready_queue = self.ready_queue, None
            # drawn ahead: shown (its draws kept now) when nothing changed since, else drawn now
            got = (self.project.show_review_draw(ready) if ready is not None and n is None
                   else self.project.review_queue(50 if n is None else n))
        else:
            got = self.project.draw_audit() if n is None else self.project.draw_audit(n)
        ids = got["window_id"].to_numpy(np.int64)
        reasons = got["reason"].astype(str).tolist() if "reason" in got else [""] * len(ids)
        pos = self.index.get_indexer(ids)
        self.queue = [QueueItem(int(p), int(i), r) for p, i, r in zip(pos, ids, reasons) if p >= 0]
        disputed = {q.window_id for q in self.queue if q.reason == "disagreement"}
        if disputed:
            ann = self.project.annotations()
            ann = ann[ann["window_id"].isin(disputed) & ann["label"].notna()]
            said: dict[int, list[tuple[str, str]]] = {}
            for wid, who, label in zip(ann["window_id"], ann["annotator"], ann["label"]):
                said.setdefault(int(wid), []).append((str(who), str(label)))
            for q in self.queue:
                q.labels = tuple(sorted(said.get(q.window_id, ())))
        return self.queue

    def leave_queue(self) -> None:
        self.queue, self.queue_pos = [], 0

    def current_item(self) -> QueueItem | None:
        if 0 <= self.queue_pos < len(self.queue):
            return self.queue[self.queue_pos]
        return None

    def peek(self) -> QueueItem | None:
        """The item after the current one, if any."""
        nxt = self.queue_pos + 1
        return self.queue[nxt] if 0 <= nxt < len(self.queue) else None

    def advance(self) -> QueueItem | None:
        self.queue_pos += 1
        return self.current_item()


