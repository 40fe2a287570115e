"""Window features that do not depend on how a sensor sits on the body.

Pure numerics, no storage, no display.

A watch turned on the wrist or a clip turned on the belt rotates every axis the sensor sees, so the
per-axis features of :mod:`labeler.features` change with the mount while the activity stays the
same. The features here are computed from one sensor triad (three axes of one site and kind) and
are unchanged by any fixed rotation of the sensor (common practice, no source: norms, eigenvalues
and angles between vectors measured in one frame do not depend on the frame):

Per triad ``<site>_<kind>.`` (``a`` the window's samples as 3-vectors, ``m`` = mean vector,
``d = a - m`` the part that moves):

- ``inv.p10`` ``inv.p50`` ``inv.p90``: percentiles of the norm ``|a|``;
- ``inv.dyn_mean`` ``inv.dyn_std``: mean and standard deviation of ``|d|``;
- ``inv.sd1`` ``inv.sd2`` ``inv.sd3``: square roots of the eigenvalues of the covariance of
  ``a`` (largest first): how much the sensor moves along its main, middle and least axis;
- ``inv.line``: share of the variance along the main axis (1 = back and forth on one line);
- ``inv.jerk``: mean norm of the change of ``a`` per second;
- ``inv.band_*`` and ``inv.entropy``: shares of the power of ``|a|`` (mean removed) in the bands
  of :data:`labeler.features.BAND_EDGES`, and its spectral entropy (normalized to [0, 1]).

Acceleration triads also split the moving part along gravity (the direction of ``m``, which at low
motion is the vertical):

- ``inv.vert_std`` ``inv.horiz_std``: standard deviation of ``d`` along gravity, and the
  root-mean-square of its part across gravity;
- ``inv.main_vert``: ``|cos|`` of the angle between the main axis of the motion and gravity
  (1 = up and down, 0 = horizontal);

and gyroscope triads, when the same site has an acceleration triad, the angle between the main
rotation axis and gravity (``inv.axis_vert``: 1 = turning about the vertical, 0 = swinging about
a horizontal axis).

Every value is finite for finite input; a constant window gives zeros where a direction or a
share is undefined.
"""

from __future__ import annotations

import math

import numpy as np

COMMON = ("inv.p10", "inv.p50", "inv.p90", "inv.dyn_mean", "inv.dyn_std", "inv.sd1", "inv.sd2",
          "inv.sd3", "inv.line", "inv.jerk")
ACC_ONLY = ("inv.vert_std", "inv.horiz_std", "inv.main_vert")
GYR_ONLY = ("inv.axis_vert",)


def _band_names(edges) -> tuple[str, ...]:
    def fmt(v: float) -> str:
        return "inf" if math.isinf(v) else f"{v:g}".replace(".", "p")
    return tuple(f"inv.band_{fmt(lo)}_{fmt(hi)}" for lo, hi in zip(edges[:-1], edges[1:]))


def invariant_names(triads, edges) -> list[str]:
    """Column names for ``triads`` (``labeler.channels.triads``) and band ``edges``."""
    sites_with_acc = {site for site, kind, _ in triads if kind == "acc"}
    names = []
    for site, kind, _ in triads:
        own = list(COMMON) + list(_band_names(edges)) + ["inv.entropy"]
        if kind == "acc":
            own += ACC_ONLY
        elif site in sites_with_acc:
            own += GYR_ONLY
        names += [f"{site}_{kind}.{f}" for f in own]
    return names


def _unit(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    norm = np.sqrt((v * v).sum(axis=-1))
    ok = norm > 1e-12
    return np.where(ok[:, None], v / np.where(ok, norm, 1.0)[:, None], 0.0), ok


def _main_axes(d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (largest first, >= 0) and main eigenvector of each window's covariance."""
    cov = np.einsum("nli,nlj->nij", d, d) / d.shape[1]
    vals, vecs = np.linalg.eigh(cov)
    return np.maximum(vals[:, ::-1], 0.0), vecs[:, :, -1]


def invariant_features(windows: dict[tuple[str, str], np.ndarray], triads, rate: float,
                       edges) -> np.ndarray:
    """Orientation-free features (see the module docstring) of the windows of each triad.

    ``windows[(site, kind)]`` is (n_windows, length, 3) float; returns float32
    (n_windows, len(invariant_names(triads, edges))).
    """
    sites_acc = {site: windows[(site, kind)] for site, kind, _ in triads if kind == "acc"}
    cols = []
    for site, kind, _ in triads:
        a = np.asarray(windows[(site, kind)], dtype=np.float64)
        n, L, _ = a.shape
        norm = np.sqrt((a * a).sum(axis=-1))
        cols += list(np.percentile(norm, (10, 50, 90), axis=1))
        m = a.mean(axis=1)
        d = a - m[:, None, :]
        dn = np.sqrt((d * d).sum(axis=-1))
        cols += [dn.mean(axis=1), dn.std(axis=1)]
        vals, main = _main_axes(d)
        cols += [np.sqrt(vals[:, 0]), np.sqrt(vals[:, 1]), np.sqrt(vals[:, 2])]
        total = vals.sum(axis=1)
        cols.append(np.where(total > 1e-12, vals[:, 0] / np.where(total > 1e-12, total, 1.0), 0.0))
        jerk = np.sqrt((np.diff(a, axis=1) ** 2).sum(axis=-1)).mean(axis=1) * rate
        cols.append(jerk)
        # spectrum of the norm, mean removed
        c = norm - norm.mean(axis=1, keepdims=True)
        power = np.abs(np.fft.rfft(c, axis=1)) ** 2
        freqs = np.fft.rfftfreq(L, 1.0 / rate)
        power, freqs = power[:, 1:], freqs[1:]
        ptot = power.sum(axis=1)
        has = ptot > 1e-20 * max(1.0, float(np.abs(norm).max()) ** 2) * L
        p = np.where(has[:, None], power / np.where(has, ptot, 1.0)[:, None], 0.0)
        for lo, hi in zip(edges[:-1], edges[1:]):
            cols.append(p[:, (freqs >= lo) & (freqs < hi)].sum(axis=1))
        ent = -(p * np.log(p + 1e-30)).sum(axis=1)
        cols.append(ent / math.log(freqs.size) if freqs.size > 1 else np.zeros(n))
        if kind == "acc":
            g, ok = _unit(m)
            v = np.einsum("nli,ni->nl", d, g)
            h = d - v[:, :, None] * g[:, None, :]
            cols += [v.std(axis=1), np.sqrt((h * h).sum(axis=-1).mean(axis=1)),
                     np.where(ok & (vals[:, 0] > 1e-12), np.abs((main * g).sum(axis=1)), 0.0)]
        elif site in sites_acc:
            acc = np.asarray(sites_acc[site], dtype=np.float64)
            g, ok = _unit(acc.mean(axis=1))
            # main rotation axis: the angular rate's own main axis (mean included)
            rv = np.einsum("nli,nlj->nij", a, a) / L
            rvals, rvecs = np.linalg.eigh(rv)
            axis = rvecs[:, :, -1]
            cols.append(np.where(ok & (rvals[:, -1] > 1e-12), np.abs((axis * g).sum(axis=1)), 0.0))
    if not cols:
        return np.empty((0, 0), np.float32)
    return np.column_stack(cols).astype(np.float32)
