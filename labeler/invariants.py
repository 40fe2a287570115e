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


def _unit(x: np.ndarray, y: np.ndarray, z: np.ndarray):
    """Unit vectors of (x, y, z) per row, and where the norm is not zero ((0, 0, 0) there)."""
    norm = np.sqrt(x * x + y * y + z * z)
    ok = norm > 1e-12
    inv = np.where(ok, 1.0 / np.where(ok, norm, 1.0), 0.0)
    return (x * inv, y * inv, z * inv), ok


def sym3_eigen(sxx, syy, szz, sxy, sxz, syz):
    """Eigenvalues (largest first) and a unit eigenvector of the largest, of symmetric 3 x 3
    matrices given by their six entries (arrays of one shape), in closed form.

    Eigenvalues: the trigonometric solution of the characteristic cubic (Smith, "Eigenvalues of
    a symmetric 3 x 3 matrix", Communications of the ACM 4(4), 1961). Eigenvector: the longest
    cross product of two rows of ``A - l1 I`` (its rows span the plane orthogonal to it); where
    the largest eigenvalue is double or triple every direction of its eigenspace is one, and
    the vector returned is one of them.
    """
    q = (sxx + syy + szz) / 3.0
    axx, ayy, azz = sxx - q, syy - q, szz - q
    off = sxy * sxy + sxz * sxz + syz * syz
    p2 = (axx * axx + ayy * ayy + azz * azz + 2.0 * off) / 6.0
    p = np.sqrt(p2)
    spread = p > 1e-300
    inv_p = np.where(spread, 1.0 / np.where(spread, p, 1.0), 0.0)
    bxx, byy, bzz = axx * inv_p, ayy * inv_p, azz * inv_p
    bxy, bxz, byz = sxy * inv_p, sxz * inv_p, syz * inv_p
    det = (bxx * (byy * bzz - byz * byz) - bxy * (bxy * bzz - byz * bxz)
           + bxz * (bxy * byz - byy * bxz))
    phi = np.arccos(np.clip(det / 2.0, -1.0, 1.0)) / 3.0
    l1 = q + 2.0 * p * np.cos(phi)
    l3 = q + 2.0 * p * np.cos(phi + 2.0 * np.pi / 3.0)
    l2 = 3.0 * q - l1 - l3
    vals = np.stack([l1, np.clip(l2, l3, l1), l3], axis=-1)
    # rows of M = A - l1 I
    mxx, myy, mzz = sxx - l1, syy - l1, szz - l1
    r0 = (mxx, sxy, sxz)
    r1 = (sxy, myy, syz)
    r2 = (sxz, syz, mzz)
    best = None
    for u, v in ((r0, r1), (r0, r2), (r1, r2)):
        c = (u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0])
        n2 = c[0] * c[0] + c[1] * c[1] + c[2] * c[2]
        if best is None:
            best, best_n2 = c, n2
        else:
            take = n2 > best_n2
            best = tuple(np.where(take, ci, bi) for ci, bi in zip(c, best))
            best_n2 = np.where(take, n2, best_n2)
    # l1 double or triple (the cross products vanish against the entries): M has rank <= 1 and
    # every direction orthogonal to its largest row is an eigenvector
    size = np.abs(sxx) + np.abs(syy) + np.abs(szz) + np.abs(sxy) + np.abs(sxz) + np.abs(syz)
    flat = best_n2 <= 1e-24 * size ** 4
    vec = np.stack(best, axis=-1)
    if np.any(flat):
        rows = np.stack([np.stack(r, axis=-1) for r in (r0, r1, r2)], axis=-2)
        k = np.argmax((rows * rows).sum(axis=-1), axis=-1)
        big = np.take_along_axis(rows, k[..., None, None], axis=-2)[..., 0, :]
        # a direction orthogonal to `big`: its cross product with the axis it is least along
        e = np.zeros_like(big)
        np.put_along_axis(e, np.argmin(np.abs(big), axis=-1)[..., None], 1.0, axis=-1)
        c = np.cross(big / np.maximum(np.abs(big).max(axis=-1, keepdims=True), 1e-300), e)
        c = np.where((np.abs(big).max(axis=-1) > 0)[..., None], c, e)
        vec = np.where(flat[..., None], c, vec)
    # scaled before the norm is taken: the entries of a quiet window's matrix are tiny
    vec = vec / np.maximum(np.abs(vec).max(axis=-1, keepdims=True), 1e-300)
    vec = vec / np.sqrt((vec * vec).sum(axis=-1, keepdims=True))
    return vals, vec


def _percentiles(x: np.ndarray, qs) -> list[np.ndarray]:
    """Percentiles over the last axis of ``x`` with linear interpolation (``numpy.percentile``'s
    default), from one sort."""
    srt = np.sort(x, axis=-1)
    L = x.shape[-1]
    out = []
    for q in qs:
        pos = q / 100.0 * (L - 1)
        i0 = int(math.floor(pos))
        frac = pos - i0
        v = srt[..., i0]
        if frac > 0:
            v = v + frac * (srt[..., min(i0 + 1, L - 1)] - v)
        out.append(v)
    return out


def _norm3(x: np.ndarray, y: np.ndarray, z: np.ndarray, out: np.ndarray,
           tmp: np.ndarray, root: bool = True) -> np.ndarray:
    """``sqrt(x * x + y * y + z * z)`` (without the root when ``root`` is false) into ``out``
    (which may be ``x``), in that order of operations, with ``tmp`` (of the same shape,
    distinct from the others) as scratch."""
    np.multiply(y, y, out=tmp)
    np.multiply(x, x, out=out)
    out += tmp
    np.multiply(z, z, out=tmp)
    out += tmp
    return np.sqrt(out, out=out) if root else out


def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Sum of products over the last axis."""
    return np.einsum("...l,...l->...", a, b)


def invariant_features(windows: dict[tuple[str, str], np.ndarray], triads, rate: float,
                       edges) -> np.ndarray:
    """Orientation-free features (see the module docstring) of the windows of each triad.

    ``windows[(site, kind)]`` is (n_windows, length, 3) float; returns float32
    (n_windows, len(invariant_names(triads, edges))).
    """
    if not triads:
        return np.empty((0, 0), np.float32)
    stack = np.empty((len(triads), 3) + np.shape(windows[triads[0][:2]])[:2], dtype=np.float64)
    for t, (site, kind, _) in enumerate(triads):
        arr = np.asarray(windows[(site, kind)])
        for i in range(3):
            stack[t, i] = arr[..., i]
    return stacked_invariant_features(stack, triads, rate, edges)


def stacked_invariant_features(a: np.ndarray, triads, rate: float, edges) -> np.ndarray:
    """:func:`invariant_features` of ``a``, (n_triads, 3, n_windows, length) float64 in the
    order of ``triads``: every triad and every window at once, one array operation per step."""
    a = np.asarray(a, dtype=np.float64)
    T, _, n, L = a.shape
    inv_l = 1.0 / L
    ax, ay, az = a[:, 0], a[:, 1], a[:, 2]  # (T, n, L)
    out: dict[str, np.ndarray] = {}  # name -> (T, n)
    norm = _norm3(ax, ay, az, np.empty_like(ax), np.empty_like(ax))
    for q, v in zip((10, 50, 90), _percentiles(norm, (10, 50, 90))):
        out[f"inv.p{q}"] = v
    mean = a.mean(axis=-1)  # (T, 3, n)
    d = a - mean[..., None]
    dx, dy, dz = d[:, 0], d[:, 1], d[:, 2]
    tmp = np.empty_like(ax)
    dn = _norm3(dx, dy, dz, np.empty_like(ax), tmp)
    out["inv.dyn_mean"] = dn.mean(axis=-1)
    out["inv.dyn_std"] = dn.std(axis=-1)
    del dn
    vals, main = sym3_eigen(_dot(dx, dx) * inv_l, _dot(dy, dy) * inv_l, _dot(dz, dz) * inv_l,
                            _dot(dx, dy) * inv_l, _dot(dx, dz) * inv_l, _dot(dy, dz) * inv_l)
    vals = np.maximum(vals, 0.0)  # (T, n, 3)
    for j in range(3):
        out[f"inv.sd{j + 1}"] = np.sqrt(vals[..., j])
    total = vals.sum(axis=-1)
    out["inv.line"] = np.where(total > 1e-12,
                               vals[..., 0] / np.where(total > 1e-12, total, 1.0), 0.0)
    j = np.subtract(a[..., 1:], a[..., :-1])  # (T, 3, n, L - 1): the change per sample
    out["inv.jerk"] = _norm3(j[:, 0], j[:, 1], j[:, 2], j[:, 0], tmp[..., 1:]).mean(axis=-1) * rate
    del j, tmp
    # spectrum of the norm, mean removed
    c = norm - norm.mean(axis=-1, keepdims=True)
    spec = np.fft.rfft(c, axis=-1)[..., 1:]
    power = spec.real ** 2 + spec.imag ** 2
    del spec, c
    freqs = np.fft.rfftfreq(L, 1.0 / rate)[1:]
    ptot = power.sum(axis=-1)
    # the floor of "no power" scales with each triad's largest norm over these windows
    top = np.maximum(1.0, np.abs(norm).max(axis=(1, 2))) ** 2
    has = ptot > 1e-20 * top[:, None] * L
    p = power * np.where(has, 1.0 / np.where(has, ptot, 1.0), 0.0)[..., None]
    bands = []
    for lo, hi in zip(edges[:-1], edges[1:]):
        bands.append(p[..., (freqs >= lo) & (freqs < hi)].sum(axis=-1))
    ent = -_dot(p, np.log(p + 1e-30))
    entropy = ent / math.log(freqs.size) if freqs.size > 1 else np.zeros((T, n))
    # the moving part along and across gravity (acceleration triads)
    acc_rows = [t for t, (_, kind, _) in enumerate(triads) if kind == "acc"]
    acc_cols: dict[int, list[np.ndarray]] = {}
    unit_of_site: dict[str, tuple] = {}
    if acc_rows:
        r = np.array(acc_rows)
        (gx, gy, gz), ok = _unit(mean[r, 0], mean[r, 1], mean[r, 2])
        ex, ey, ez = dx[r], dy[r], dz[r]  # copies, changed in place below
        gx_, gy_, gz_ = gx[..., None], gy[..., None], gz[..., None]
        v = np.multiply(ex, gx_)
        tmp = np.multiply(ey, gy_)
        v += tmp
        np.multiply(ez, gz_, out=tmp)
        v += tmp
        vert = v.std(axis=-1)
        # the part across gravity: h = e - v g
        for e, g_ in ((ex, gx_), (ey, gy_), (ez, gz_)):
            np.multiply(v, g_, out=tmp)
            e -= tmp
        horiz = np.sqrt(_norm3(ex, ey, ez, ex, tmp, root=False).mean(axis=-1))
        del ex, ey, ez, v, tmp
        mr = main[r]
        along = np.abs(mr[..., 0] * gx + mr[..., 1] * gy + mr[..., 2] * gz)
        main_vert = np.where(ok & (vals[r, :, 0] > 1e-12), along, 0.0)
        for k, t in enumerate(acc_rows):
            acc_cols[t] = [vert[k], horiz[k], main_vert[k]]
            unit_of_site[triads[t][0]] = ((gx[k], gy[k], gz[k]), ok[k])
    # the main rotation axis against gravity (gyroscope triads of a site with an acceleration
    # triad): the angular rate's own main axis (mean included)
    gyr_rows = [t for t, (site, kind, _) in enumerate(triads)
                if kind != "acc" and site in unit_of_site]
    gyr_cols: dict[int, np.ndarray] = {}
    if gyr_rows:
        r = np.array(gyr_rows)
        bx, by, bz = ax[r], ay[r], az[r]
        rvals, axis = sym3_eigen(_dot(bx, bx) * inv_l, _dot(by, by) * inv_l,
                                 _dot(bz, bz) * inv_l, _dot(bx, by) * inv_l,
                                 _dot(bx, bz) * inv_l, _dot(by, bz) * inv_l)
        for k, t in enumerate(gyr_rows):
            (gx, gy, gz), ok = unit_of_site[triads[t][0]]
            along = np.abs(axis[k, :, 0] * gx + axis[k, :, 1] * gy + axis[k, :, 2] * gz)
            gyr_cols[t] = np.where(ok & (rvals[k, :, 0] > 1e-12), along, 0.0)
    cols = []
    for t in range(T):
        cols += [out[name][t] for name in COMMON]
        cols += [b[t] for b in bands]
        cols.append(entropy[t])
        cols += acc_cols.get(t, [])
        if t in gyr_cols:
            cols.append(gyr_cols[t])
    res = np.empty((n, len(cols)), dtype=np.float32)
    for j, col in enumerate(cols):
        res[:, j] = col
    return res
