"""Per-window features of motion-sensor signals.

``window_features`` turns windows of a (n_samples, n_channels) signal in canonical units (acceleration
in g, angular rate in deg/s, see ``labeler.channels``) into one float32 row of features per window.
All windows of a chunk are computed at once with array operations; the only Python loops are over
chunks of windows and over groups of features.

Per channel ``<channel>.<feature>``:

- ``mean``, ``std`` (population, ddof=0), ``p10`` ``p25`` ``p50`` ``p75`` ``p90`` (percentiles with
  linear interpolation, as ``numpy.percentile``), ``range`` (max - min), ``rms`` (root mean square of
  the raw values, mean included), ``mcr`` (crossings of the window mean per second: sign changes of
  the centred signal between consecutive samples, divided by the time they span, (length - 1) / rate),
  ``skew`` and ``kurt`` (biased sample skewness and excess kurtosis, Fisher's definition: what
  ``scipy.stats.skew`` / ``scipy.stats.kurtosis`` return with their defaults; 0 for a constant window).
- Spectrum of the centred window (the periodogram of ``scipy.signal.periodogram`` with its defaults:
  boxcar window, constant detrend, one-sided): ``dom_freq`` (Hz of the highest bin, DC excluded),
  ``band_0_1`` ``band_1_3`` ``band_3_6`` ``band_6_10`` ``band_10_inf`` (fraction of the non-DC power in
  [0, 1), [1, 3), [3, 6), [6, 10) and [10, Nyquist] Hz; human movement is almost all below 10 Hz,
  walking's step frequency is near 2 Hz), ``spec_entropy`` (Shannon entropy of the normalized non-DC
  power spectrum divided by the log of its number of bins: 0 = one pure tone, 1 = white).
- Autocorrelation of the centred window (biased estimate, r[0] = 1): ``ac_peak`` is the height of the
  highest local maximum at lags 0.25-2 s (periodicity) and ``ac_lag`` its lag in s (cadence: the
  period, e.g. the step or stride time). 0 and 0 when there is no local maximum in that range.

Per sensor triad (three axes of one site and kind, ``labeler.channels.triads``) ``<site>_<kind>.``:

- ``mag.mean`` ``mag.std`` ``mag.rms`` ``mag.dom_freq`` ``mag.ac_peak`` ``mag.ac_lag``: the same
  definitions on the Euclidean norm of the three axes (orientation free).
- ``gravity.x`` ``gravity.y`` ``gravity.z`` (acceleration triads only): the unit vector of the window
  mean acceleration, which at low motion is the direction of gravity in the sensor frame (posture).
  (0, 0, 0) when the mean is the zero vector.
- ``corr.xy`` ``corr.xz`` ``corr.yz``: Pearson correlation between axes; 0 when an axis is constant.

Every value is finite for finite input (constant windows included). NaN in a window gives NaN
features: cut windows around gaps (``labeler.windows.cut_windows``) or interpolate first.

Implementation: one real FFT per channel and window, of the window zero-padded to twice its length.
Its even bins are exactly the unpadded spectrum (the periodogram); its power spectrum, transformed
back with a type-I DCT (the inverse FFT of a real, even sequence), is the linear (not circular)
autocorrelation. Percentiles come from one sort per chunk.
"""

from __future__ import annotations

import math

from labeler.channels import parse_channel, triads
from labeler.errors import ValueInputError

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

#: Version of the feature set new projects compute. "1": the per-channel and per-triad features
#: above; "2": those and, per triad, the orientation-free features of :mod:`labeler.invariants`
#: appended. A project keeps the version it was created with, so its recordings stay comparable.
FEATURE_SET_VERSION = "2"
FEATURE_SET_VERSIONS = ("1", "2")

# band edges in Hz; the last band runs to the Nyquist frequency
BAND_EDGES = (0.0, 1.0, 3.0, 6.0, 10.0, math.inf)
PERCENTILES = (10, 25, 50, 75, 90)
AC_MIN_LAG_S = 0.25
AC_MAX_LAG_S = 2.0

MIN_LENGTH = 8


def _band_name(lo: float, hi: float) -> str:
    def fmt(v: float) -> str:
        return "inf" if math.isinf(v) else f"{v:g}".replace(".", "p")
    return f"band_{fmt(lo)}_{fmt(hi)}"


CHANNEL_FEATURES: tuple[str, ...] = (
    "mean", "std", *(f"p{q}" for q in PERCENTILES), "range", "rms", "mcr", "skew", "kurt",
    "dom_freq", *(_band_name(lo, hi) for lo, hi in zip(BAND_EDGES[:-1], BAND_EDGES[1:])),
    "spec_entropy", "ac_peak", "ac_lag",
)
MAG_FEATURES: tuple[str, ...] = ("mag.mean", "mag.std", "mag.rms", "mag.dom_freq", "mag.ac_peak",
                                 "mag.ac_lag")
GRAVITY_FEATURES: tuple[str, ...] = ("gravity.x", "gravity.y", "gravity.z")
CORR_FEATURES: tuple[str, ...] = ("corr.xy", "corr.xz", "corr.yz")

# arrays larger than this many float32 elements per chunk are split further (memory, cache)
_MAX_CHUNK_ELEMENTS = 1 << 19
# a window whose standard deviation is below this fraction of its mean is constant (the spread is
# float32 rounding of the mean): its skewness, kurtosis, correlations and spectrum are defined as 0
_REL_TOL = 2e-6


def _channel_label(name: str) -> str:
    try:
        ch = parse_channel(name)
    except ValueError:
        ch = None
    return ch.name if ch is not None else name.strip()


def _check_version(version: str) -> str:
    version = str(version)
    if version not in FEATURE_SET_VERSIONS:
        raise ValueInputError(f"feature set version {version!r} is unknown; this labeler computes "
                              f"{', '.join(FEATURE_SET_VERSIONS)}")
    return version


def feature_names(channels: list[str], version: str = FEATURE_SET_VERSION) -> list[str]:
    """Names of the columns ``window_features`` returns for these channels, in order."""
    from labeler.invariants import invariant_names

    version = _check_version(version)
    names = [f"{_channel_label(c)}.{f}" for c in channels for f in CHANNEL_FEATURES]
    tr = triads(list(channels))
    for site, kind, _ in tr:
        prefix = f"{site}_{kind}"
        names += [f"{prefix}.{f}" for f in MAG_FEATURES]
        if kind == "acc":
            names += [f"{prefix}.{f}" for f in GRAVITY_FEATURES]
        names += [f"{prefix}.{f}" for f in CORR_FEATURES]
    if version != "1":
        names += invariant_names(tr, BAND_EDGES)
    return names


def graph_columns(names: list[str]) -> np.ndarray:
    """Positions of the columns the window graph uses: every column but the orientation-free
    extras of set 2 (:mod:`labeler.invariants`), which go to the proposals' classifier. Measured
    with benchmarks/carry_over.py (3 seeds each): spreading on set 2 needed 47 / 77 confirmations
    to 95 % on 2 h of the simulator / the crew of six where set 1 needed 42 / 75, and with the
    classifier 62 / 60 against 33 / 60 with the graph on set 1's columns."""
    return np.array([i for i, n in enumerate(names) if ".inv." not in n], dtype=np.int64)


def orientation_free(names: list[str]) -> np.ndarray:
    """Positions of the columns that do not depend on how a sensor sits (the norms' features of
    each triad and :mod:`labeler.invariants`), by name."""
    return np.array([i for i, n in enumerate(names) if ".mag." in n or ".inv." in n],
                    dtype=np.int64)


class _Plan:
    """Everything that depends only on the window length, the rate and the channels."""

    def __init__(self, length: int, rate: float, channels: list[str]):
        self.length = L = int(length)
        self.rate = float(rate)
        self.n_channels = len(channels)
        self.triads = triads(list(channels))
        self.nfft = 2 * L
        # periodogram bins 0 .. L//2 are the even bins of the padded transform
        self.n_bins = L // 2 + 1
        self.freqs = np.arange(self.n_bins) * (self.rate / L)
        weights = np.full(self.n_bins, 2.0)
        weights[0] = 1.0
        if L % 2 == 0:
            weights[-1] = 1.0  # Nyquist bin appears once in a one-sided spectrum
        self.weights = weights[1:].astype(np.float32)  # non-DC bins
        f = self.freqs[1:]
        bands = np.zeros((f.size, len(BAND_EDGES) - 1), dtype=np.float32)
        for j, (lo, hi) in enumerate(zip(BAND_EDGES[:-1], BAND_EDGES[1:])):
            bands[(f >= lo) & (f < hi), j] = 1.0
        self.bands = bands
        self.entropy_norm = math.log(f.size) if f.size > 1 else 1.0
        self.ac_lo = max(1, math.ceil(AC_MIN_LAG_S * self.rate - 1e-9))
        self.ac_hi = min(math.floor(AC_MAX_LAG_S * self.rate + 1e-9), L - 2)
        self.pct_pos = [q / 100.0 * (L - 1) for q in PERCENTILES]


def _sum(a: np.ndarray) -> np.ndarray:
    """Sum over the last axis (einsum is markedly faster than ndarray.sum for short rows)."""
    return np.einsum("...l->...", a)


def _dot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Sum of products over the last axis."""
    return np.einsum("...l,...l->...", a, b)


class _Workspace:
    """Buffers reused from chunk to chunk (no page faults for fresh large arrays each chunk)."""

    def __init__(self, plan: _Plan, n_windows: int):
        rows = plan.n_channels + len(plan.triads)
        L = plan.length
        self.n_windows = n_windows
        self.raw = np.empty((rows, n_windows, L), dtype=np.float32)  # channels, then magnitudes
        # centred windows, zero-padded to 2L for the linear autocorrelation; the pad stays zero
        self.padded = np.zeros((rows, n_windows, plan.nfft), dtype=np.float32)
        self.power = np.empty((rows, n_windows, L + 1), dtype=np.float32)


def _spectral(ws: _Workspace, plan: _Plan) -> dict[str, np.ndarray]:
    """Spectral and autocorrelation features of the centred windows in ``ws.padded``."""
    import scipy.fft  # imported where used: commands that compute no features start faster

    lead = ws.padded.shape[:-1]
    spec = scipy.fft.rfft(ws.padded, axis=-1)  # (..., L + 1) complex64
    v = spec.view(np.float32)
    np.square(v, out=v)
    power = ws.power
    np.add(v[..., 0::2], v[..., 1::2], out=power)  # |X|^2 of the padded transform
    del spec, v
    # periodogram without DC (even bins of the padded transform), one-sided weights
    p1 = power[..., 2:2 * plan.n_bins:2] * plan.weights
    total = _sum(p1)
    has_power = (total > 0) & ws.varying
    inv_total = np.where(has_power, 1.0 / np.where(has_power, total, 1.0), 0.0).astype(np.float32)
    out: dict[str, np.ndarray] = {}
    if p1.shape[-1]:
        dom = np.argmax(p1, axis=-1)
        out["dom_freq"] = np.where(has_power, plan.freqs[1:][dom], 0.0)
        # bands and entropy of the channels only (magnitudes do not need them)
        C = plan.n_channels
        pc = p1[:C]
        inv_c = inv_total[:C, :, None]
        out["bands"] = (pc @ plan.bands) * inv_c
        pc *= inv_c  # normalized spectrum p
        logs = pc + np.float32(1e-30)
        np.log(logs, out=logs)
        out["spec_entropy"] = -_dot(pc, logs) / plan.entropy_norm
    else:
        out["dom_freq"] = np.zeros(lead)
        out["bands"] = np.zeros(lead + (plan.bands.shape[1],))[:plan.n_channels]
        out["spec_entropy"] = np.zeros(lead)[:plan.n_channels]
    del p1
    # linear autocorrelation: the inverse FFT of a real, even spectrum is the DCT-I of its half
    lo, hi = plan.ac_lo, plan.ac_hi
    if hi >= lo:
        ac = scipy.fft.dct(power, type=1, axis=-1)
        r0 = ac[..., 0]
        ok = (r0 > 0) & ws.varying
        seg = ac[..., lo - 1: hi + 2]
        mid = seg[..., 1:-1]
        is_peak = mid > seg[..., :-2]
        is_peak &= mid >= seg[..., 2:]
        # shift by r0 so that every value is >= 0 (|r[k]| <= r[0]) and non-peaks can be zeroed
        cand = mid + r0[..., None]
        cand *= is_peak
        k = np.argmax(cand, axis=-1)
        height = np.take_along_axis(cand, k[..., None], axis=-1)[..., 0]
        found = (height > 0) & ok
        safe_r0 = np.where(ok, r0, 1.0)
        out["ac_peak"] = np.where(found, (height - r0) / safe_r0, 0.0)
        out["ac_lag"] = np.where(found, (lo + k) / plan.rate, 0.0)
    else:
        out["ac_peak"] = np.zeros(lead)
        out["ac_lag"] = np.zeros(lead)
    return out


def _chunk_features(ws: _Workspace, plan: _Plan) -> np.ndarray:
    """Features of the windows in ``ws.raw[:n_channels]`` -> (n_windows, n_features) float32."""
    C, L = plan.n_channels, plan.length
    W = ws.n_windows
    tr = plan.triads
    allx = ws.raw
    x = allx[:C]
    # magnitudes of the triads go through the same moment and spectral pipeline as the channels
    for t, (_, _, (ix, iy, iz)) in enumerate(tr):
        m = allx[C + t]
        np.multiply(x[ix], x[ix], out=m)
        m += np.square(x[iy])
        m += np.square(x[iz])
        np.sqrt(m, out=m)
    # moments of the centred windows, written straight into the zero-padded FFT buffer
    inv_l = np.float32(1.0 / L)
    mean = _sum(allx) * inv_l
    c = ws.padded[..., :L]
    np.subtract(allx, mean[..., None], out=c)
    m2 = _dot(c, c) * inv_l
    # constant window: the spread is rounding noise of the mean (float32 resolution)
    varying = m2 > np.square(np.float32(_REL_TOL) * np.abs(mean)) + np.float32(1e-30)
    m2 *= varying
    std = np.sqrt(m2)
    rms = np.sqrt(mean * mean + m2)
    ws.varying = varying

    n_feat = len(CHANNEL_FEATURES)
    out_ch = np.empty((W, C, n_feat), dtype=np.float32)
    col = {name: j for j, name in enumerate(CHANNEL_FEATURES)}

    cc = c[:C]
    c2c = np.square(cc)
    var_c = varying[:C]
    safe_m2 = np.where(var_c, m2[:C], 1.0)
    m3 = _dot(c2c, cc) * inv_l
    m4 = _dot(c2c, c2c) * inv_l
    del c2c
    out_ch[:, :, col["skew"]] = np.where(var_c, m3 / safe_m2 ** 1.5, 0.0).T
    out_ch[:, :, col["kurt"]] = np.where(var_c, m4 / (safe_m2 * safe_m2) - 3.0, 0.0).T
    pos = cc > 0
    crossings = np.count_nonzero(pos[..., 1:] != pos[..., :-1], axis=-1)
    out_ch[:, :, col["mcr"]] = (crossings * var_c * np.float32(plan.rate / (L - 1))).T
    del pos

    srt = np.sort(x, axis=-1)
    for q, p in zip(PERCENTILES, plan.pct_pos):
        i0 = int(math.floor(p))
        frac = p - i0
        i1 = min(i0 + 1, L - 1)
        v = srt[..., i0]
        if frac > 0:
            v = v + np.float32(frac) * (srt[..., i1] - v)
        out_ch[:, :, col[f"p{q}"]] = v.T
    out_ch[:, :, col["range"]] = (srt[..., -1] - srt[..., 0]).T
    del srt
    out_ch[:, :, col["mean"]] = mean[:C].T
    out_ch[:, :, col["std"]] = std[:C].T
    out_ch[:, :, col["rms"]] = rms[:C].T

    # spectral features of channels and magnitudes
    spec = _spectral(ws, plan)
    out_ch[:, :, col["dom_freq"]] = spec["dom_freq"][:C].T
    b0 = col[_band_name(BAND_EDGES[0], BAND_EDGES[1])]
    out_ch[:, :, b0: b0 + plan.bands.shape[1]] = spec["bands"][:C].transpose(1, 0, 2)
    out_ch[:, :, col["spec_entropy"]] = spec["spec_entropy"][:C].T
    out_ch[:, :, col["ac_peak"]] = spec["ac_peak"][:C].T
    out_ch[:, :, col["ac_lag"]] = spec["ac_lag"][:C].T

    parts = [out_ch.reshape(W, C * n_feat)]
    for t, (site, kind, (ix, iy, iz)) in enumerate(tr):
        m = C + t
        cols = [mean[m], std[m], rms[m], spec["dom_freq"][m], spec["ac_peak"][m],
                spec["ac_lag"][m]]
        if kind == "acc":
            g = np.stack([mean[ix], mean[iy], mean[iz]])
            norm = np.sqrt((g * g).sum(axis=0))
            g = np.where(norm > 0, g / np.where(norm > 0, norm, 1.0), 0.0)
            cols += [g[0], g[1], g[2]]
        for a, b in ((ix, iy), (ix, iz), (iy, iz)):
            cov = _dot(c[a], c[b]) * inv_l
            ok = varying[a] & varying[b]
            den = np.where(ok, std[a] * std[b], 1.0)
            cols.append(np.where(ok, np.clip(cov / den, -1.0, 1.0), 0.0))
        parts.append(np.stack(cols, axis=1).astype(np.float32, copy=False))
    return np.concatenate(parts, axis=1) if len(parts) > 1 else parts[0]


def window_features(signal: np.ndarray, starts: np.ndarray, length: int, rate: float,
                    channels: list[str], chunk_size: int = 4096,
                    version: str = FEATURE_SET_VERSION) -> tuple[np.ndarray, list[str]]:
    """Features of the windows ``signal[s:s + length]`` for each s in ``starts``.

    ``signal`` is (n_samples, n_channels) in canonical units (g, deg/s), one column per name in
    ``channels``; ``starts`` are window start samples. Returns X float32 (n_windows, n_features)
    and the column names (``feature_names(channels, version)``). Windows are processed
    ``chunk_size`` at a time (fewer when windows are long or channels many, to bound memory).
    ``version``: the feature set (:data:`FEATURE_SET_VERSIONS`).
    """
    signal = np.asarray(signal)
    if signal.ndim != 2:
        raise ValueInputError(f"signal must be 2-D (n_samples, n_channels), got shape {signal.shape}")
    channels = list(channels)
    if signal.shape[1] != len(channels):
        raise ValueInputError(f"signal has {signal.shape[1]} columns but {len(channels)} channel names")
    length = int(length)
    if length < MIN_LENGTH:
        raise ValueInputError(f"window length must be at least {MIN_LENGTH} samples, got {length}")
    if not (rate > 0) or not math.isfinite(rate):
        raise ValueInputError(f"sampling rate must be a positive number, got {rate}")
    starts = np.asarray(starts, dtype=np.int64).reshape(-1)
    n_samples = signal.shape[0]
    if starts.size and (starts.min() < 0 or starts.max() + length > n_samples):
        raise ValueInputError("window out of range: every start must satisfy "
                         f"0 <= start <= n_samples - length ({n_samples} - {length})")
    version = _check_version(version)
    names = feature_names(channels, version)
    X = np.empty((starts.size, len(names)), dtype=np.float32)
    if starts.size == 0:
        return X, names
    plan = _Plan(length, rate, channels)
    rows_per_window = (len(channels) + len(plan.triads)) * length
    step = max(1, min(int(chunk_size), _MAX_CHUNK_ELEMENTS // max(1, rows_per_window)))
    from numpy.lib.stride_tricks import sliding_window_view

    sig_t = signal.T  # (n_channels, n_samples) view; contiguous rows for a column-major signal
    every = sliding_window_view(sig_t, length, axis=1)  # (n_channels, n_starts, length) view
    C = len(channels)
    ws = None
    for a in range(0, starts.size, step):
        chunk = starts[a:a + step]
        if ws is None or ws.n_windows != chunk.size:
            ws = _Workspace(plan, chunk.size)
        gaps = np.diff(chunk)
        if chunk.size > 1 and gaps[0] > 0 and (gaps == gaps[0]).all():
            # evenly spaced windows (the usual case): a strided view of one block, no gather
            ws.raw[:C] = every[:, int(chunk[0]):int(chunk[-1]) + 1:int(gaps[0])]
        else:
            ws.raw[:C] = every[:, chunk]  # whole windows gathered, not sample by sample
        base = _chunk_features(ws, plan)
        X[a:a + step, :base.shape[1]] = base
        if version != "1" and plan.triads:
            X[a:a + step, base.shape[1]:] = _invariant_block(ws, plan)
    return X, names


def _invariant_block(ws: _Workspace, plan: _Plan) -> np.ndarray:
    """Orientation-free features (:mod:`labeler.invariants`) of the windows in ``ws.raw``."""
    from labeler.invariants import stacked_invariant_features

    stack = np.empty((len(plan.triads), 3, ws.n_windows, plan.length), dtype=np.float64)
    for t, (_, _, idx) in enumerate(plan.triads):
        stack[t] = ws.raw[list(idx)]
    return stacked_invariant_features(stack, plan.triads, plan.rate, BAND_EDGES)
