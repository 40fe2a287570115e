"""Build one app session's document and hold its actions.

:func:`build_document` works on any ``bokeh.document.Document`` (a server session's or a fresh one
in tests) and returns the :class:`LabelerApp` of the session. The panels live in their own modules
(``map_view``, ``signal_view``, ``timeline``, ``side``); the words they show in ``words``; the page's
HTML, CSS and JavaScript in ``templates/`` and ``static/``. Every write goes through
:class:`labeler.project.Project`; proposals are recomputed by :class:`ProposalWorker` in a process and
come back through ``doc.add_next_tick_callback``, so a callback never waits on the spreading.
"""

from __future__ import annotations

import asyncio
import datetime as _dt
import logging
import os
import threading
import time
import traceback
from pathlib import Path
from typing import Callable

import numpy as np
from bokeh.events import DocumentReady, DoubleTap, SelectionGeometry, Tap
from bokeh.layouts import column
from bokeh.models import (ColumnDataSource, CustomJS, Div, InlineStyleSheet, LinearColorMapper,
                          TextInput)

from labeler.app import picking, words
from labeler.app.actions import ANSWER_KINDS, Actions, action
from labeler.app.assets import static, template
from labeler.app.map_view import NONE_COLOUR, MapView
from labeler.app.side import SidePanel
from labeler.app.signal_view import Gallery, SignalView
from labeler.app.state import Proposals, SessionState, read_map
from labeler.app.timeline import TimelineView
from labeler.app.worker import (EstimateUpdate, ProposalWorker, proposals_current,
                                spread_and_estimate)
from labeler.errors import LabelerError
from labeler.project import PALETTE
from labeler.results import ReviewDraw

MAP_CHECK_MS = 5000              # how often an open page looks for a newer map (e.g. t-SNE)
OTHERS_CHECK_MS = 2000           # how often an open page looks for changes made elsewhere
IDLE_S = 1.5                     # the map's source takes changes after a pause this long
FRESH_MAX = 5000                 # more windows labeled than this without a pause: sent at once
PICK_REACH_PX = 8                # a click picks the nearest window within this many pixels
DRAW_BACKENDS = ("webgl", "canvas")
_log = logging.getLogger(__name__)
PENDING_MAX = 8                  # deliveries kept for panels built ahead (see LabelerApp._keep)
STEP_PAUSE_S = 0.01              # a served page's build lets the server's loop run this long per step


def _request(doc):
    ctx = getattr(doc, "session_context", None)
    return getattr(ctx, "request", None) if ctx is not None else None


def _requested_draw(doc) -> str | None:
    """The drawing the page's address asks for (``?draw=webgl|canvas``), if any."""
    request = _request(doc)
    args = getattr(request, "arguments", None) or {}
    got = args.get("draw")
    if not got:
        return None
    value = got[0].decode("ascii", "replace") if isinstance(got[0], bytes) else str(got[0])
    return value if value in DRAW_BACKENDS else None


#: the browser's drawing, remembered by the page (templates/page.html) in a cookie of this name
DRAW_COOKIE = "labeler_draw"


def _remembered_draw(doc) -> str | None:
    """The drawing this browser chose before (the cookie ``templates/page.html`` sets), if any."""
    request = _request(doc)
    try:
        got = (getattr(request, "cookies", None) or {}).get(DRAW_COOKIE)
    except Exception:                   # no cookies with this request
        return None
    return got if got in DRAW_BACKENDS else None


def build_document(doc, project_path: str | os.PathLike, annotator: str | None = None, *,
                   project=None, background: bool = True,
                   draw: str | None = None) -> "LabelerApp | None":
    """Build the app on ``doc`` over the project file; return the session's app object.

    ``project``: an already open :class:`Project` (the session then owns it); by default the file is
    opened once for this session. ``background=False`` computes proposals in the calling thread
    (tests). ``draw``: "webgl" (default) or "canvas" for the map; in a served session the page's
    ``?draw=`` argument decides, else the drawing this browser chose before (a cookie), else
    canvas, and the page then looks at the browser once: with a GPU that draws fast it asks again
    at once with ``?draw=webgl`` before loading BokehJS (``templates/page.html``).
    """
    from labeler.project import Project

    served = _request(doc) is not None
    if draw is None and served:
        # canvas unless the address or this browser's earlier choice says otherwise: WebGL drawn
        # in software (no GPU: headless or remote machines) is several times slower than a canvas
        draw = _requested_draw(doc) or _remembered_draw(doc)
        doc.template_variables["labeler_probe"] = draw is None
        draw = draw or "canvas"
    draw = draw or "webgl"
    if draw not in DRAW_BACKENDS:
        raise ValueError(f"draw must be one of {DRAW_BACKENDS}, got {draw!r}")
    doc.template_variables["labeler_js"] = page_scripts(draw)
    if project is None and getattr(doc, "session_context", None) is not None:
        _build_later(doc, Path(project_path), annotator, background=background, draw=draw)
        return None
    if project is None:
        project = Project.open(project_path, annotator=annotator)
    app = LabelerApp(doc, project, background=background, draw=draw)
    doc.template = template("page.html")
    doc.on_session_destroyed(lambda _ctx: app.close())
    return app


def page_scripts(draw: str) -> str:
    """The page's script tags: BokehJS and its widgets, its WebGL part only when the map is drawn
    with WebGL; not the mathematics (1.8 MB) and tables bundles a Bokeh server page loads by
    default, which the page never uses (its Divs are built with ``disable_math``)."""
    from bokeh.resources import Resources
    from bokeh.server.views.static_handler import StaticHandler

    parts = ["bokeh", "bokeh-gl", "bokeh-widgets"] if draw == "webgl" else ["bokeh",
                                                                            "bokeh-widgets"]
    return Resources(mode="server", root_url="/", components=parts,
                     path_versioner=StaticHandler.append_version).render_js()


def _serialize_ahead(doc) -> None:
    """Serialize ``doc`` now, for the page's request for it (which would otherwise wait while the
    server serializes several hundred models, 0.4-0.6 s): the next ``doc.to_json()`` returns this
    result once, unless the document changed in between (any change drops it)."""
    ahead = {"json": doc.to_json()}
    compute = doc.to_json

    def dropped(_event) -> None:
        ahead.clear()

    def to_json(*args, **kwargs):
        got = ahead.pop("json", None) if not args and not kwargs else None
        doc.remove_on_change(dropped)
        del doc.to_json                 # back to the class's method
        return got if got is not None else compute(*args, **kwargs)

    doc.on_change(dropped)
    doc.to_json = to_json


#: the page's roots, each laid out by the page on its own (``templates/page.html`` places them):
#: the header and caution; the map and signal; the side panel beside them (under them below about
#: 1200 px); the timeline. A root's size change lays out that root alone: a side panel's text
#: that grows a line no longer lays out the page again and repaints every point of the map.
ROOT_NAMES = ("labeler_root", "map_and_signal", "side_root", "labeler_bottom")


def _roots() -> list:
    """The page's roots, empty (each shows a word until the panels go in)."""
    return [column(Div(text="opening the project…" if k == 0 else "", disable_math=True),
                   sizing_mode="stretch_width", name=name)
            for k, name in enumerate(ROOT_NAMES)]


def _page_title(path: Path) -> str:
    return f"labeler · {path.name}"


# ---------------------------------------------------------------------------- panels built ahead
#: per served file (path, annotator): the panels of the next page, built ahead while the server is
#: idle (an asyncio task on the server's loop giving a LabelerApp with no document)
_SPARES: dict[tuple[str, str | None], "asyncio.Future"] = {}
_WANTED: set[tuple[str, str | None]] = set()   # spares a page waits for
_LAST_ACTION = [0.0]             # time.monotonic() of the last action of any page in this process
SPARE_IDLE_S = 3.0               # the spare is built in steps, each once pages were idle this long


def _spare_key(path, annotator) -> tuple[str, str | None]:
    return (str(Path(path).resolve()), annotator)


def make_spare(path, annotator: str | None) -> None:
    """Start building the panels of the next page of ``path`` on the running loop (the server's),
    each step once the pages of this process have been idle for SPARE_IDLE_S: a new page then
    only puts them in its document (:func:`take_spare`)."""
    from labeler.project import Project

    key = _spare_key(path, annotator)
    if key in _SPARES:
        return

    async def idle() -> None:
        while key not in _WANTED and time.monotonic() - _LAST_ACTION[0] < SPARE_IDLE_S:
            await asyncio.sleep(SPARE_IDLE_S / 3)

    async def build():
        await idle()
        project = Project.open(path, annotator=annotator)
        try:
            return await LabelerApp.ahead(project, between=idle)
        except BaseException:
            project.close()
            raise

    _SPARES[key] = asyncio.ensure_future(build())


async def take_spare(path, annotator: str | None) -> "LabelerApp | None":
    """The panels built ahead for the next page of ``path`` (waiting for them when they are being
    built), or None when there are none or the project changed since they were built."""
    key = _spare_key(path, annotator)
    task = _SPARES.pop(key, None)
    if task is None:
        return None
    _WANTED.add(key)                    # a page waits: no more waiting for a pause
    try:
        app = await task
    except Exception:
        _log.warning("panels built ahead for %s failed; building anew", path, exc_info=True)
        return None
    finally:
        _WANTED.discard(key)
    if app.stale():
        app.close()
        return None
    return app


def drop_spare(path, annotator: str | None) -> None:
    """Close the panels built ahead for ``path`` (its server stops); call on the server's loop."""
    task = _SPARES.pop(_spare_key(path, annotator), None)
    if task is None:
        return
    if task.done() and not task.cancelled() and task.exception() is None:
        task.result().close()
    else:
        task.cancel()


def _build_later(doc, path: Path, annotator: str | None, *, background: bool, draw: str) -> None:
    """A served session: the page's HTML goes out at once around empty roots, and the panels go in
    on the server's next turn: the panels built ahead for it when the project has not changed
    since (:func:`make_spare`), else built then, in steps, while the browser fetches and runs
    BokehJS (about half a second); then the document is serialized ahead of the page's request
    for it, which waits for the document's lock, so it always gets the built document. A file that
    cannot be opened is said in the page."""
    from labeler.project import Project

    doc.template = template("page.html")
    doc.title = _page_title(path)
    roots = _roots()
    for r in roots:
        doc.add_root(r)
    box: dict = {}

    async def build():
        project = None
        try:
            app = await take_spare(path, annotator) if background else None
            if app is None:
                project = Project.open(path, annotator=annotator)
                app = await LabelerApp.ahead(project, background=background)
            app.attach(doc, roots, draw)
            box["app"] = app
            await asyncio.sleep(STEP_PAUSE_S)
            _serialize_ahead(doc)
        except Exception as exc:
            if project is not None:
                project.close()
            _log.error("could not build the page for %s", path, exc_info=True)
            text = exc.args[0] if isinstance(exc, LabelerError) and exc.args else repr(exc)
            roots[0].children = [Div(text=words.message(f"cannot show {path.name}: {text}"),
                                     disable_math=True)]
            return
        if background:
            make_spare(path, annotator)             # for the next page of the file

    def closed(_ctx):
        if "app" in box:
            box["app"].close()

    doc.add_next_tick_callback(build)
    doc.on_session_destroyed(closed)


class LabelerApp(Actions):
    """The session: its panels, what is picked, and the actions keys and buttons call."""

    def __init__(self, doc, project, *, background: bool = True, draw: str = "webgl",
                 roots=None):
        served = getattr(doc, "session_context", None) is not None
        for _ in self._steps(project, background=background, draw=draw, served=served):
            pass
        self.attach(doc, roots)

    @classmethod
    async def ahead(cls, project, *, background: bool = True, between=None) -> "LabelerApp":
        """The panels of a served page built with no document yet (:meth:`attach` gives them one),
        in steps between which the server's loop runs (it serves other pages meanwhile);
        ``between``: a coroutine function awaited before each step."""
        app = cls.__new__(cls)
        for _ in app._steps(project, background=background, draw="webgl", served=True):
            if between is not None:
                await between()
            await asyncio.sleep(STEP_PAUSE_S)
        return app

    def stale(self) -> bool:
        """True when the project changed since these panels were built (labels, classes,
        recordings, the map or the proposals): a spare built then shows the project as it was."""
        p = self.project
        return (p.change_mark(), p.map_run_id(), p.proposals_run_id()) != self._built_on

    def _steps(self, project, *, background: bool, draw: str, served: bool):
        self.doc = None
        self.draw = draw
        self.project = project
        self._built_on = (project.change_mark(), project.map_run_id(), project.proposals_run_id())
        self.state = SessionState(project)
        self.background = background
        self.served = served
        self._pending: list[Callable[[], None]] = []
        self._pending_lock = threading.Lock()
        self.target_rows = np.zeros(0, np.int64)
        self.target_source = "map"
        self.focus_row: int | None = None
        self.message = ""
        self.progress_text = ""
        self.closed = False
        self._guard = False                     # set while Python itself changes the selection
        self._last_touch = 0.0                  # when the annotator last picked or pressed a key
        self._held = np.zeros(0, np.int64)      # rows the map's source gets at the next pause
        self._flush_due = False
        self._fresh = np.zeros(0, np.int64)     # rows drawn on the overlay until then
        self.worker = ProposalWorker(project.path, project.annotator,
                                     lambda: dict(self.state.class_code), self.state.n,
                                     deliver=lambda got: self._post(
                                         lambda: self._apply_proposals(got)),
                                     on_start=lambda: self._post(self._worker_started))
        yield from self._build()
        self._map_run = project.map_run_id()
        self._mark = project.change_mark()

    def attach(self, doc, roots=None, draw: str | None = None) -> None:
        """Put the panels in ``doc``: under ``roots`` (the empty roots of :func:`_roots`, already
        in the document) or under roots added to it; ``draw`` changes the map's drawing."""
        project = self.project
        if draw is not None and draw != self.draw:
            self.draw = draw
            self.map.fig.output_backend = draw
            self.header.text = self._header_html()
        for code in self._on_ready:
            doc.js_on_event("document_ready", code)
        if roots is None:
            roots = _roots()
            for r in roots:
                doc.add_root(r)
        with doc.models.freeze():                     # one walk of the document's models
            for r, group in zip(roots, self._parts):  # a served page's roots, empty until now
                r.children = group
        self.root = roots[0]
        doc.title = _page_title(Path(str(project.path)))
        with self._pending_lock:                      # the worker's reader thread posts too
            self.doc = doc
            waiting = self._pending if self.served else []
            if self.served:
                self._pending = []
        if self.served:
            doc.add_periodic_callback(self.check_map, MAP_CHECK_MS)
            doc.add_periodic_callback(self.check_others, OTHERS_CHECK_MS)
            for fn in waiting:                        # what came while there was no page
                self._post(fn)
        if (self.state.confirmed >= 0).any():
            # brings the accuracy estimate too, off the page; in a served session only once the
            # page has loaded, so a page that reloads itself (templates/page.html) costs no run
            # (only the estimate when the stored proposals are of the current confirmations)
            refresh = not proposals_current(project, self.state)
            if not refresh:
                self.progress_text = words.proposals_ready(stored=True)
                self.side.progress.text = self.progress_text
            if self.served:
                doc.on_event(DocumentReady, lambda _e: self.request_proposals(refresh=refresh))
            else:
                self.request_proposals(refresh=refresh)

    # ================================================================== building
    def _build(self):
        """The panels (no document yet); a generator that pauses between panels."""
        s = self.state
        self.css = InlineStyleSheet(css=static("app.css"))
        self.classes_src = ColumnDataSource(self._classes_data())
        self.people_src = ColumnDataSource({"name": list(s.annotators)})
        recs_src = ColumnDataSource({"name": list(s.rec_names)})
        self.class_mapper = LinearColorMapper(**self._class_mapper_args(), low_color=NONE_COLOUR)
        self.map = MapView(s, draw=self.draw, class_mapper=self.class_mapper,
                           per_shape=len(PALETTE), names=self.classes_src,
                           people=self.people_src, recordings=recs_src)
        # a pick is the shape the annotator drew (the server finds the windows in it); a selection
        # of the map's source set from outside (a script) is a pick too
        self.map.fig.on_event(SelectionGeometry, self._on_map_shape)
        # a click within 300 ms of the one before (anywhere) reaches the page as a double tap,
        # not a tap: it picks too, so a quick second click is not lost
        for click in (Tap, DoubleTap):
            self.map.fig.on_event(click, lambda e: self.pick_at(e.x, e.y))
        self.map.src.selected.on_change("indices", lambda _a, _o, new: self.pick_on_map(new))
        yield
        self.signal = SignalView(s.channels, self.project.signal, self.css)
        self.signal.steady.on_change("active", lambda _a, _o, _n: self._draw_gallery())
        yield
        self.gallery = Gallery(s.channels, self.project.signal, self.class_mapper)
        self.gallery.fig.on_event(Tap, lambda e: self.look_at(self.gallery.row_at(e.x, e.y)))
        yield
        self.timeline = TimelineView(s, self.class_mapper)
        self.timeline.fig.on_event(SelectionGeometry, self._on_timeline_box)
        self.timeline.fig.on_event(Tap, lambda e: self.pick_time(e.x, e.y))
        yield
        self.side = SidePanel(self, self.css, self.gallery.fig)
        self.key_bus = TextInput(value="", visible=False, name="key_bus")
        self.key_bus.on_change("value", lambda _a, _o, new: self.press(new.split("|", 1)[0]))
        self.header = Div(text=self._header_html(), sizing_mode="stretch_width", name="header",
                          stylesheets=[self.css])
        self._on_ready = [CustomJS(args={"bus": self.key_bus}, code=static("keys.js")),
                          CustomJS(args={"div": self.header}, code=static("text_in_place.js"))]
        self.caution = Div(text=words.caution(), sizing_mode="stretch_width", name="caution",
                           stylesheets=[self.css])
        self._parts = [[self.header, self.caution], [self.map.bar, self.map.fig, self.signal.box],
                       [self.side.box], [self.timeline.fig, self.key_bus]]
        later = [self.side.drawer, self.gallery.fig]        # join the page when first shown
        for group in self._parts + [later]:                 # the page loads no mathematics bundle
            for part in group:
                for div in part.select({"type": Div}):
                    div.disable_math = True
        yield
        self.side.rebuild_classes(s)
        self._refresh_selection()
        self._refresh_queue()
        self._refresh_counts()
        self._refresh_estimate()
        self.side.progress.text = self.progress_text

    def _header_html(self) -> str:
        s = self.state
        return words.header(Path(str(self.project.path)).name, len(s.rec_names),
                            sum(s.rec_duration) / 3600.0, s.n, s.map_kind, self.draw,
                            self.project.annotator)

    def _classes_data(self) -> dict:
        s = self.state
        return {"name": list(s.class_names), "colour": list(s.class_colours)}

    def _class_mapper_args(self) -> dict:
        cols = list(self.state.class_colours) or [NONE_COLOUR]
        return {"palette": cols, "low": -0.5, "high": len(cols) - 0.5}

    # ================================================================== running callbacks
    def act(self, fn: Callable, *args):
        """Run one action: a refusal (LabelerError) becomes the message line, and so does an
        unexpected failure (with its traceback on the server's stderr). Every callback of the page
        runs through here (methods marked ``@action``, the worker's deliveries, timers)."""
        if self.closed:
            return None
        try:
            return fn(*args)
        except LabelerError as exc:
            self.say(str(exc))
        except Exception as exc:
            traceback.print_exc()
            self.say(f"{getattr(fn, '__name__', 'action')} failed: {type(exc).__name__}: {exc}")
        return None

    def say(self, text: str, *, info: bool = False, undo: bool = False) -> None:
        """The feedback line: a refusal (dark red) or, with ``info``, news; ``undo`` adds the
        way back."""
        self.message = text
        self.side.say(text, info=info, undo=undo)

    # ================================================================== what is picked
    def _set_target(self, rows, source: str, *, select_on_map: bool) -> None:
        """What the keys act on now: a pick (map, timeline; ringed on the map when
        ``select_on_map``) or the queue's item (queue, audit)."""
        self.target_rows = np.unique(np.asarray(rows, dtype=np.int64))
        self.target_source = source
        if self.map.src.selected.indices:       # set from outside: let go of it
            self._guard = True
            try:
                self.map.src.selected.indices = []
            finally:
                self._guard = False
        self.map.show_pick(self.target_rows if select_on_map else self.target_rows[:0])
        self._target_changed(int(self.target_rows[0]) if self.target_rows.size else None)

    def _target_changed(self, focus: int | None) -> None:
        """Say what is picked now; the signal and the gallery (disk reads) follow on the next
        tick, so the page hears of the pick first."""
        self.focus_row = focus
        self.map.set_focus(focus)
        self.timeline.set_focus(focus)
        self._refresh_selection()
        self._refresh_queue()
        self.later(self._show_target)

    def _show_target(self) -> None:
        self.show_signal(self.focus_row)
        self._draw_gallery()

    def later(self, fn: Callable[[], None]) -> None:
        """Run ``fn`` on the session's next tick (after what has changed so far reaches the page);
        at once without a server (tests)."""
        if self.served and self.doc is None:      # built ahead, no page yet
            self._keep(fn)
        elif self.served:
            self.doc.add_next_tick_callback(lambda: self.act(fn))
        else:
            fn()

    @action
    def pick_on_map(self, rows) -> None:
        """Pick these rows of the map (the windows in a drawn shape, or a selection of the map's
        source set from outside); the focus goes to the pick's most central window."""
        if self._guard:
            return
        self.touched()
        self.target_rows = np.unique(np.asarray(rows, dtype=np.int64))
        self.target_source = "map"
        self.map.show_pick(self.target_rows)
        self._target_changed(self._central_row(self.target_rows))

    def _on_map_shape(self, event) -> None:
        """A drag (box) or a lasso on the map ended: pick the windows inside it."""
        g = event.geometry
        if not event.final:
            return
        s = self.state
        if g.get("type") == "rect":
            self.pick_on_map(picking.in_box(s.x, s.y, g["x0"], g["x1"], g["y0"], g["y1"]))
        elif g.get("type") == "poly":
            self.pick_on_map(picking.in_polygon(s.x, s.y, g["x"], g["y"]))

    @action
    def pick_at(self, x: float, y: float) -> None:
        """A click on the map: pick the window under it (within a few pixels), or let go of the
        pick when none is."""
        s = self.state
        ux, uy = self.map.units_per_pixel()
        if not (np.isfinite(ux) and np.isfinite(uy)):     # the page has not said its size yet
            span = max(float(np.ptp(s.x)) if s.n else 1.0, float(np.ptp(s.y)) if s.n else 1.0)
            ux = uy = (span or 1.0) / 800.0
        r = picking.nearest(s.x, s.y, float(x), float(y), ux, uy, PICK_REACH_PX)
        self.pick_on_map([] if r is None else [r])

    def picking(self) -> bool:
        """True while a map or timeline pick holds the keys (the queue, if any, waits)."""
        return self.target_source in ("map", "timeline") and self.target_rows.size > 0

    def _central_row(self, rows: np.ndarray) -> int | None:
        if rows.size == 0:
            return None
        s = self.state
        cx, cy = s.x[rows].mean(), s.y[rows].mean()
        return int(rows[np.argmin((s.x[rows] - cx) ** 2 + (s.y[rows] - cy) ** 2)])

    def select_map(self, rows) -> None:
        """Select rows of the map's source as a script in the page would (tests)."""
        self.map.src.selected.indices = [int(r) for r in rows]

    def _on_timeline_box(self, event) -> None:
        g = event.geometry
        if g.get("type") == "rect" and event.final:
            self.pick_span(g["x0"], g["x1"], g["y0"], g["y1"])

    @action
    def pick_span(self, x0: float, x1: float, y0: float, y1: float) -> None:
        """Pick the windows of the strips a dragged box crosses, within its time span."""
        s = self.state
        a, b = sorted((float(x0), float(x1)))
        if b <= a:
            return
        ids = []
        for k in self.timeline.strips(y0, y1):
            ids.extend(self.project.window_ids_in_span(s.rec_names[k], a, b).tolist())
        rows = s.index.get_indexer(np.asarray(ids, dtype=np.int64))
        self._set_target(rows[rows >= 0], "timeline", select_on_map=True)

    @action
    def pick_time(self, x: float, y: float) -> None:
        r = self.timeline.window_at(x, y)
        if r is not None:
            self._set_target([r], "timeline", select_on_map=True)

    @action
    def clear(self) -> None:
        self._set_target([], "map", select_on_map=True)

    @action
    def escape(self) -> None:
        """Esc: let go of a pick (back to the queue's item, if one waits), else leave the queue."""
        item = self.state.current_item()
        if self.picking() and item is not None:
            self._show_item(item)
        elif self.picking() or item is None:
            self.clear()
        else:
            self.leave_queue()

    @action
    def leave_queue(self) -> None:
        mode = self.state.queue_mode
        self.state.leave_queue()
        self._set_blind(False)
        self.side.queue_mode.active = None
        self._set_target([], "map", select_on_map=True)
        self.say(f"left the {mode}; R brings the review back", info=True)

    @action
    def look_at(self, r: int | None) -> None:
        """Show one window of the pick in the signal view (a gallery click); the pick stays."""
        if r is not None:
            self.show_signal(int(r))

    def _draw_gallery(self) -> None:
        rows = self.target_rows if self.picking() else self.target_rows[:0]
        if rows.size > 1:
            self.side.place_gallery()               # in the page from its first use on
        self.gallery.show(self.state, rows, self.signal.fixed)

    def show_signal(self, r: int | None) -> None:
        self.focus_row = r
        self.map.set_focus(r)
        self.timeline.set_focus(r)
        if r is not None:
            s = self.state
            self.signal.show(s.rec_names[int(s.rec_code[r])], float(s.start[r]),
                             float(s.stop[r]))
            self._retitle_signal()

    def _retitle_signal(self) -> None:
        if self.focus_row is not None:
            self.signal.title.text = words.signal_title(self.state, self.focus_row, self._blind())

    def _blind(self) -> bool:
        """True while an audit runs: nothing on the page may show the proposals."""
        return self.state.queue_mode == "audit" and self.state.current_item() is not None

    def _set_blind(self, blind: bool) -> None:
        """Audit: colour the map by recording, drop proposals from the hover and the timeline;
        restore them after."""
        self.timeline.set_blind(blind)
        self.map.set_blind(blind)

    # ================================================================== refreshing the panels
    def _send_rows(self, rows: np.ndarray) -> None:
        """Send changed rows to the map's source now, with every row still held for a pause (one
        repaint of every point), and redraw the timeline."""
        self._held = np.union1d(self._held, np.asarray(rows, dtype=np.int64))
        self._flush_held(now=True)
        self.later(self.timeline.redraw)

    def _labeled(self, rows: np.ndarray) -> None:
        """Windows just labeled here (a confirm, an answer): drawn at once on the map's overlay
        (only they repaint); the map's source takes them with the new proposals the label change
        asks for, once the annotator pauses (one repaint of every point for both)."""
        rows = np.asarray(rows, dtype=np.int64)
        if rows.size == 0:
            return
        self._held = np.union1d(self._held, rows)
        self.later(self.timeline.redraw)
        if not self.served or self._held.size > FRESH_MAX:
            self._flush_held(now=True)
            return
        self._fresh = np.union1d(self._fresh, rows)
        self.map.show_fresh(self._fresh)

    def _refresh_selection(self) -> None:
        rows, src = self.target_rows, self.target_source
        props = self.state.pick_proposals(rows) if self.picking() else None
        self.side.selection.text = words.selection(self.state, int(rows.size), src, props,
                                                   hidden=self._blind(), rows=rows)
        if self.picking():
            self.gallery.recaption(self.state)

    def _refresh_counts(self) -> None:
        """The counts line and the shelf's per-class counts."""
        self.side.counts.text = words.counts(self.state)
        self.side.class_pad.text = words.class_shelf(self.state)

    def _refresh_estimate(self) -> None:
        s = self.state
        self.side.estimate.text = (words.estimate(s.estimate) if s.estimate is not None
                                   else words.no_estimate(s.estimate_absent))

    def _refresh_queue(self) -> None:
        self.side.show_queue(self.state, self.state.current_item(), paused=self.picking(),
                             answers=tuple(ANSWER_KINDS))

    def _prefetch(self, r: int) -> None:
        s = self.state
        self.signal.prefetch(s.rec_names[int(s.rec_code[r])], float(s.start[r]), float(s.stop[r]))

    @action
    def check_others(self) -> bool:
        """Show what changed in the project file since the last look, in another process (a
        confirmation from the command line, an import, another annotator's page) or this one; True
        when the page changed. Cheap when nothing did: one query of the change mark."""
        if self.closed:
            return False
        mark = self.project.change_mark()
        if mark == self._mark:
            return False
        old, self._mark = self._mark, mark
        s = self.state
        news = []
        if mark[1] != old[1]:
            before = (s.class_names, s.class_colours, s.class_active)
            s.reload_classes()
            if (s.class_names, s.class_colours, s.class_active) != before:
                self._classes_changed()
                news.append("the classes changed")
        changed = s.sync_labels()
        if changed.size:
            self._send_rows(changed)
            self._refresh_counts()
            self._refresh_queue()
            self._retitle_signal()
            self.request_proposals()
            news.append(f"{changed.size} window label{'s' if changed.size != 1 else ''} changed")
        if mark[2:] != old[2:]:
            news.append("recordings were added or removed: reload the page to see them")
        if news:
            self.say("elsewhere: " + "; ".join(news), info=True)
        return bool(news)

    @action
    def check_map(self) -> bool:
        """Show a newer map when one has been stored (the t-SNE made in the background, or
        `labeler map` run meanwhile); True when the map changed."""
        if self.closed:
            return False
        run = self.project.map_run_id()
        if run is None or run == self._map_run:
            return False
        self.project.reread()
        s = self.state
        s.x, s.y, s.map_kind = read_map(self.project, s.n)
        self._map_run = run
        self._flush_held(now=True)            # the overlay's windows move with the rest
        self.map.move_points()
        self.map.set_focus(self.focus_row)
        self.header.text = self._header_html()
        self.say(f"the map was redrawn from a newer {s.map_kind} map", info=True)
        return True

    # ================================================================== background proposals
    def request_proposals(self, refresh: bool = True) -> None:
        """Spread the confirmations again (``refresh``) and estimate the accuracy, off the page."""
        if self.closed:
            return
        if self.background:
            self.worker.request(refresh)
            return
        try:
            spread_and_estimate(self.project, dict(self.state.class_code), self.state.n, refresh,
                                self._apply_proposals, on_start=self._worker_started)
        except Exception as exc:
            self._apply_proposals(exc)

    def _post(self, fn: Callable[[], None]) -> None:
        if self.closed:
            return
        if self.served and self.doc is not None:
            try:
                self.doc.add_next_tick_callback(lambda: self.act(fn))
            except Exception:           # the session is gone
                pass
            return
        self._keep(fn)

    def _keep(self, fn: Callable[[], None]) -> None:
        """Keep ``fn`` for later: until ``drain`` (tests without a server), or until a page takes
        these panels built ahead (at most the last PENDING_MAX: more means a proposal run came,
        and a page then builds its panels anew, see ``stale``)."""
        with self._pending_lock:
            if self.served and self.doc is not None:
                self.doc.add_next_tick_callback(lambda: self.act(fn))
                return
            self._pending.append(fn)
            if self.served:
                del self._pending[:-PENDING_MAX]

    def drain(self, timeout: float = 60.0) -> None:
        """Wait for background work and run what it handed back (tests without a server)."""
        self.worker.wait(timeout)
        while self._pending:
            self.act(self._pending.pop(0))

    def _worker_started(self) -> None:
        self.progress_text = words.proposals_running(_dt.datetime.now().strftime("%H:%M:%S"))
        self.side.progress.text = self.progress_text

    def _apply_proposals(self, got) -> None:
        if isinstance(got, ReviewDraw):              # the next R shows it
            self.state.ready_queue = got
            return
        if isinstance(got, EstimateUpdate):
            self.state.estimate, self.state.estimate_absent = got.estimate, got.absent
            self._refresh_estimate()
            return
        if isinstance(got, Exception):
            self.progress_text = words.proposals_failed(str(got))
            self._send_when_idle(np.zeros(0, np.int64))      # what waits for them goes alone
        elif got is None:
            self.progress_text = words.no_proposals()
            self._send_when_idle(np.zeros(0, np.int64))
        elif isinstance(got, Proposals):
            changed = self.state.set_proposals(got)
            self._send_when_idle(changed)
            self.progress_text = words.proposals_ready(got.note)
            self._refresh_counts()
            self._refresh_selection()
            self._refresh_queue()
            self._retitle_signal()
        self.side.progress.text = self.progress_text

    def touched(self) -> None:
        """The annotator acted (a pick, a key): new proposals wait for a pause before the map
        redraws them, so the page answers the annotator first."""
        self._last_touch = _LAST_ACTION[0] = time.monotonic()

    def _send_when_idle(self, rows: np.ndarray) -> None:
        """Send new proposals' rows to the map once the annotator has paused for ``IDLE_S`` (every
        repaint of a large map takes a while); the panels' words change at once."""
        self._held = np.union1d(self._held, np.asarray(rows, dtype=np.int64))
        if not self.served:
            self._flush_held(now=True)
            self.timeline.redraw()
        else:
            self._flush_when_idle()

    def _flush_when_idle(self) -> None:
        if not self._flush_due:
            self._flush_due = True
            self._flush_held()

    def _flush_held(self, now: bool = False) -> None:
        """Send the held rows to the map's source once the annotator has paused (``now``: at
        once) and clear the overlay of fresh labels in the same change."""
        wait = self._last_touch + IDLE_S - time.monotonic()
        if not now and self.served and wait > 0:
            self.doc.add_timeout_callback(lambda: self.act(self._flush_held), int(wait * 1000) + 1)
            return
        if not now:
            self._flush_due = False
            self.later(self.timeline.redraw)       # new proposals' lower band
        rows, self._held = self._held, np.zeros(0, np.int64)
        if self.served:
            self.doc.hold("combine")
        try:
            self.map.send(rows)
            if self._fresh.size:
                self._fresh = np.zeros(0, np.int64)
                self.map.show_fresh(self._fresh)
            if len(self.people_src.data["name"]) != len(self.state.annotators):
                self.people_src.data = {"name": list(self.state.annotators)}
        finally:
            if self.served:
                self.doc.unhold()

    def close(self) -> None:
        if self.closed:
            return
        self.closed = True
        self.worker.close()
        try:
            self.project.close()
        except Exception:
            pass
