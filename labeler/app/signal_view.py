"""The signal panel: the picked window's channels with a few seconds of context, one figure per
sensor site (acceleration in g on the left axis, rotation in deg/s dashed on the right)."""

from __future__ import annotations

import numpy as np
from bokeh.layouts import column
from bokeh.models import BoxAnnotation, ColumnDataSource, Div, LinearAxis, Range1d
from bokeh.plotting import figure

from labeler.app import words

CONTEXT_S = 4.0                  # seconds of signal shown either side of the picked window
AXIS_COLOURS = ("#0072B2", "#D55E00", "#009E73")   # x, y, z (Okabe & Ito 2008 colours)
SIGNAL_W = 720


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


class SignalView:
    """Figures and sources of the signal panel; ``read(recording, a, b)`` gives (t, signal, names)."""

    def __init__(self, channels: list[str], read):
        self.read = read
        self.title = Div(text=words.signal_idle(), width=SIGNAL_W, name="signal_title")
        self.x_range = Range1d(0, 10)
        self.figs, self.srcs, self.spans = [], {}, []
        self._ranges: dict[str, tuple[Range1d, Range1d]] = {}
        for site, chans in sites(channels).items():
            src = ColumnDataSource({"t": np.zeros(0)} | {c: np.zeros(0) for c in chans})
            acc_r, gyr_r = Range1d(-1, 1), Range1d(-1, 1)
            f = figure(width=SIGNAL_W, height=150, x_range=self.x_range, y_range=acc_r,
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
            if self.figs:                       # one legend, above the first panel, off the traces
                f.legend.visible = False
            else:
                f.add_layout(f.legend[0], "above")
            span = BoxAnnotation(left=0, right=0, fill_color="#56B4E9", fill_alpha=0.18,
                                 line_color="#0072B2", line_alpha=0.6)
            f.add_layout(span)
            self.figs.append(f)
            self.srcs[site] = src
            self.spans.append(span)
            self._ranges[site] = (acc_r, gyr_r)
        if self.figs:
            self.figs[-1].xaxis[0].axis_label = "time (s)"
        self.box = column(self.title, *self.figs)

    def show(self, recording: str, a: float, b: float) -> None:
        """Draw the window [a, b] s of ``recording`` with CONTEXT_S seconds either side."""
        t, sig, names = self.read(recording, a - CONTEXT_S, b + CONTEXT_S)
        col = {n: i for i, n in enumerate(names)}
        for site, src in self.srcs.items():
            data = {"t": t}
            acc, gyr = [], []
            for ch in src.data:
                if ch == "t":
                    continue
                v = sig[:, col[ch]] if ch in col else np.full(len(t), np.nan, np.float32)
                data[ch] = v
                (gyr if "_gyr_" in ch else acc).append(v)
            src.data = data
            for vals, rng in zip((acc, gyr), self._ranges[site]):
                rng.start, rng.end = limits(vals)
        self.x_range.start, self.x_range.end = a - CONTEXT_S, b + CONTEXT_S
        for span in self.spans:
            span.left, span.right = a, b
