"""The map panel: every window as a point, coloured by class (or confidence, support, recording).

One source holds every drawn column; confirmed windows are squares drawn from that same source
through a filter computed in the page, so a change redraws the map once.
"""

from __future__ import annotations

import numpy as np
from bokeh.layouts import row
from bokeh.models import (BoxSelectTool, CDSView, ColumnDataSource, CustomJSFilter, CustomJSHover,
                          Div, HoverTool, LassoSelectTool, LinearColorMapper, PanTool,
                          RadioButtonGroup, ResetTool, TapTool, WheelZoomTool)
from bokeh.palettes import Cividis256
from bokeh.plotting import figure

from labeler.app import words
from labeler.app.assets import static

NONE_COLOUR = "#BDBDBD"          # windows with no label and no proposal
MAP_W, MAP_H = 720, 500
COLOUR_MODES = ("label", "confidence", "support", "recording")
RECORDING_COLOURS = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442",
                     "#000000")


def _name_lookup(names: ColumnDataSource, fallback: str) -> CustomJSHover:
    return CustomJSHover(args={"names": names, "fallback": fallback},
                         code=static("name_of_code.js"))


class MapView:
    """The map figure, its source and its colour modes; knows the session state, not the Project."""

    def __init__(self, state, *, draw: str, class_mapper: LinearColorMapper,
                 names: ColumnDataSource, people: ColumnDataSource, recordings: ColumnDataSource):
        self.state = state
        self.class_mapper = class_mapper
        self.conf_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        self.support_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        k = max(1, len(state.rec_names))
        self.rec_mapper = LinearColorMapper(
            palette=[RECORDING_COLOURS[i % len(RECORDING_COLOURS)] for i in range(k)],
            low=-0.5, high=k - 0.5)
        self.src = ColumnDataSource(self.data(), name="map_source")
        self.focus_src = ColumnDataSource({"x": [], "y": []})
        p = figure(width=MAP_W, height=MAP_H, output_backend=draw, tools=[],
                   toolbar_location="above", name="map", match_aspect=False)
        p.title.text = "Windows (similar movements sit together) — drag to select"
        p.xaxis.visible = p.yaxis.visible = False
        p.grid.visible = False
        p.background_fill_color = "#FAFAFA"
        self.points = p.scatter(
            "x", "y", source=self.src, size=5, marker="circle", line_color=None,
            fill_color={"field": "lab", "transform": class_mapper}, fill_alpha="alpha",
            selection_line_color="#111111", selection_line_width=1.0, selection_fill_alpha=1.0,
            nonselection_fill_alpha=0.25, nonselection_line_color=None)
        # confirmed windows as squares, from the same source through a filter computed in the
        # page: a confirm then sends one change that redraws the map once (a second source cost a
        # second repaint, about 0.35 s at 100k windows on a canvas)
        self.confirmed_view = CDSView(filter=CustomJSFilter(code=static("confirmed_filter.js")))
        self.confirmed = p.scatter(
            "x", "y", source=self.src, view=self.confirmed_view, size=8, marker="square",
            fill_color={"field": "lab", "transform": class_mapper}, line_color="#222222",
            line_width=0.8, nonselection_fill_alpha=0.35, nonselection_line_alpha=0.35)
        p.scatter("x", "y", source=self.focus_src, size=22, marker="circle", fill_color=None,
                  line_color="#000000", line_width=2.5)
        fmt = _name_lookup(names, "—")
        self.tooltips = [
            ("window", "@wid"), ("recording", "@rec{custom}"),
            ("time", "@t0{0.0}–@t1{0.0} s"), ("proposed", "@prop{custom}"),
            ("confidence", "@conf{0.00}"), ("confirmed", "@cf{custom}"),
            ("by", "@who{custom}")]
        self.hover = HoverTool(renderers=[self.points], tooltips=list(self.tooltips),
                               formatters={"@prop": fmt, "@cf": fmt,
                                           "@who": _name_lookup(people, "nobody"),
                                           "@rec": _name_lookup(recordings, "?")})
        box = BoxSelectTool(renderers=[self.points])
        wheel = WheelZoomTool()
        p.add_tools(box, LassoSelectTool(renderers=[self.points]), PanTool(), wheel,
                    TapTool(renderers=[self.points]), self.hover, ResetTool())
        p.toolbar.active_drag = box
        p.toolbar.active_scroll = wheel
        p.toolbar.logo = None
        self.fig = p
        self.colour_mode = RadioButtonGroup(labels=["Colour: label", "confidence", "support",
                                                    "recording"], active=0, name="colour_mode")
        self.colour_mode.on_change("active", lambda a, o, n: self.set_colour_mode(COLOUR_MODES[n]))
        self.colour_hint = Div(text=words.colour_hint("label"), width=MAP_W - 330)
        self.bar = row(self.colour_mode, self.colour_hint)
        self.blinded = False
        self._colour_before_audit: int | None = None

    # ------------------------------------------------------------------ data
    def data(self) -> dict:
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

    def send(self, rows: np.ndarray, what: str = "labels") -> None:
        """Send the drawing columns of changed rows: a patch when few, whole columns when many.

        ``what``: "labels" (a confirm or an undo: label, alpha, confirmed, who) or "proposals"
        (label, alpha, proposed, confidence, support); fewer columns, less for the page to take in.
        """
        s = self.state
        cols = {"lab": s.display_label(rows), "alpha": s.display_alpha(rows)}
        if what == "labels":
            cols |= {"cf": s.confirmed[rows], "who": s.who[rows]}
        else:
            cols |= {"prop": s.proposals.proposed[rows], "conf": s.proposals.confidence[rows],
                     "support": s.proposals.support[rows]}
        if rows.size > max(2000, s.n // 10):
            full = self.data()
            self.src.data.update({k: full[k] for k in cols})
        else:
            idx = rows.tolist()
            self.src.patch({k: list(zip(idx, v.tolist())) for k, v in cols.items()})

    def move_points(self) -> None:
        """The state holds a new map: send the coordinates."""
        s = self.state
        self.src.data.update({"x": s.x.astype(np.float32), "y": s.y.astype(np.float32)})

    def set_focus(self, r: int | None) -> None:
        s = self.state
        self.focus_src.data = ({"x": [], "y": []} if r is None else
                               {"x": [float(s.x[r])], "y": [float(s.y[r])]})

    def select(self, rows) -> None:
        self.src.selected.indices = [int(r) for r in rows]

    # ------------------------------------------------------------------ colour
    def set_colour_mode(self, mode: str) -> None:
        field, mapper = {"label": ("lab", self.class_mapper),
                         "confidence": ("conf", self.conf_mapper),
                         "support": ("support", self.support_mapper),
                         "recording": ("rec", self.rec_mapper)}[mode]
        self.points.glyph.fill_color = {"field": field, "transform": mapper}
        self.points.glyph.fill_alpha = "alpha" if mode == "label" else 0.75
        self.confirmed.visible = mode == "label"
        self.colour_hint.text = words.colour_hint(mode)

    def set_blind(self, blind: bool) -> None:
        """Audit: colour by recording and drop proposals from the hover; restore them after."""
        self.blinded = blind
        if blind:
            if self.colour_mode.active in (0, 1):
                self._colour_before_audit = self.colour_mode.active
                self.colour_mode.active = 3
            self.hover.tooltips = [t for t in self.tooltips if t[0] not in ("proposed",
                                                                            "confidence")]
            self.colour_mode.disabled = True
        else:
            self.colour_mode.disabled = False
            self.hover.tooltips = list(self.tooltips)
            if self._colour_before_audit is not None:
                before, self._colour_before_audit = self._colour_before_audit, None
                self.colour_mode.active = before
