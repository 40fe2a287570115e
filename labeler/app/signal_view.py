"""The signal panel: the picked window's channels with a few seconds of context, one figure per
sensor site (acceleration in g on the left axis, rotation in deg/s dashed on the right); and the
gallery, small panels of up to nine windows drawn from a pick."""

from __future__ import annotations

import numpy as np
from bokeh.layouts import column, row
from bokeh.models import (BoxAnnotation, Checkbox, ColumnDataSource, Div, Legend, LegendItem,
                          LinearAxis, Range1d)
from bokeh.plotting import figure

from labeler.app import words

CONTEXT_S = 4.0                  # seconds of signal shown either side of the picked window
AXIS_COLOURS = ("#0072B2", "#D55E00", "#009E73")   # x, y, z (Okabe & Ito 2008 colours)
#: the steady scale: +-2 g and +-250 deg/s, the default full-scale ranges of many MEMS motion
#: sensors (from memory); the same for every window, so sensor noise does not look like movement
FIXED_ACC, FIXED_GYR = (-2.0, 2.0), (-250.0, 250.0)
SIGNAL_H = 104
GALLERY_CELLS = 9                # a 3 x 3 grid


def limits(vals: list[np.ndarray]) -> tuple[float, float]:
    """A y range holding every finite value of ``vals`` with a little room."""
    if not vals:
        return -1.0, 1.0
    v = np.concatenate([np.asarray(x, dtype=np.float64) for x in vals])
    v = v[np.isfinite(v)]
    if v.size == 0:
        return -1.0, 1.0
    lo, hi = float(v.min()), float(v.max())
    pad = max(1e-3, 0.08 * (hi - lo))
    return lo - pad, hi + pad


def sites(channels: list[str]) -> dict[str, list[str]]:
    """Channels grouped by sensor site (the part of the name before the first underscore)."""
    out: dict[str, list[str]] = {}
    for ch in channels:
        out.setdefault(ch.split("_")[0], []).append(ch)
    return out


def _kind(channel: str) -> str:
    """"gyr" for a rotation channel (``site_gyr_axis``), else "acc"."""
    parts = channel.split("_")
    return "gyr" if len(parts) > 1 and parts[1] == "gyr" else "acc"


def _colour(channel: str) -> str:
    """The channel's colour by its axis (x, y, z; anything else as x)."""
    axis = channel.split("_")[-1]
    return AXIS_COLOURS["xyz".find(axis) % 3 if axis in ("x", "y", "z") else 0]


class SignalView:
    """Figures and sources of the signal panel; ``read(recording, a, b)`` gives (t, signal, names)."""

    def __init__(self, channels: list[str], read, css=None):
        self._read = read
        self._cache: dict[tuple, tuple] = {}
        self.fixed = False
        self.last: tuple | None = None
        self.title = Div(text=words.signal_idle(), sizing_mode="stretch_width",
                         name="signal_title", stylesheets=[css] if css else [])
        self.steady = Checkbox(label="steady scale (±2 g, ±250 deg/s)", active=False,
                               name="steady_scale")
        self.steady.on_change("active", lambda _a, _o, new: self.set_fixed(bool(new)))
        self.x_range = Range1d(0, 10)
        self.figs, self.srcs, self.spans = [], {}, []
        self._ranges: dict[str, tuple[Range1d, Range1d]] = {}
        for k, (site, chans) in enumerate(sites(channels).items()):
            # one multi-line per kind of sensor (acceleration, rotation) and site: one renderer
            # for each, not one per channel (each renderer is several views in the page)
            kinds = {"acc": [c for c in chans if _kind(c) == "acc"],
                     "gyr": [c for c in chans if _kind(c) == "gyr"]}
            acc_r, gyr_r = Range1d(-1, 1), Range1d(-1, 1)
            f = figure(height=SIGNAL_H, sizing_mode="stretch_width", min_width=360,
                       x_range=self.x_range, y_range=acc_r, tools="xpan,xwheel_zoom,reset",
                       toolbar_location=None, name=f"signal_{site}")
            f.min_border_top = f.min_border_bottom = 2
            f.extra_y_ranges = {"gyr": gyr_r}
            f.add_layout(LinearAxis(y_range_name="gyr", axis_label="deg/s"), "right")
            f.yaxis[0].axis_label = f"{site} · g"
            f.min_border_left = 50
            items: dict[str, LegendItem] = {}
            srcs = {}
            for kind, names in kinds.items():
                if not names:
                    continue
                # a row per channel from the start (empty lines), so the legend has its colours
                src = ColumnDataSource({"xs": [np.zeros(0)] * len(names),
                                        "ys": [np.zeros(0)] * len(names),
                                        "colour": [_colour(c) for c in names],
                                        "channel": list(names)})
                look = (dict(line_width=1, line_alpha=0.55, line_dash="dashed",
                             y_range_name="gyr") if kind == "gyr" else dict(line_width=1.6))
                r = f.multi_line("xs", "ys", source=src, line_color="colour", **look)
                srcs[kind] = src
                for i, c in enumerate(names):
                    label = f"{kind} {c.split('_')[-1]}"
                    if label not in items:
                        items[label] = LegendItem(label=label, renderers=[r], index=i)
            if k == 0:                          # one legend, above the first panel, off the traces
                f.add_layout(Legend(items=list(items.values()), orientation="horizontal",
                                    label_text_font_size="10px", padding=0, margin=0,
                                    border_line_color=None), "above")
            span = BoxAnnotation(left=0, right=0, fill_color="#8c8c8c", fill_alpha=0.14,
                                 line_color="#333333", line_alpha=0.6)
            f.add_layout(span)
            self.figs.append(f)
            self.srcs[site] = srcs
            self.spans.append(span)
            self._ranges[site] = (acc_r, gyr_r)
        for f in self.figs[:-1]:
            f.xaxis.visible = False
        # the figures join the page when a window is first shown (place); until then a block of
        # their height holds their place, so nothing below moves and the map is not repainted:
        # the figures are a hundred models the page would build and lay out before it is ready,
        # to show nothing
        self.waiting = Div(text="", height=SIGNAL_H * len(self.figs), margin=0,
                           sizing_mode="stretch_width", name="signal_waiting")
        self.head = row(self.title, self.steady, sizing_mode="stretch_width")
        self.box = column(self.head, self.waiting, sizing_mode="stretch_width", name="signal_box")

    def place(self) -> None:
        """Put the figures in the page in place of the block holding their place, once."""
        if self.waiting in self.box.children:
            self.box.children = [self.head, *self.figs]

    def read(self, recording: str, a: float, b: float):
        """(t, signal, channel names) of recording between a and b s; the last few reads are kept
        (the queue's next item is read ahead, see prefetch)."""
        key = (recording, round(a, 3), round(b, 3))
        got = self._cache.pop(key, None)
        if got is None:
            got = self._read(recording, a, b)
        self._cache[key] = got
        while len(self._cache) > 4:
            self._cache.pop(next(iter(self._cache)))
        return got

    def prefetch(self, recording: str, a: float, b: float) -> None:
        """Read the window [a, b] s with its context now, so showing it later is quick."""
        self.read(recording, a - CONTEXT_S, b + CONTEXT_S)

    def set_fixed(self, fixed: bool) -> None:
        """Steady scale on or off; redraws the window shown."""
        self.fixed = fixed
        if self.last is not None:
            self.show(*self.last)

    def show(self, recording: str, a: float, b: float) -> None:
        """Draw the window [a, b] s of ``recording`` with CONTEXT_S seconds either side."""
        self.last = (recording, a, b)
        t, sig, names = self.read(recording, a - CONTEXT_S, b + CONTEXT_S)
        self.place()
        col = {n: i for i, n in enumerate(names)}
        for site, srcs in self.srcs.items():
            vals = {"acc": [], "gyr": []}
            for kind, src in srcs.items():
                ys = [sig[:, col[ch]] if ch in col else np.full(len(t), np.nan, np.float32)
                      for ch in src.data["channel"]]
                vals[kind] = ys
                src.data = {"xs": [t] * len(ys), "ys": ys, "colour": list(src.data["colour"]),
                            "channel": list(src.data["channel"])}
            for v, rng, fixed in zip((vals["acc"], vals["gyr"]), self._ranges[site],
                                     (FIXED_ACC, FIXED_GYR)):
                rng.start, rng.end = fixed if self.fixed else limits(v)
        self.x_range.start, self.x_range.end = a - CONTEXT_S, b + CONTEXT_S
        for span in self.spans:
            span.left, span.right = a, b


#: the gallery's style when hidden, and when shown (an empty value clears the page's "none"; an
#: empty style would leave it in place)
HIDDEN, SHOWN = {"display": "none"}, {"display": ""}


class Gallery:
    """Up to nine small panels of windows drawn from a pick, in one figure (one source of lines,
    one of cell bands): each cell shows the first sensor site's acceleration over the window, under
    a band in the colour of the window's class (confirmed, else proposed)."""

    def __init__(self, channels: list[str], read, class_mapper):
        self.read = read
        first = next(iter(sites(channels).values()), [])
        self.channels = [c for c in first if "_gyr_" not in c] or first
        self.rows: list[int] = []
        self.lines = ColumnDataSource({"xs": [], "ys": [], "colour": []})
        self.cells = ColumnDataSource({"left": [], "right": [], "top": [], "bottom": [], "lab": [],
                                       "tx": [], "ty": [], "caption": []})
        p = figure(height=176, sizing_mode="stretch_width", min_width=240, tools=[],
                   toolbar_location=None, x_range=Range1d(0, 3), y_range=Range1d(3, 0),
                   name="gallery", styles=dict(HIDDEN))
        p.axis.visible = False
        p.grid.visible = False
        p.outline_line_color = None
        p.min_border = 2
        p.quad(left="left", right="right", top="top", bottom="bottom", source=self.cells,
               fill_color={"field": "lab", "transform": class_mapper}, line_color=None)
        p.text(x="tx", y="ty", text="caption", source=self.cells, text_font_size="10px",
               text_baseline="top", text_color="#333333")
        p.multi_line(xs="xs", ys="ys", line_color="colour", line_width=1.1, source=self.lines)
        self.fig = p

    @staticmethod
    def choose(order: np.ndarray, k: int = GALLERY_CELLS) -> np.ndarray:
        """k rows spread evenly over ``order`` (all of them when there are k or fewer)."""
        if order.size <= k:
            return order
        return order[np.round(np.linspace(0, order.size - 1, k)).astype(int)]

    def show(self, state, rows: np.ndarray, fixed: bool) -> None:
        """Draw up to nine of ``rows``, spread over their proposals (rows ordered by proposal)."""
        s = state
        rows = np.asarray(rows, dtype=np.int64)
        order = rows[np.lexsort((s.ids[rows], s.proposals.proposed[rows]))]
        picked = self.choose(order) if rows.size > 1 else rows[:0]
        self.rows = [int(r) for r in picked]
        cells = {k: [] for k in self.cells.data}
        xs, ys, colours = [], [], []
        traces = []
        for r in self.rows:
            t, sig, names = self.read(s.rec_names[int(s.rec_code[r])], float(s.start[r]),
                                      float(s.stop[r]))
            col = {n: i for i, n in enumerate(names)}
            traces.append((t, [sig[:, col[c]] for c in self.channels if c in col]))
        lo, hi = FIXED_ACC if fixed else limits([v for _, vs in traces for v in vs])
        for i, (r, (t, vs)) in enumerate(zip(self.rows, traces)):
            c, q = i % 3, i // 3
            lab = int(s.display_label([r])[0])
            cells["left"].append(c + 0.03)
            cells["right"].append(c + 0.97)
            cells["top"].append(q + 0.03)
            cells["bottom"].append(q + 0.09)
            cells["lab"].append(lab)
            cells["tx"].append(c + 0.04)
            cells["ty"].append(q + 0.11)
            cells["caption"].append(words.gallery_caption(s, r))
            if t.size < 2:
                continue
            u = c + 0.04 + 0.92 * (t - t[0]) / max(t[-1] - t[0], 1e-9)
            for j, v in enumerate(vs):
                xs.append(u)
                ys.append(q + 0.96 - 0.66 * (np.clip(v, lo, hi) - lo) / max(hi - lo, 1e-9))
                colours.append(AXIS_COLOURS[j % 3])
        # no room taken when there is nothing to show; hidden by its style, not `visible`, which
        # would lay out the page again and repaint every point of the map
        want = dict(SHOWN if self.rows else HIDDEN)
        if dict(self.fig.styles) != want:
            self.fig.styles = want
        self.cells.data = cells
        self.lines.data = {"xs": xs, "ys": ys, "colour": colours}

    def recaption(self, state) -> None:
        """Captions and class bands again (labels or proposals changed; the lines stay)."""
        if not self.rows or len(self.cells.data["caption"]) != len(self.rows):
            return
        labs = [int(v) for v in state.display_label(self.rows)]
        caps = [words.gallery_caption(state, r) for r in self.rows]
        if labs != list(self.cells.data["lab"]) or caps != list(self.cells.data["caption"]):
            self.cells.patch({"lab": list(enumerate(labs)), "caption": list(enumerate(caps))})

    def row_at(self, x: float, y: float) -> int | None:
        """The window of the cell under (x, y), if any."""
        i = int(np.floor(y)) * 3 + int(np.floor(x))
        return self.rows[i] if 0 <= x < 3 and 0 <= y < 3 and i < len(self.rows) else None
