"""Building blocks of the simulator (:mod:`labeler.synthetic`): seeded random streams, smooth
noise in a frequency band, on/off processes and short events, sensor mounting rotations and the
kinematics of yaw-pitch-roll angles. Vectorized over samples; invented data only."""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage, signal as sps


def _rng(*keys: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence([int(k) & 0xFFFFFFFF for k in keys]))


_F32 = np.float32


def _upsample(low: np.ndarray, low_rate: float, n: int, rate: float) -> np.ndarray:
    """Linear interpolation of a signal sampled at low_rate, (m,) or (k, m), onto n samples at
    rate: (n,) or (k, n) float32."""
    pos = np.arange(n, dtype=np.float64) * (low_rate / rate)
    lo = np.atleast_2d(low).astype(_F32, copy=False)
    j = np.minimum(pos.astype(np.int64), lo.shape[1] - 2)
    w = (pos - j).astype(_F32)
    out = np.empty((lo.shape[0], n), dtype=_F32)
    for i, row in enumerate(lo):  # loop over rows (a few), 1-D gathers are the fastest
        a = row[j]
        np.subtract(row[j + 1], a, out=out[i])
        out[i] *= w
        out[i] += a
    return out[0] if low.ndim == 1 else out


def _band_noise(rng: np.random.Generator, n: int, lo: float, hi: float, rate: float,
                k: int | None = None) -> np.ndarray:
    """Unit-variance Gaussian noise band-limited to [lo, hi] Hz: (n,) or (k, n) float32.

    Slow noise (hi <= 1 Hz) is made at 10 Hz and interpolated, faster noise at the full rate.
    """
    rows = 1 if k is None else k
    work_rate = rate if hi > 1.0 else min(rate, 10.0)
    hi = min(hi, 0.45 * work_rate)
    m = int(math.ceil(n * work_rate / rate)) + 2
    white = rng.standard_normal((rows, m), dtype=_F32)
    if lo <= 0:
        sos = sps.butter(2, hi, btype="lowpass", fs=work_rate, output="sos")
    else:
        sos = sps.butter(2, [lo, hi], btype="bandpass", fs=work_rate, output="sos")
    out = sps.sosfilt(sos.astype(_F32), white, axis=-1).astype(_F32, copy=False)
    sd = out[:, :: max(1, m // 20000)].std(axis=-1)
    out /= np.where(sd > 0, sd, 1.0).astype(_F32)[:, None]
    out = _upsample(out, work_rate, n, rate) if work_rate != rate else out[:, :n]
    return out[0] if k is None else out


def _telegraph(rng: np.random.Generator, n: int, rate: float, mean_on: float, mean_off: float,
               ramp_s: float = 0.4) -> np.ndarray:
    """Process alternating between 0 and 1 with exponential durations (means in s), switching
    smoothly over about ramp_s: (n,) float32."""
    duration = n / rate
    low_rate = 1.0 / ramp_s
    m = int(math.ceil(duration * low_rate)) + 2
    k = int(duration / (mean_on + mean_off) * 1.5) + 8
    while True:
        lengths = np.column_stack([rng.exponential(mean_on, k), rng.exponential(mean_off, k)]).ravel()
        if lengths.sum() > duration + 2 * ramp_s:
            break
        k *= 2
    first_on = rng.random() < mean_on / (mean_on + mean_off)
    if not first_on:
        lengths = lengths[1:]  # start in the off state
    toggles = np.floor(np.cumsum(lengths) * low_rate).astype(np.int64)
    toggles = toggles[toggles < m]
    even = np.cumsum(np.bincount(toggles, minlength=m)) % 2 == 0  # no toggle yet, or two ...
    state = (even == first_on).astype(np.float64)
    return _upsample(state, low_rate, n, rate)


def _events(rng: np.random.Generator, n: int, rate: float, mean_interval: float, width_s: float
            ) -> np.ndarray:
    """Smooth bumps (peak 1, width about width_s) at Poisson times: (n,) float32."""
    duration = n / rate
    low_rate = 10.0
    m = int(math.ceil(duration * low_rate)) + 2
    k = max(1, rng.poisson(duration / mean_interval))
    spikes = np.bincount(rng.integers(0, m, k), minlength=m).astype(np.float64)
    w = max(1, int(round(width_s * low_rate / 2)))
    bump = ndimage.uniform_filter1d(ndimage.uniform_filter1d(spikes, w), w) * w
    return _upsample(np.clip(bump, 0.0, 1.0), low_rate, n, rate)


def _mount_rotation(rng: np.random.Generator, sd_x: float, sd_y: float, sd_z: float
                    ) -> np.ndarray:
    """How a sensor sits on its segment: small rotations about the segment's x, y and z axes
    (normal, standard deviations in degrees, clipped at 2.5 of them): sensor = R @ segment."""
    def angle(sd):
        return math.radians(float(np.clip(rng.normal(0.0, sd), -2.5 * sd, 2.5 * sd)))
    ax, ay, az = angle(sd_x), angle(sd_y), angle(sd_z)
    rx = np.array([[1, 0, 0], [0, math.cos(ax), -math.sin(ax)], [0, math.sin(ax), math.cos(ax)]])
    ry = np.array([[math.cos(ay), 0, math.sin(ay)], [0, 1, 0], [-math.sin(ay), 0, math.cos(ay)]])
    rz = np.array([[math.cos(az), -math.sin(az), 0], [math.sin(az), math.cos(az), 0], [0, 0, 1]])
    return rx @ ry @ rz


def _to_body(ax, ay, az, yaw, pitch, roll):
    """World (heading frame: forward, left, up) vectors into the body frame, yaw-pitch-roll (ZYX)."""
    cy, sy = np.cos(yaw), np.sin(yaw)
    cp, sp = np.cos(pitch), np.sin(pitch)
    cr, sr = np.cos(roll), np.sin(roll)
    x1 = cy * ax + sy * ay
    y1 = -sy * ax + cy * ay
    x2 = cp * x1 - sp * az
    z2 = sp * x1 + cp * az
    return x2, cr * y1 + sr * z2, -sr * y1 + cr * z2


def _body_rates(yaw, pitch, roll, rate):
    """Body angular rate (rad/s) of a yaw-pitch-roll (ZYX) orientation: x, y, z components."""
    dy = np.gradient(yaw) * rate
    dp = np.gradient(pitch) * rate
    dr = np.gradient(roll) * rate
    cp, sp = np.cos(pitch), np.sin(pitch)
    cr, sr = np.cos(roll), np.sin(roll)
    return dr - dy * sp, dp * cr + dy * sr * cp, -dp * sr + dy * cr * cp
