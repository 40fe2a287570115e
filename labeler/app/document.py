"""Build one app session's document: map, signal view, timeline, class pad, queue and status.

:func:`build_document` works on any ``bokeh.document.Document`` (a server session's or a fresh one
in tests) and returns the :class:`LabelerApp` that owns the session's callbacks. Every write goes
through :class:`labeler.project.Project`; the proposals are recomputed in a worker thread and come
back through ``doc.add_next_tick_callback``, so a callback never waits on the spreading.
"""

from __future__ import annotations

import datetime as _dt
import html
import os
from pathlib import Path
from typing import Callable

import numpy as np
from bokeh.events import DocumentReady, SelectionGeometry, Tap
from bokeh.layouts import column, row
from bokeh.models import (BoxAnnotation, BoxSelectTool, Button, CDSView, ColumnDataSource,
                          CustomJS, CustomJSFilter, CustomJSHover, Div, FixedTicker, HoverTool,
                          InlineStyleSheet, LassoSelectTool, LinearAxis, LinearColorMapper,
                          PanTool, RadioButtonGroup, Range1d, ResetTool, TapTool, TextInput,
                          WheelZoomTool)
from bokeh.palettes import Cividis256
from bokeh.plotting import figure

from labeler.app.state import (CAUTION, EstimateUpdate, Proposals, ProposalWorker, SessionState,
                               proposals_current, read_map)
from labeler.app.timeline import segments
from labeler.errors import LabelerError

NONE_COLOUR = "#BDBDBD"          # windows with no label and no proposal
MAP_W, MAP_H, SIDE_W = 720, 500, 420
WIDE_W = MAP_W + SIDE_W + 20
MAP_CHECK_MS = 5000              # how often an open page looks for a newer map (e.g. t-SNE)
OTHERS_CHECK_MS = 2000           # how often an open page looks for changes made elsewhere
CONTEXT_S = 4.0                  # seconds of signal shown either side of the picked window
AXIS_COLOURS = ("#0072B2", "#D55E00", "#009E73")   # x, y, z (Okabe & Ito 2008 colours)
COLOUR_MODES = ("label", "confidence", "support", "recording")
KEYS_HELP = ("<b>Keys</b>: 1-9 confirm as class · Enter accept proposal · S skip · U undo · "
             "R review · Esc clear")

_BASE_CSS = """
:host { font-family: system-ui, -apple-system, 'Segoe UI', sans-serif; font-size: 13px; }
"""

_KEYS_JS = """
if (window.__labeler_keys__ == null) {
  window.__labeler_keys__ = {n: 0};
  document.addEventListener("keydown", (ev) => {
    const el = ev.composedPath ? ev.composedPath()[0] : ev.target;
    const tag = el && el.tagName ? el.tagName.toUpperCase() : "";
    if (tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (el && el.isContentEditable))
      return;
    let key = ev.key;
    if ((ev.ctrlKey || ev.metaKey) && key.toLowerCase() === "z") key = "undo";
    else if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    const known = /^[1-9]$/.test(key) || ["Enter", "s", "S", "u", "U", "r", "R", "Escape",
      "ArrowRight", "undo"].includes(key);
    if (!known) return;
    ev.preventDefault();
    window.__labeler_keys__.n += 1;
    bus.value = key + "|" + window.__labeler_keys__.n;
  });
}
"""


# Runs in the page's <head>, before BokehJS loads: a browser whose WebGL is software-rendered (no
# GPU, e.g. a headless or remote machine) draws 100k points far slower with WebGL than on a 2-D
# canvas, so the page reloads itself once with ?draw=canvas. ?draw=webgl or ?draw=canvas in the
# address forces either.
_DRAW_PROBE = """
{% block preamble %}<script>
(function () {
  const url = new URL(window.location.href);
  if (url.searchParams.has("draw")) return;
  let fast = false;
  try {
    const gl = document.createElement("canvas").getContext(
      "webgl", {failIfMajorPerformanceCaveat: true});
    if (gl) {
      const info = gl.getExtension("WEBGL_debug_renderer_info");
      const name = info ? String(gl.getParameter(info.UNMASKED_RENDERER_WEBGL)) : "";
      fast = !/swiftshader|llvmpipe|softpipe|software|basic render/i.test(name);
    }
  } catch (e) { fast = false; }
  if (!fast) { url.searchParams.set("draw", "canvas"); window.location.replace(url.toString()); }
})();
</script>{% endblock %}
"""
DRAW_BACKENDS = ("webgl", "canvas")


def _requested_draw(doc) -> str | None:
    ctx = getattr(doc, "session_context", None)
    request = getattr(ctx, "request", None) if ctx is not None else None
    args = getattr(request, "arguments", None) or {}
    got = args.get("draw")
    if not got:
        return None
    value = got[0].decode("ascii", "replace") if isinstance(got[0], bytes) else str(got[0])
    return value if value in DRAW_BACKENDS else None


# rows of the map source whose window is confirmed (cf >= 0)
_CONFIRMED_FILTER_JS = """
const cf = source.data.cf;
const out = [];
for (let i = 0; i < cf.length; i++) if (cf[i] >= 0) out.push(i);
return out;
"""


def build_document(doc, project_path: str | os.PathLike, annotator: str | None = None, *,
                   project=None, background: bool = True, draw: str | None = None) -> "LabelerApp":
    """Build the app on ``doc`` over the project file; return the session's app object.

    ``project``: an already open :class:`Project` (the session then owns it); by default the file is
    opened once for this session. ``background=False`` computes proposals in the calling thread
    (tests). ``draw``: "webgl" (default) or "canvas" for the map; in a served session the page's
    ``?draw=`` argument decides, and a browser without a GPU asks for the canvas by itself.
    """
    from labeler.project import Project

    draw = draw or _requested_draw(doc) or "webgl"
    if draw not in DRAW_BACKENDS:
        raise ValueError(f"draw must be one of {DRAW_BACKENDS}, got {draw!r}")
    if project is None:
        project = Project.open(project_path, annotator=annotator)
    app = LabelerApp(doc, project, background=background, draw=draw)
    doc.template = _DRAW_PROBE
    doc.on_session_destroyed(lambda _ctx: app.close())
    return app


class LabelerApp:
    """Panels and callbacks of one session."""

    def __init__(self, doc, project, *, background: bool = True, draw: str = "webgl"):
        self.doc = doc
        self.draw = draw
        self.project = project
        self.state = SessionState(project)
        self.background = background
        self._pending: list[Callable[[], None]] = []
        self._guard = False                     # set while Python itself changes the selection
        self.target_rows = np.zeros(0, np.int64)
        self.target_source = "map"
        self.focus_row: int | None = None
        self.message = ""
        self.closed = False
        self.worker = ProposalWorker(project.path, project.annotator,
                                     lambda: dict(self.state.class_code), self.state.n,
                                     deliver=self._deliver_from_worker,
                                     on_start=lambda: self._post(self._worker_started))
        self.progress_text = ""
        self._build()
        doc.title = f"labeler · {Path(str(project.path)).name}"
        self._map_run = project.map_run_id()
        self._mark = project.change_mark()
        if getattr(doc, "session_context", None) is not None:
            doc.add_periodic_callback(lambda: self._safely(self.check_map), MAP_CHECK_MS)
            doc.add_periodic_callback(lambda: self._safely(self.check_others), OTHERS_CHECK_MS)
        if (self.state.confirmed >= 0).any():
            # brings the accuracy estimate too, off the page; in a served session only once the
            # page has loaded, so a page that reloads itself (see _DRAW_PROBE) costs no run
            # (only the estimate when the stored proposals are of the current confirmations)
            refresh = not proposals_current(project, self.state)
            if not refresh:
                self.progress_text = ("<span style='color:#009E73'>&#10003; proposals up to date "
                                      "(stored in the project)</span>")
                self._refresh_progress()
            if getattr(doc, "session_context", None) is not None:
                doc.on_event(DocumentReady, lambda _e: self.request_proposals(refresh=refresh))
            else:
                self.request_proposals(refresh=refresh)

    # ================================================================== building
    def _build(self) -> None:
        s = self.state
        self.classes_src = ColumnDataSource(self._classes_data())
        self.people_src = ColumnDataSource({"name": list(s.annotators)})
        self.recs_src = ColumnDataSource({"name": list(s.rec_names)})
        self.class_mapper = LinearColorMapper(**self._class_mapper_args(), low_color=NONE_COLOUR)
        self.conf_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        self.support_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        rec_pal = [c for c in ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00",
                               "#F0E442", "#000000")]
        k = max(1, len(s.rec_names))
        self.rec_mapper = LinearColorMapper(palette=[rec_pal[i % len(rec_pal)] for i in range(k)],
                                            low=-0.5, high=k - 0.5)
        self._build_map()
        self._build_signal()
        self._build_timeline()
        self._build_side()
        self.key_bus = TextInput(value="", visible=False, name="key_bus")
        self.key_bus.on_change("value", self._on_key_bus)
        self.doc.js_on_event("document_ready", CustomJS(args={"bus": self.key_bus}, code=_KEYS_JS))
        header = Div(text=self._header_html(), width=WIDE_W, name="header",
                     stylesheets=[InlineStyleSheet(css=_BASE_CSS)])
        self.header = header
        self.caution = Div(text=f"<div style='color:#5a4500;background:#fff6d6;padding:6px 10px;"
                                f"border-radius:4px'>&#9888; {html.escape(CAUTION)}</div>",
                           width=WIDE_W, name="caution")
        top = row(column(self.map_bar, self.map_fig, self.signal_box), self.side)
        self.root = column(header, self.caution, top, self.timeline_fig,
                           self.key_bus, name="labeler_root")
        self.doc.add_root(self.root)
        self._refresh_side()

    def _header_html(self) -> str:
        s, p = self.state, self.project
        hours = sum(s.rec_duration) / 3600.0
        return (f"<div style='display:flex;align-items:baseline;gap:14px'>"
                f"<span style='font-size:20px;font-weight:600'>labeler</span>"
                f"<span>{html.escape(Path(str(p.path)).name)}</span>"
                f"<span style='color:#555'>{len(s.rec_names)} recording(s) · {hours:.2f} h · "
                f"{s.n} windows · map: {html.escape(s.map_kind)} · drawn with "
                f"{'WebGL' if self.draw == 'webgl' else 'canvas (no GPU found)'}</span>"
                f"<span style='margin-left:auto'>annotator <b>{html.escape(p.annotator)}</b></span>"
                f"</div>")

    # ------------------------------------------------------------------ map
    def _map_data(self) -> dict:
        s = self.state
        return {
            "x": s.x.astype(np.float32), "y": s.y.astype(np.float32),
            "lab": s.display_label(), "alpha": s.display_alpha(),
            "conf": s.proposals.confidence.astype(np.float32),
            "support": s.proposals.support.astype(np.float32),
            "prop": s.proposals.proposed.astype(np.int32), "cf": s.confirmed.astype(np.int32),
            "who": s.who.astype(np.int32), "rec": s.rec_code.astype(np.int32),
            "t0": s.start.astype(np.float32), "t1": s.stop.astype(np.float32),
            "wid": s.ids.astype(np.int32),
        }

    def _build_map(self) -> None:
        self.map_src = ColumnDataSource(self._map_data(), name="map_source")
        self.focus_src = ColumnDataSource({"x": [], "y": []})
        p = figure(width=MAP_W, height=MAP_H, output_backend=self.draw, tools=[],
                   toolbar_location="above", name="map", match_aspect=False)
        p.title.text = "Windows (similar movements sit together) — drag to select"
        p.xaxis.visible = p.yaxis.visible = False
        p.grid.visible = False
        p.background_fill_color = "#FAFAFA"
        self.map_points = p.scatter(
            "x", "y", source=self.map_src, size=5, marker="circle", line_color=None,
            fill_color={"field": "lab", "transform": self.class_mapper}, fill_alpha="alpha",
            selection_line_color="#111111", selection_line_width=1.0, selection_fill_alpha=1.0,
            nonselection_fill_alpha=0.25, nonselection_line_color=None)
        # confirmed windows as squares, from the same source through a filter computed in the
        # page: a confirm then sends one change that redraws the map once (a second source cost a
        # second repaint, about 0.35 s at 100k windows on a canvas)
        self.confirmed_view = CDSView(filter=CustomJSFilter(code=_CONFIRMED_FILTER_JS))
        self.map_confirmed = p.scatter(
            "x", "y", source=self.map_src, view=self.confirmed_view, size=8, marker="square",
            fill_color={"field": "lab", "transform": self.class_mapper}, line_color="#222222",
            line_width=0.8, nonselection_fill_alpha=0.35, nonselection_line_alpha=0.35)
        p.scatter("x", "y", source=self.focus_src, size=22, marker="circle", fill_color=None,
                  line_color="#000000", line_width=2.5)
        fmt = CustomJSHover(args={"names": self.classes_src}, code="""
            const v = Math.round(value); const n = names.data.name;
            return (v >= 0 && v < n.length) ? String(n[v]) : "—";""")
        who = CustomJSHover(args={"names": self.people_src}, code="""
            const v = Math.round(value); const n = names.data.name;
            return (v >= 0 && v < n.length) ? String(n[v]) : "nobody";""")
        rec = CustomJSHover(args={"names": self.recs_src}, code="""
            const v = Math.round(value); const n = names.data.name;
            return (v >= 0 && v < n.length) ? String(n[v]) : "?";""")
        self._tooltips = [
            ("window", "@wid"), ("recording", "@rec{custom}"),
            ("time", "@t0{0.0}–@t1{0.0} s"), ("proposed", "@prop{custom}"),
            ("confidence", "@conf{0.00}"), ("confirmed", "@cf{custom}"),
            ("by", "@who{custom}")]
        hover = HoverTool(renderers=[self.map_points], tooltips=list(self._tooltips),
                          formatters={"@prop": fmt, "@cf": fmt, "@who": who, "@rec": rec})
        self.hover = hover
        box = BoxSelectTool(renderers=[self.map_points])
        lasso = LassoSelectTool(renderers=[self.map_points])
        wheel = WheelZoomTool()
        tap = TapTool(renderers=[self.map_points])
        p.add_tools(box, lasso, PanTool(), wheel, tap, hover, ResetTool())
        p.toolbar.active_drag = box
        p.toolbar.active_scroll = wheel
        p.toolbar.logo = None
        self.map_fig = p
        self.map_src.selected.on_change("indices", self._on_map_selection)
        self.colour_mode = RadioButtonGroup(labels=["Colour: label", "confidence", "support",
                                                    "recording"], active=0, name="colour_mode")
        self.colour_mode.on_change("active", lambda a, o, n: self.set_colour_mode(COLOUR_MODES[n]))
        self.colour_hint = Div(text=self._colour_hint("label"), width=MAP_W - 330)
        self.map_bar = row(self.colour_mode, self.colour_hint)

    def _colour_hint(self, mode: str) -> str:
        return {
            "label": "<span style='color:#555'>faint = less sure · &#9632; = confirmed · "
                     "grey = no proposal yet</span>",
            "confidence": "<span style='color:#555'>dark = unsure proposals, light = sure</span>",
            "support": "<span style='color:#555'>dark = far from anything confirmed "
                       "(unexplored)</span>",
            "recording": "<span style='color:#555'>one colour per recording</span>",
        }[mode]

    def set_colour_mode(self, mode: str) -> None:
        field, mapper = {"label": ("lab", self.class_mapper),
                         "confidence": ("conf", self.conf_mapper),
                         "support": ("support", self.support_mapper),
                         "recording": ("rec", self.rec_mapper)}[mode]
        self.map_points.glyph.fill_color = {"field": field, "transform": mapper}
        self.map_points.glyph.fill_alpha = "alpha" if mode == "label" else 0.75
        self.map_confirmed.visible = mode == "label"
        self.colour_hint.text = self._colour_hint(mode)

    def _classes_data(self) -> dict:
        s = self.state
        return {"name": list(s.class_names), "colour": list(s.class_colours)}

    def _class_mapper_args(self) -> dict:
        cols = list(self.state.class_colours) or [NONE_COLOUR]
        return {"palette": cols, "low": -0.5, "high": len(cols) - 0.5}

    # ------------------------------------------------------------------ signal view
    def _sites(self) -> dict[str, list[str]]:
        sites: dict[str, list[str]] = {}
        for ch in self.state.channels:
            sites.setdefault(ch.split("_")[0], []).append(ch)
        return sites

    def _build_signal(self) -> None:
        self.signal_title = Div(text="<b>Signal</b> <span style='color:#555'>— pick a window on "
                                     "the map, the timeline or the queue</span>", width=MAP_W,
                                name="signal_title")
        self.signal_x = Range1d(0, 10)
        self.signal_figs, self.signal_srcs, self.signal_spans = [], {}, []
        self._acc_ranges, self._gyr_ranges = {}, {}
        for site, chans in self._sites().items():
            src = ColumnDataSource({"t": np.zeros(0)} | {c: np.zeros(0) for c in chans})
            acc_r, gyr_r = Range1d(-1, 1), Range1d(-1, 1)
            f = figure(width=MAP_W, height=150, x_range=self.signal_x, y_range=acc_r,
                       tools="xpan,xwheel_zoom,reset", toolbar_location=None,
                       name=f"signal_{site}")
            f.extra_y_ranges = {"gyr": gyr_r}
            f.add_layout(LinearAxis(y_range_name="gyr", axis_label="deg/s"), "right")
            f.yaxis[0].axis_label = "g"
            f.title.text = site
            f.min_border_left = 50
            for ch in chans:
                parts = ch.split("_")
                axis = "xyz".find(parts[-1]) if parts[-1] in ("x", "y", "z") else 0
                colour = AXIS_COLOURS[max(axis, 0) % 3]
                if len(parts) > 1 and parts[1] == "gyr":
                    f.line("t", ch, source=src, color=colour, line_width=1, line_alpha=0.55,
                           line_dash="dashed", y_range_name="gyr", legend_label=f"gyr {parts[-1]}")
                else:
                    f.line("t", ch, source=src, color=colour, line_width=1.6,
                           legend_label=f"acc {parts[-1]}")
            f.legend.orientation = "horizontal"
            f.legend.label_text_font_size = "10px"
            f.legend.padding = 0
            f.legend.margin = 0
            f.legend.border_line_color = None
            if self.signal_figs:                 # one legend, above the first panel, off the traces
                f.legend.visible = False
            else:
                f.add_layout(f.legend[0], "above")
            span = BoxAnnotation(left=0, right=0, fill_color="#56B4E9", fill_alpha=0.18,
                                 line_color="#0072B2", line_alpha=0.6)
            f.add_layout(span)
            self.signal_figs.append(f)
            self.signal_srcs[site] = src
            self.signal_spans.append(span)
            self._acc_ranges[site], self._gyr_ranges[site] = acc_r, gyr_r
        self.signal_figs[-1:] and setattr(self.signal_figs[-1].xaxis[0], "axis_label", "time (s)")
        self.signal_box = column(self.signal_title, *self.signal_figs)

    def show_signal(self, r: int | None) -> None:
        self.focus_row = r
        s = self.state
        if r is None:
            self.focus_src.data = {"x": [], "y": []}
            self.tl_focus.data = {"left": [], "right": [], "bottom": [], "top": []}
            return
        self.focus_src.data = {"x": [float(s.x[r])], "y": [float(s.y[r])]}
        k = int(s.rec_code[r])
        a, b = float(s.start[r]), float(s.stop[r])
        self.tl_focus.data = {"left": [a], "right": [b], "bottom": [k - 0.45], "top": [k + 0.45]}
        t, sig, names = self.project.signal(s.rec_names[k], a - CONTEXT_S, b + CONTEXT_S)
        col = {n: i for i, n in enumerate(names)}
        for site, src in self.signal_srcs.items():
            data = {"t": t}
            acc, gyr = [], []
            for ch in src.data:
                if ch == "t":
                    continue
                v = sig[:, col[ch]] if ch in col else np.full(len(t), np.nan, np.float32)
                data[ch] = v
                (gyr if "_gyr_" in ch else acc).append(v)
            src.data = data
            for vals, rng in ((acc, self._acc_ranges[site]), (gyr, self._gyr_ranges[site])):
                lo, hi = _limits(vals)
                rng.start, rng.end = lo, hi
        self.signal_x.start, self.signal_x.end = a - CONTEXT_S, b + CONTEXT_S
        for span in self.signal_spans:
            span.left, span.right = a, b
        self._retitle_signal(r)

    def _retitle_signal(self, r: int) -> None:
        s = self.state
        k = int(s.rec_code[r])
        a, b = float(s.start[r]), float(s.stop[r])
        lab = self._window_words(r, hide_proposal=self._blind())
        self.signal_title.text = (
            f"<b>Signal</b> · window {int(s.ids[r])} · {html.escape(s.rec_names[k])} · "
            f"{a:.1f}–{b:.1f} s · {lab}")

    def _blind(self) -> bool:
        """True while an audit runs: nothing on the page may show the proposals."""
        return self.state.queue_mode == "audit" and self.state.current_item() is not None

    def _set_blind(self, blind: bool) -> None:
        """Audit: colour the map by recording, drop proposals from the hover and the timeline;
        restore them after."""
        changed = blind != getattr(self, "_blinded", False)
        self._blinded = blind
        if changed:
            self.tl_src.data = self._timeline_data()
        if blind:
            if self.colour_mode.active in (0, 1):
                self._colour_before_audit = self.colour_mode.active
                self.colour_mode.active = 3
            self.hover.tooltips = [t for t in self._tooltips if t[0] not in ("proposed",
                                                                             "confidence")]
            self.colour_mode.disabled = True
        else:
            self.colour_mode.disabled = False
            self.hover.tooltips = list(self._tooltips)
            before = getattr(self, "_colour_before_audit", None)
            if before is not None:
                self._colour_before_audit = None
                self.colour_mode.active = before

    def _window_words(self, r: int, hide_proposal: bool = False) -> str:
        s = self.state
        if s.confirmed[r] >= 0:
            who = s.annotators[s.who[r]] if s.who[r] >= 0 else "?"
            return (f"confirmed <b>{html.escape(s.class_names[s.confirmed[r]])}</b> by "
                    f"{html.escape(who)}")
        if hide_proposal:
            return "proposal hidden (audit)"
        p = s.proposals.proposed[r]
        if p >= 0:
            return (f"proposed <b>{html.escape(s.class_names[p])}</b> "
                    f"(confidence {s.proposals.confidence[r]:.2f})")
        return "no proposal yet"

    # ------------------------------------------------------------------ timeline
    def _build_timeline(self) -> None:
        s = self.state
        n_rec = max(1, len(s.rec_names))
        xmax = max(s.rec_duration) if s.rec_duration else 1.0
        self.tl_src = ColumnDataSource(self._timeline_data(), name="timeline_source")
        self.tl_focus = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": []})
        p = figure(width=WIDE_W, height=70 + 46 * n_rec, x_range=Range1d(0, xmax, bounds=(0, xmax)),
                   y_range=Range1d(n_rec - 0.5, -0.5), tools=[], toolbar_location="above",
                   name="timeline")
        p.title.text = ("Timeline — upper band confirmed, lower band proposed; drag across a strip "
                        "to pick a bout, click to pick a window")
        p.quad(left="left", right="right", bottom="bottom", top="top", source=self.tl_src,
               fill_color={"field": "lab", "transform": self.class_mapper}, fill_alpha="alpha",
               line_color=None)
        p.quad(left="left", right="right", bottom="bottom", top="top", source=self.tl_focus,
               fill_color=None, line_color="#000000", line_width=2)
        dummy = p.scatter(x=[], y=[], size=0)
        box = BoxSelectTool(renderers=[dummy], dimensions="both", persistent=False)
        wheel = WheelZoomTool(dimensions="width")
        p.add_tools(box, PanTool(dimensions="width"), wheel, TapTool(renderers=[dummy]),
                    ResetTool())
        p.toolbar.active_drag = box
        p.toolbar.active_scroll = wheel
        p.toolbar.logo = None
        p.yaxis.ticker = FixedTicker(ticks=list(range(n_rec)))
        p.yaxis.major_label_overrides = {i: str(nm) for i, nm in enumerate(s.rec_names)}
        p.xaxis.axis_label = "time (s)"
        p.ygrid.visible = False
        p.on_event(SelectionGeometry, self._on_timeline_span)
        p.on_event(Tap, self._on_timeline_tap)
        self.timeline_fig = p

    def _timeline_data(self) -> dict:
        s = self.state
        proposed = s.proposals.proposed
        if getattr(self, "_blinded", False):          # audit: the proposed band stays empty
            proposed = np.full_like(proposed, -1)
        return segments(s.rec_code, s.start, s.stop, s.confirmed, proposed,
                        s.proposals.confidence)

    # ------------------------------------------------------------------ side panel
    def _build_side(self) -> None:
        self.selection_div = Div(text="", width=SIDE_W, name="selection")
        self.class_pad = column(width=SIDE_W, name="class_pad")
        self.new_class = TextInput(placeholder="new class name", width=SIDE_W - 120,
                                   name="new_class")
        self.add_class_btn = Button(label="Add class", width=100, name="add_class")
        self.add_class_btn.on_click(self._on_add_class)
        self.new_class.on_event("value_submit", lambda _e: self._on_add_class())
        self.undo_btn = Button(label="Undo last batch (U)", width=SIDE_W, name="undo")
        self.undo_btn.on_click(lambda: self.undo())
        self.queue_mode = RadioButtonGroup(labels=["Review (R)", "Audit"], active=None,
                                           width=SIDE_W, name="queue_mode")
        self.queue_mode.on_change("active", self._on_queue_mode)
        self.queue_div = Div(text="", width=SIDE_W, name="queue_item")
        self.accept_btn = Button(label="Accept proposal (Enter)", width=SIDE_W // 2 - 4,
                                 button_type="success", name="accept")
        self.accept_btn.on_click(lambda: self.accept())
        self.skip_btn = Button(label="Skip (S)", width=SIDE_W // 2 - 4, name="skip")
        self.skip_btn.on_click(lambda: self.skip())
        self.counts_div = Div(text="", width=SIDE_W, name="counts")
        self.estimate_div = Div(text="", width=SIDE_W, name="estimate")
        self.progress_div = Div(text="", width=SIDE_W, name="progress")
        self.message_div = Div(text="", width=SIDE_W, name="message")
        self.keys_div = Div(text=f"<span style='color:#555;font-size:12px'>{KEYS_HELP}</span>",
                            width=SIDE_W)
        h = "<div style='font-weight:600;margin-top:6px;border-bottom:1px solid #ddd'>{}</div>"
        self.side = column(
            Div(text=h.format("1 · Pick windows"), width=SIDE_W), self.selection_div,
            Div(text=h.format("2 · Say what they are"), width=SIDE_W), self.class_pad,
            row(self.new_class, self.add_class_btn), self.undo_btn, self.message_div,
            Div(text=h.format("Next to look at"), width=SIDE_W), self.queue_mode, self.queue_div,
            row(self.accept_btn, self.skip_btn),
            Div(text=h.format("Where things stand"), width=SIDE_W), self.progress_div,
            self.counts_div, self.estimate_div, self.keys_div, width=SIDE_W, name="side")
        self._rebuild_class_pad()

    def _rebuild_class_pad(self) -> None:
        s = self.state
        buttons = []
        for i, code in enumerate(s.active_codes()):
            key = f"{i + 1}" if i < 9 else "·"
            colour = s.class_colours[code]
            css = (f".bk-btn {{ border-left: 10px solid {colour}; text-align: left; "
                   f"font-size: 13px; }}")
            b = Button(label=f"{key}  {s.class_names[code]}", width=SIDE_W // 2 - 4,
                       stylesheets=[InlineStyleSheet(css=css)], name=f"class_{i + 1}")
            b.on_click(lambda c=code: self.confirm_target(c))
            buttons.append(b)
        rows = [row(*buttons[i:i + 2]) for i in range(0, len(buttons), 2)]
        if not rows:
            rows = [Div(text="<i>No classes yet: type one below and press Add class.</i>")]
        self.class_pad.children = rows

    # ================================================================== refreshing the panels
    def _send_rows(self, rows: np.ndarray, what: str = "labels") -> None:
        """Send the drawing columns of changed rows: a patch when few, whole columns when many.

        ``what``: "labels" (a confirm or an undo: label, alpha, confirmed, who) or "proposals"
        (label, alpha, proposed, confidence, support); fewer columns, less for the page to take in.
        """
        s = self.state
        rows = np.asarray(rows, dtype=np.int64)
        if rows.size == 0:
            return
        cols = {"lab": s.display_label(rows), "alpha": s.display_alpha(rows)}
        if what == "labels":
            cols |= {"cf": s.confirmed[rows], "who": s.who[rows]}
        else:
            cols |= {"prop": s.proposals.proposed[rows], "conf": s.proposals.confidence[rows],
                     "support": s.proposals.support[rows]}
        if rows.size > max(2000, s.n // 10):
            full = self._map_data()
            self.map_src.data.update({k: full[k] for k in cols})
        else:
            idx = rows.tolist()
            self.map_src.patch({k: list(zip(idx, v.tolist())) for k, v in cols.items()})
        self.tl_src.data = self._timeline_data()
        if len(self.people_src.data["name"]) != len(s.annotators):
            self.people_src.data = {"name": list(s.annotators)}

    def _refresh_side(self) -> None:
        self._refresh_selection()
        self._refresh_queue()
        self._refresh_counts()
        self._refresh_estimate()
        self._refresh_progress()
        self.message_div.text = (f"<span style='color:#8a1c00'>{html.escape(self.message)}</span>"
                                 if self.message else "")

    def _refresh_selection(self) -> None:
        n = int(self.target_rows.size)
        where = {"map": "on the map", "timeline": "on the timeline", "queue": "from the review queue",
                 "audit": "from the audit sample"}[self.target_source]
        if n == 0:
            self.selection_div.text = ("<span style='color:#555'>Nothing picked. Drag on the map "
                                       "or the timeline, or press R for the review queue.</span>")
        else:
            self.selection_div.text = (f"<b>{n} window{'s' if n != 1 else ''}</b> picked {where}"
                                       f" — press a class number or click a class.")

    def _refresh_counts(self) -> None:
        s = self.state
        keys = {code: i + 1 for i, code in enumerate(s.active_codes()) if i < 9}
        rows = []
        for code, name, colour, conf, prop in s.counts():
            key = keys.get(code, "")
            rows.append(f"<tr><td><span style='display:inline-block;width:10px;height:10px;"
                        f"background:{colour}'></span></td><td>{key}</td>"
                        f"<td>{html.escape(name)}</td><td style='text-align:right'>{conf}</td>"
                        f"<td style='text-align:right;color:#555'>{prop}</td></tr>")
        n_conf = int((s.confirmed >= 0).sum())
        self.counts_div.text = (
            "<table style='border-collapse:collapse;width:100%' cellpadding='2'>"
            "<tr style='color:#555'><th></th><th>key</th><th style='text-align:left'>class</th>"
            "<th style='text-align:right'>confirmed</th><th style='text-align:right'>proposed</th>"
            f"</tr>{''.join(rows)}</table><div style='color:#555'>{n_conf} of {s.n} windows "
            "confirmed</div>")

    def _refresh_estimate(self) -> None:
        got = self.state.estimate
        if got.absent is not None:
            self.estimate_div.text = f"<span style='color:#555'>{html.escape(got.absent)}</span>"
        elif got.estimate is None:
            self.estimate_div.text = ("<span style='color:#555'>Accuracy estimate: none yet — "
                                      "it comes with the proposals.</span>")
        else:
            self.estimate_div.text = _estimate_html(got.estimate)

    def _refresh_progress(self) -> None:
        if self.progress_text:
            self.progress_div.text = self.progress_text
        else:
            self.progress_div.text = ""

    def _refresh_queue(self) -> None:
        s = self.state
        item = s.current_item()
        audit = s.queue_mode == "audit"
        if item is None:
            if s.queue:
                self.queue_div.text = "<i>Queue done. Press R (or click a mode) for more.</i>"
            else:
                self.queue_div.text = ("<span style='color:#555'>Review shows the windows worth a "
                                       "look next; Audit draws a random sample for the accuracy "
                                       "estimate.</span>")
            self.accept_btn.disabled = self.skip_btn.disabled = True
            return
        r = item.row
        words = self._window_words(r, hide_proposal=audit)
        why = (f"<div style='color:#555'>why: {html.escape(_reason_words(item.reason))}</div>"
               if item.reason else "")
        self.queue_div.text = (
            f"<div><b>{'Audit' if audit else 'Review'} {s.queue_pos + 1} of {len(s.queue)}</b>"
            f" · window {item.window_id} · {html.escape(s.rec_names[s.rec_code[r]])} "
            f"{s.start[r]:.1f}–{s.stop[r]:.1f} s</div><div>{words}</div>{why}")
        self.accept_btn.disabled = audit or s.proposals.proposed[r] < 0
        self.skip_btn.disabled = False

    # ================================================================== actions
    def _set_target(self, rows, source: str, *, select_on_map: bool) -> None:
        self.target_rows = np.unique(np.asarray(rows, dtype=np.int64))
        self.target_source = source
        self._guard = True
        try:
            self.map_src.selected.indices = self.target_rows.tolist() if select_on_map else []
        finally:
            self._guard = False
        self.show_signal(int(self.target_rows[0]) if self.target_rows.size else None)
        self._refresh_selection()

    def _on_map_selection(self, _attr, _old, new) -> None:
        if self._guard:
            return
        self.target_rows = np.unique(np.asarray(new, dtype=np.int64))
        self.target_source = "map"
        self.show_signal(self._central_row(self.target_rows))
        self._refresh_selection()

    def _central_row(self, rows: np.ndarray) -> int | None:
        if rows.size == 0:
            return None
        s = self.state
        cx, cy = s.x[rows].mean(), s.y[rows].mean()
        return int(rows[np.argmin((s.x[rows] - cx) ** 2 + (s.y[rows] - cy) ** 2)])

    def select_map(self, rows) -> None:
        """Select rows on the map as the browser would (tests, and Python-side picking)."""
        self.map_src.selected.indices = [int(r) for r in rows]

    def _strips(self, y0: float, y1: float) -> list[int]:
        lo, hi = sorted((y0, y1))
        n = len(self.state.rec_names)
        ks = [k for k in range(n) if lo <= k + 0.45 and hi >= k - 0.45]
        return ks

    def _on_timeline_span(self, event) -> None:
        g = event.geometry
        if g.get("type") != "rect" or not event.final:
            return
        self.pick_span(g["x0"], g["x1"], g["y0"], g["y1"])

    def pick_span(self, x0: float, x1: float, y0: float, y1: float) -> None:
        """Pick the windows of the strips a dragged box crosses, within its time span."""
        s = self.state
        a, b = sorted((float(x0), float(x1)))
        if b <= a:
            return
        ids = []
        for k in self._strips(y0, y1):
            ids.extend(self.project.window_ids_in_span(s.rec_names[k], a, b).tolist())
        rows = s.index.get_indexer(np.asarray(ids, dtype=np.int64))
        self._set_target(rows[rows >= 0], "timeline", select_on_map=True)

    def _on_timeline_tap(self, event) -> None:
        self.pick_time(event.x, event.y)

    def pick_time(self, x: float, y: float) -> None:
        s = self.state
        k = int(round(y))
        if not 0 <= k < len(s.rec_names):
            return
        rows = np.flatnonzero((s.rec_code == k) & (s.start <= x) & (s.stop >= x))
        if rows.size:
            mid = (s.start[rows] + s.stop[rows]) / 2
            self._set_target([rows[np.argmin(np.abs(mid - x))]], "timeline", select_on_map=True)

    def confirm_target(self, code: int) -> None:
        """Confirm what is picked (map, timeline or queue item) as class ``code``: one batch."""
        rows, source = self.target_rows, self.target_source
        item = self.state.current_item()
        queue_target = source in ("queue", "audit") and item is not None
        try:
            changed = self.state.confirm(rows, code, source)
        except LabelerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self._send_rows(changed)
        if queue_target:
            self._next_item()
        elif self.focus_row is not None:
            self._retitle_signal(self.focus_row)
        self._refresh_counts()
        self.request_proposals()

    def confirm_key(self, number: int) -> None:
        codes = self.state.active_codes()
        if not codes:
            self._say("no classes yet: type a class name in the box under the class buttons and "
                      "press Add class")
            return
        if not 1 <= number <= min(9, len(codes)):
            self._say(f"no class number {number}; there are {len(codes)} classes")
            return
        self.confirm_target(codes[number - 1])

    def accept(self) -> None:
        """Accept the current queue item's proposal."""
        s = self.state
        item = s.current_item()
        if item is None:
            self._say("no queue item; press R for the review queue")
            return
        if s.queue_mode == "audit":
            self._say("audit: say what the window is with a class number (the proposal is hidden)")
            return
        code = int(s.proposals.proposed[item.row])
        if code < 0:
            self._say("this window has no proposal yet; pick a class number")
            return
        self.target_rows, self.target_source = np.array([item.row]), "queue"
        self.confirm_target(code)

    def skip(self) -> None:
        if self.state.current_item() is None:
            return
        self._next_item()

    def _next_item(self) -> None:
        item = self.state.advance()
        self._show_item(item)

    def _show_item(self, item) -> None:
        self._set_blind(self.state.queue_mode == "audit" and item is not None)
        if item is None:
            self._set_target([], self.state.queue_mode if self.state.queue_mode == "audit"
                             else "queue", select_on_map=False)
        else:
            self._set_target([item.row], "audit" if self.state.queue_mode == "audit" else "queue",
                             select_on_map=False)
        self._refresh_queue()

    def start_queue(self, mode: str) -> None:
        try:
            self.state.load_queue(mode)
        except LabelerError as exc:
            self._say(str(exc))
            self._refresh_queue()
            return
        self._say("" if self.state.queue else f"the {mode} queue is empty")
        self._show_item(self.state.current_item())

    def _on_queue_mode(self, _attr, _old, new) -> None:
        if new is None:
            return
        self.start_queue("review" if new == 0 else "audit")

    def undo(self) -> None:
        try:
            changed = self.state.undo()
        except LabelerError as exc:
            self._say(str(exc))
            return
        self._say("undone", info=True)
        self._send_rows(changed)
        self._refresh_counts()
        if self.focus_row is not None:
            self._retitle_signal(self.focus_row)
        self._refresh_queue()
        self.request_proposals()

    def _on_add_class(self) -> None:
        name = self.new_class.value_input or self.new_class.value
        self.add_class(name)

    def add_class(self, name: str) -> None:
        try:
            self.state.add_class(name)
        except LabelerError as exc:
            self._say(str(exc))
            return
        self._say("")
        self.new_class.value = ""
        self._redraw_classes()

    def _redraw_classes(self) -> None:
        self.classes_src.data = self._classes_data()
        args = self._class_mapper_args()
        self.class_mapper.update(palette=args["palette"], high=args["high"])
        self._rebuild_class_pad()
        self._refresh_counts()

    def clear(self) -> None:
        self._set_target([], "map", select_on_map=True)

    def _on_key_bus(self, _attr, _old, new: str) -> None:
        self.press(new.split("|", 1)[0])

    def press(self, key: str) -> None:
        """Handle one key from the page (see KEYS_HELP)."""
        if len(key) == 1 and key.isdigit() and key != "0":
            self.confirm_key(int(key))
        elif key == "Enter":
            self.accept()
        elif key in ("s", "S", "ArrowRight"):
            self.skip()
        elif key in ("u", "U", "undo"):
            self.undo()
        elif key in ("r", "R"):
            if self.queue_mode.active != 0:
                self.queue_mode.active = 0          # loads the queue through its callback
            else:
                self.start_queue("review")
        elif key == "Escape":
            self.clear()

    def _say(self, text: str, *, info: bool = False) -> None:
        """One line under the class pad: a refusal (dark red) or, with ``info``, news (grey)."""
        self.message = text
        colour = "#555555" if info else "#8a1c00"
        self.message_div.text = (f"<span style='color:{colour}'>{html.escape(text)}</span>"
                                 if text else "")

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
                self._redraw_classes()
                news.append("the classes changed")
        changed = s.sync_labels()
        if changed.size:
            self._send_rows(changed)
            self._refresh_counts()
            self._refresh_queue()
            if self.focus_row is not None:
                self._retitle_signal(self.focus_row)
            self.request_proposals()
            news.append(f"{changed.size} window label{'s' if changed.size != 1 else ''} changed")
        if mark[2:] != old[2:]:
            news.append("recordings were added or removed: reload the page to see them")
        if news:
            self._say("elsewhere: " + "; ".join(news), info=True)
        return bool(news)

    def _safely(self, look: Callable[[], bool]) -> None:
        """A timer of the page: a file that cannot be read now is one line in the page, not a
        traceback on the server (the next look tries again)."""
        try:
            look()
        except LabelerError as exc:
            self._say(str(exc))

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
        self.map_src.data.update({"x": s.x.astype(np.float32), "y": s.y.astype(np.float32)})
        if self.focus_row is not None:
            self.focus_src.data = {"x": [float(s.x[self.focus_row])],
                                   "y": [float(s.y[self.focus_row])]}
        self.header.text = self._header_html()
        self._say(f"the map was redrawn from a newer {s.map_kind} map", info=True)
        return True

    # ================================================================== background proposals
    def request_proposals(self, refresh: bool = True) -> None:
        """Spread the confirmations again (``refresh``) and estimate the accuracy, off the page."""
        if self.closed:
            return
        if self.background:
            self.worker.request(refresh)
            return
        from labeler.app.state import spread_and_estimate

        try:
            spread_and_estimate(self.project, dict(self.state.class_code), self.state.n, refresh,
                                self._apply_proposals, on_start=self._worker_started)
        except Exception as exc:
            self._apply_proposals(exc)

    def _post(self, fn: Callable[[], None]) -> None:
        if self.closed:
            return
        if getattr(self.doc, "session_context", None) is not None:
            try:
                self.doc.add_next_tick_callback(fn)
                return
            except Exception:
                return
        self._pending.append(fn)

    def drain(self, timeout: float = 60.0) -> None:
        """Wait for background work and run what it handed back (tests without a server)."""
        self.worker.wait(timeout)
        while self._pending:
            self._pending.pop(0)()

    def _deliver_from_worker(self, got) -> None:
        self._post(lambda: self._apply_proposals(got))

    def _worker_started(self) -> None:
        now = _dt.datetime.now().strftime("%H:%M:%S")
        self.progress_text = (f"<span style='color:#0072B2'>&#8635; updating proposals in the "
                              f"background (since {now}) — keep labeling</span>")
        self._refresh_progress()

    def _apply_proposals(self, got) -> None:
        if isinstance(got, Exception):
            self.progress_text = (f"<span style='color:#8a1c00'>proposals failed: "
                                  f"{html.escape(str(got))}</span>")
        elif got is None:
            self.progress_text = "<span style='color:#555'>no proposals yet</span>"
        elif isinstance(got, EstimateUpdate):
            self.state.estimate = got
            self._refresh_estimate()
            return
        elif isinstance(got, Proposals):
            changed = self.state.set_proposals(got)
            self._send_rows(changed, "proposals")
            when = f" ({html.escape(got.note)})" if got.note else ""
            self.progress_text = (f"<span style='color:#009E73'>&#10003; proposals up to "
                                  f"date{when}</span>")
            self._refresh_counts()
            self._refresh_queue()
            if self.focus_row is not None:
                self._retitle_signal(self.focus_row)
        self._refresh_progress()

    def close(self) -> None:
        if self.closed:
            return
        self.closed = True
        self.worker.close()
        try:
            self.project.close()
        except Exception:
            pass


REASON_WORDS = {
    "conflict": "confirmed, but its neighbours point to another class — check the label",
    "disagreement": "annotators gave it different labels",
    "uncertain": "the proposal is unsure between two classes",
    "unexplored": "nothing confirmed nearby yet",
}


def _reason_words(reason: str) -> str:
    return REASON_WORDS.get(reason, reason)


def _limits(vals: list[np.ndarray]) -> tuple[float, float]:
    if not vals:
        return -1.0, 1.0
    v = np.concatenate([np.asarray(x, dtype=np.float64) for x in vals])
    v = v[np.isfinite(v)]
    if v.size == 0:
        return -1.0, 1.0
    lo, hi = float(v.min()), float(v.max())
    pad = max(1e-3, 0.08 * (hi - lo))
    return lo - pad, hi + pad


def _pct(v) -> str:
    return f"{float(v):.0%}"


def _estimate_html(est) -> str:
    """The accuracy block (a :class:`labeler.results.AccuracyReport`, the same object
    `labeler accuracy` prints and the export's manifest carries): the headline with its interval
    and what it rests on, or what is missing for a figure."""
    grey = "<span style='color:#555'>{}</span>"
    acc, lo, hi = est.value, est.low, est.high
    note = html.escape(str(est.note or ""))
    if est.basis == "none" or acc is None:
        return "<b>No accuracy figure yet</b><br>" + grey.format(note)
    parts = [f"<b>Proposals are right about {_pct(acc)} of the time</b> (95% interval "
             f"{_pct(lo)}–{_pct(hi)})"]
    if est.expected_wrong is not None:
        parts.append(f"About {est.expected_wrong:.0f} proposals expected wrong")
    ts = est.training_set
    if ts is not None and np.isfinite(ts.value):
        parts.append(f"Training set (confirmed windows counted right): {_pct(ts.value)} "
                     f"({_pct(ts.low)}–{_pct(ts.high)})")
    parts.append(grey.format("rests on: " + note))
    parts.append(grey.format("Proposed labels are suggestions; a qualified person reviews them."))
    return "<br>".join(parts)