"""The map panel: every window as a point, coloured by class (or confidence, support, recording).

Colour is the class's own and opaque; a proposal's confidence is the point's size; a confirmed window
has an outline; classes beyond the palette take the next shape. One renderer over one source draws
every window (shape and outline are computed in the page from the class and confirmed columns).

Any change to that source or its selection repaints every point, which at 100k windows takes the
page a second or more; so what changes while the annotator works is drawn on the overlay layer,
which repaints alone: the pick (rings, from ``pick_source``), the windows labeled since the last
pause (``fresh_source``, drawn as they will look) and the focus ring. The page never selects on the
map's source: a drag, a lasso or a click sends its shape to the server, which finds the windows
(``labeler.app.picking``). The map's source takes the changed rows once the annotator pauses.
"""

from __future__ import annotations

import numpy as np
from bokeh.core.property.descriptors import UnsetValueError
from bokeh.layouts import row
from bokeh.models import (BoxSelectTool, ColorBar, ColumnDataSource, CustomJS, CustomJSHover,
                          CustomJSTransform, Div, HoverTool, LassoSelectTool, LinearColorMapper,
                          PanTool, RadioButtonGroup, ResetTool, TapTool, WheelZoomTool)
from bokeh.palettes import Cividis256, Viridis256, linear_palette
from bokeh.plotting import figure

from labeler.app import words
from labeler.app.assets import static

NONE_COLOUR = "#BDBDBD"          # windows with no label and no proposal
MAP_H = 390
COLOUR_MODES = ("label", "confidence", "support", "recording")
#: one shape per run of palette colours: classes 1-8 circles, 9-16 triangles, ...
SHAPES = ("circle", "triangle", "diamond", "inverted_triangle", "hex", "star", "square_pin",
          "plus")


def recording_palette(k: int) -> list[str]:
    """k colours for recordings from a scheme of their own (viridis), apart from the class hues."""
    return list(linear_palette(Viridis256, k)) if k > 1 else [Viridis256[80]]


def _name_lookup(names: ColumnDataSource, fallback: str) -> CustomJSHover:
    return CustomJSHover(args={"names": names, "fallback": fallback},
                         code=static("name_of_code.js"))


class MapView:
    """The map figure, its sources and colour modes; knows the session state, not the Project."""

    def __init__(self, state, *, draw: str, class_mapper: LinearColorMapper, per_shape: int,
                 names: ColumnDataSource, people: ColumnDataSource, recordings: ColumnDataSource):
        self.state = state
        self.class_mapper = class_mapper
        self.conf_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        self.support_mapper = LinearColorMapper(palette=Cividis256, low=0.0, high=1.0)
        k = max(1, len(state.rec_names))
        self.rec_mapper = LinearColorMapper(palette=recording_palette(k), low=-0.5, high=k - 0.5)
        self.src = ColumnDataSource(self.data(), name="map_source")
        self.fresh_src = ColumnDataSource(self.rows_data(np.zeros(0, np.int64)),
                                          name="fresh_source")
        self.pick_src = ColumnDataSource(self._pick_data(np.zeros(0, np.int64)),
                                         name="pick_source")
        self.focus_src = ColumnDataSource({"x": [], "y": []})
        # no axes and no grids (the map's coordinates mean nothing to the eye): not hidden but
        # absent, so the page builds and lays out no views for them
        p = figure(height=MAP_H, sizing_mode="stretch_width", min_width=360,
                   output_backend=draw, tools=[], toolbar_location="above", name="map",
                   match_aspect=False, x_axis_type=None, y_axis_type=None)
        p.title.text = "Windows (similar movements sit together) — drag to pick"
        p.background_fill_color = "#FAFAFA"
        p.min_border = 4
        self._shape = CustomJSTransform(args={"shapes": list(SHAPES), "per_shape": int(per_shape)},
                                        v_func=static("class_shape.js"))
        self._edge = CustomJSTransform(v_func=static("confirmed_edge.js"))
        self.points = self._scatter(p, self.src)
        # the page never selects on the map's source (picks are rings on the overlay), and a
        # selection set from outside leaves the look as it is: no dimmed copy of every point
        self.points.selection_glyph = None
        self.points.nonselection_glyph = None
        self.fresh = self._scatter(p, self.fresh_src, level="overlay")
        p.scatter("x", "y", source=self.pick_src, size=11, marker="circle", fill_color=None,
                  line_color="#111111", line_width=1.6, level="overlay", name="pick_rings")
        p.scatter("x", "y", source=self.focus_src, size=22, marker="circle", fill_color=None,
                  line_color="#000000", line_width=2.5, level="overlay")
        self.conf_bar = ColorBar(color_mapper=self.conf_mapper, title="confidence", width=10,
                                 visible=False, name="confidence_bar")
        self.support_bar = ColorBar(color_mapper=self.support_mapper, title="support", width=10,
                                    visible=False, name="support_bar")
        # the colour bars join the figure when their colour mode is first chosen (set_colour_mode):
        # each is views the page would build and lay out before it is ready
        fmt = _name_lookup(names, "—")
        # condensed: three short lines, of the nearest point only (limit=1: hits come nearest first)
        self.tooltips = [
            ("window", "@wid · @rec{custom} · @t0{0.0}–@t1{0.0} s"),
            ("confirmed", "@cf{custom} (@who{custom})"),
            ("proposed", "@prop{custom} · confidence @conf{0.00}")]
        self.hover = HoverTool(renderers=[self.points], tooltips=list(self.tooltips), limit=1,
                               filters={"@wid": CustomJS(code=static("nearest_only.js"))},
                               formatters={"@prop": fmt, "@cf": fmt,
                                           "@who": _name_lookup(people, "nobody"),
                                           "@rec": _name_lookup(recordings, "?")})
        # the drag, lasso and click tools select on no renderer: they only send their shape (a
        # selection on the map's source would repaint every point), and need no empty renderer
        # to aim at (a renderer is several views in the page)
        box = BoxSelectTool(renderers=[], persistent=False)
        wheel = WheelZoomTool()
        p.add_tools(box, LassoSelectTool(renderers=[], continuous=False), PanTool(), wheel,
                    TapTool(renderers=[]), self.hover, ResetTool())
        p.toolbar.active_drag = box
        p.toolbar.active_scroll = wheel
        p.toolbar.logo = None
        self.fig = p
        self.colour_mode = RadioButtonGroup(labels=["Colour: label", "confidence", "support",
                                                    "recording"], active=0, name="colour_mode")
        self.colour_mode.on_change("active", lambda a, o, n: self.set_colour_mode(COLOUR_MODES[n]))
        self.colour_hint = Div(text=words.colour_hint("label"), sizing_mode="stretch_width")
        self.bar = row(self.colour_mode, self.colour_hint, sizing_mode="stretch_width")
        self.blinded = False
        self._colour_before_audit: int | None = None

    def _scatter(self, p, source: ColumnDataSource, **kw):
        """The points' one look (colour = class, shape = class's run of the palette, size, outline
        of confirmed windows) over ``source``."""
        return p.scatter(
            "x", "y", source=source, size="size",
            marker={"field": "lab", "transform": self._shape},
            fill_color={"field": "lab", "transform": self.class_mapper}, fill_alpha=1.0,
            line_color="#1a1a1a", line_width=1.2,
            line_alpha={"field": "cf", "transform": self._edge}, **kw)

    # ------------------------------------------------------------------ data
    def data(self) -> dict:
        s = self.state
        return {
            "x": s.x.astype(np.float32), "y": s.y.astype(np.float32),
            "lab": s.display_label(), "size": s.display_size(),
            "conf": s.proposals.confidence.astype(np.float32),
            "support": s.proposals.support.astype(np.float32),
            "prop": s.proposals.proposed.astype(np.int32), "cf": s.confirmed.astype(np.int32),
            "who": s.who.astype(np.int32), "rec": s.rec_code.astype(np.int32),
            "t0": s.start.astype(np.float32), "t1": s.stop.astype(np.float32),
            "wid": s.ids.astype(np.int32),
        }

    def rows_data(self, rows: np.ndarray) -> dict:
        """What the overlay needs to draw ``rows`` as the map will (every colour mode)."""
        s = self.state
        rows = np.asarray(rows, dtype=np.int64)
        return {"x": s.x[rows].astype(np.float32), "y": s.y[rows].astype(np.float32),
                "lab": s.display_label(rows), "size": s.display_size(rows),
                "cf": s.confirmed[rows].astype(np.int32),
                "conf": s.proposals.confidence[rows].astype(np.float32),
                "support": s.proposals.support[rows].astype(np.float32),
                "rec": s.rec_code[rows].astype(np.int32), "row": rows.astype(np.int32)}

    def _pick_data(self, rows: np.ndarray) -> dict:
        s = self.state
        rows = np.asarray(rows, dtype=np.int64)
        return {"x": s.x[rows].astype(np.float32), "y": s.y[rows].astype(np.float32),
                "row": rows.astype(np.int32)}

    def send(self, rows: np.ndarray) -> None:
        """Send the drawing columns of changed rows to the map's source (one repaint of every
        point): a patch of typed columns when few, whole columns when many."""
        s = self.state
        rows = np.asarray(rows, dtype=np.int64)
        cols = {"lab": s.display_label(rows), "size": s.display_size(rows),
                "cf": s.confirmed[rows].astype(np.int32), "who": s.who[rows].astype(np.int32),
                "prop": s.proposals.proposed[rows].astype(np.int32),
                "conf": s.proposals.confidence[rows].astype(np.float32),
                "support": s.proposals.support[rows].astype(np.float32)}
        if rows.size > max(2000, s.n // 10):
            full = self.data()
            self.src.data.update({k: full[k] for k in cols})
        elif rows.size:
            idx = rows.tolist()
            self.src.patch({k: list(zip(idx, v.tolist())) for k, v in cols.items()})

    def show_fresh(self, rows: np.ndarray) -> None:
        """Draw ``rows`` (labeled since the map's source was last sent) on the overlay."""
        self.fresh_src.data = self.rows_data(rows)

    def show_pick(self, rows) -> None:
        """Ring the picked windows (on the overlay: the points are not repainted)."""
        self.pick_src.data = self._pick_data(rows)

    def move_points(self) -> None:
        """The state holds a new map: send the coordinates."""
        s = self.state
        self.src.data.update({"x": s.x.astype(np.float32), "y": s.y.astype(np.float32)})
        self.show_pick(self.pick_src.data["row"])

    def set_focus(self, r: int | None) -> None:
        s = self.state
        self.focus_src.data = ({"x": [], "y": []} if r is None else
                               {"x": [float(s.x[r])], "y": [float(s.y[r])]})

    def units_per_pixel(self) -> tuple[float, float]:
        """Map units per screen pixel along x and y as the page last reported its ranges and size
        (NaN when it has not yet)."""
        p = self.fig
        try:
            w, h = p.inner_width, p.inner_height
            xs, xe = p.x_range.start, p.x_range.end
            ys, ye = p.y_range.start, p.y_range.end
        except UnsetValueError:                 # the page has not said its size yet
            return float("nan"), float("nan")
        if not all(isinstance(v, (int, float)) for v in (w, h, xs, xe, ys, ye)) or not w or not h:
            return float("nan"), float("nan")
        return abs(xe - xs) / w, abs(ye - ys) / h

    # ------------------------------------------------------------------ colour
    def set_colour_mode(self, mode: str) -> None:
        field, mapper = {"label": ("lab", self.class_mapper),
                         "confidence": ("conf", self.conf_mapper),
                         "support": ("support", self.support_mapper),
                         "recording": ("rec", self.rec_mapper)}[mode]
        for glyph in (self.points.glyph, self.fresh.glyph):
            glyph.fill_color = {"field": field, "transform": mapper}
        for bar, shown in ((self.conf_bar, mode == "confidence"),
                           (self.support_bar, mode == "support")):
            bar.visible = shown
            if shown and bar not in self.fig.right:
                self.fig.add_layout(bar, "right")
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
