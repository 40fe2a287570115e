"""Timeline strips: runs of equal labels per recording, as quads (left, right, bottom, top).

Recording k is drawn around y = k: confirmed labels in the upper band, proposals of unconfirmed
windows in the lower band with the run's mean confidence as alpha. Runs break at gaps between
windows, so a gap in a recording stays visible.
"""

from __future__ import annotations

import numpy as np

from labeler.app.state import ALPHA_MIN, ALPHA_SPAN

BAND = 0.42


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
    out = {k: [] for k in ("left", "right", "bottom", "top", "lab", "alpha")}
    upper = confirmed
    lower = np.where(confirmed >= 0, -2, proposed)     # -2: confirmed, nothing drawn below
    for value, band in ((upper, "upper"), (lower, "lower")):
        first, last = _runs(rec, start, stop, value)
        keep = value[first] >= 0
        first, last = first[keep], last[keep]
        k = rec[first].astype(np.float64)
        if band == "upper":
            bottom, top = k - BAND, k
            alpha = np.ones(first.size)
        else:
            bottom, top = k + 0.02, k + BAND
            csum = np.r_[0.0, np.cumsum(confidence)]
            mean = (csum[last + 1] - csum[first]) / (last - first + 1)
            alpha = ALPHA_MIN + ALPHA_SPAN * mean
        out["left"].append(start[first])
        out["right"].append(right[last])
        out["bottom"].append(bottom)
        out["top"].append(top)
        out["lab"].append(value[first].astype(np.int32))
        out["alpha"].append(alpha)
    return {k: np.concatenate(v).astype(np.int32 if k == "lab" else np.float64)
            for k, v in out.items()}
