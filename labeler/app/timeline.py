"""Timeline strips: runs of equal labels per recording, as quads (left, right, bottom, top).

Recording k is drawn around y = k: confirmed labels in the upper band, proposals of unconfirmed
windows in the lower band, as tall as the run's mean confidence (colour stays the class's own).
Runs break at gaps between windows, so a gap in a recording stays visible.
"""

from __future__ import annotations

import numpy as np
from bokeh.models import (BoxSelectTool, ColumnDataSource, FixedTicker, Grid, PanTool, Range1d,
                          ResetTool, TapTool, WheelZoomTool)
from bokeh.plotting import figure


BAND = 0.42
LOW_MIN = 0.2                # the lower band of a run of confidence 0 is this part of BAND


def _runs(rec: np.ndarray, start: np.ndarray, stop: np.ndarray, value: np.ndarray):
    """Start and end indices (inclusive) of runs of equal (recording, value) over consecutive
    windows; windows are in recording then time order."""
    n = value.size
    if n == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    brk = np.ones(n, bool)
    brk[1:] = (rec[1:] != rec[:-1]) | (value[1:] != value[:-1]) | (start[1:] > stop[:-1])
    first = np.flatnonzero(brk)
    last = np.r_[first[1:] - 1, n - 1]
    return first, last


def segments(rec, start, stop, confirmed, proposed, confidence) -> dict[str, np.ndarray]:
    rec = np.asarray(rec)
    order = np.lexsort((start, rec))
    rec, start, stop = rec[order], np.asarray(start)[order], np.asarray(stop)[order]
    confirmed, proposed = np.asarray(confirmed)[order], np.asarray(proposed)[order]
    confidence = np.asarray(confidence, dtype=np.float64)[order]
    # a window's own slice ends where the next one of its recording starts (windows overlap)
    right = stop.copy()
    same = (rec[1:] == rec[:-1]) & (start[1:] <= stop[:-1])
    right[:-1][same] = start[1:][same]
    out = {k: [] for k in ("left", "right", "bottom", "top", "lab")}
    upper = confirmed
    lower = np.where(confirmed >= 0, -2, proposed)     # -2: confirmed, nothing drawn below
    for value, band in ((upper, "upper"), (lower, "lower")):
        first, last = _runs(rec, start, stop, value)
        keep = value[first] >= 0
        first, last = first[keep], last[keep]
        k = rec[first].astype(np.float64)
        if band == "upper":
            bottom, top = k - BAND, k
        else:
            csum = np.r_[0.0, np.cumsum(confidence)]
            mean = np.clip((csum[last + 1] - csum[first]) / (last - first + 1), 0.0, 1.0)
            bottom = k + 0.02
            top = bottom + (BAND - 0.02) * (LOW_MIN + (1 - LOW_MIN) * mean)
        out["left"].append(start[first])
        out["right"].append(right[last])
        out["bottom"].append(bottom)
        out["top"].append(top)
        out["lab"].append(value[first].astype(np.int32))
    return {k: np.concatenate(v).astype(np.int32 if k == "lab" else np.float64)
            for k, v in out.items()}


class TimelineView:
    """One strip per recording: confirmed labels above, proposals below; a dragged box or a click
    picks windows (the document hooks ``fig``'s SelectionGeometry and Tap events)."""

    def __init__(self, state, class_mapper):
        s = self.state = state
        self.blinded = False
        n_rec = max(1, len(s.rec_names))
        xmax = max(s.rec_duration) if s.rec_duration else 1.0
        self.src = ColumnDataSource(self.data(), name="timeline_source")
        self.focus = ColumnDataSource({"left": [], "right": [], "bottom": [], "top": []})
        p = figure(height=70 + 46 * n_rec, sizing_mode="stretch_width", min_width=360,
                   x_range=Range1d(0, xmax, bounds=(0, xmax)), y_range=Range1d(n_rec - 0.5, -0.5),
                   tools=[], toolbar_location="above", name="timeline")
        p.title.text = ("Timeline — upper band confirmed, lower band proposed; drag across a strip "
                        "to pick a bout, click to pick a window")
        p.quad(left="left", right="right", bottom="bottom", top="top", source=self.src,
               fill_color={"field": "lab", "transform": class_mapper}, line_color=None)
        p.quad(left="left", right="right", bottom="bottom", top="top", source=self.focus,
               fill_color=None, line_color="#000000", line_width=2, level="overlay")
        # the drag and click tools select on no renderer: they only send their shape
        box = BoxSelectTool(renderers=[], dimensions="both", persistent=False)
        wheel = WheelZoomTool(dimensions="width")
        p.add_tools(box, PanTool(dimensions="width"), wheel, TapTool(renderers=[]), ResetTool())
        p.toolbar.active_drag = box
        p.toolbar.active_scroll = wheel
        p.toolbar.logo = None
        p.yaxis.ticker = FixedTicker(ticks=list(range(n_rec)))
        p.yaxis.major_label_overrides = {i: str(nm) for i, nm in enumerate(s.rec_names)}
        p.xaxis.axis_label = "time (s)"
        # the strips need no horizontal grid lines: none drawn, and none hidden (a hidden grid is
        # still a view the page builds)
        p.center = [r for r in p.center if not (isinstance(r, Grid) and r.dimension == 1)]
        self.fig = p

    def data(self) -> dict:
        s = self.state
        proposed = s.proposals.proposed
        if self.blinded:                          # audit: the proposed band stays empty
            proposed = np.full_like(proposed, -1)
        return segments(s.rec_code, s.start, s.stop, s.confirmed, proposed,
                        s.proposals.confidence)

    def redraw(self) -> None:
        self.src.data = self.data()

    def set_blind(self, blind: bool) -> None:
        if blind != self.blinded:
            self.blinded = blind
            self.redraw()

    def set_focus(self, r: int | None) -> None:
        s = self.state
        if r is None:
            self.focus.data = {"left": [], "right": [], "bottom": [], "top": []}
            return
        k = int(s.rec_code[r])
        self.focus.data = {"left": [float(s.start[r])], "right": [float(s.stop[r])],
                           "bottom": [k - 0.45], "top": [k + 0.45]}

    def strips(self, y0: float, y1: float) -> list[int]:
        """Recordings whose strip a box from y0 to y1 crosses."""
        lo, hi = sorted((y0, y1))
        return [k for k in range(len(self.state.rec_names)) if lo <= k + 0.45 and hi >= k - 0.45]

    def window_at(self, x: float, y: float) -> int | None:
        """Row of the window of the strip at y whose centre is nearest x, if any covers x."""
        s = self.state
        k = int(round(y))
        if not 0 <= k < len(s.rec_names):
            return None
        rows = np.flatnonzero((s.rec_code == k) & (s.start <= x) & (s.stop >= x))
        if rows.size == 0:
            return None
        mid = (s.start[rows] + s.stop[rows]) / 2
        return int(rows[np.argmin(np.abs(mid - x))])
