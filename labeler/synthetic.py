"""Simulated recordings of the invented demo scenario, with ground truth.

Brightwater Orchard is an invented fruit-growers' cooperative (no real people, brands or data sets).
Volunteer pickers on a harvest shift wear two inertial sensors, one on the wrist (like a watch) and one
clipped to the belt at the hip, each with a 3-axis accelerometer (in g, gravity included) and a 3-axis
gyroscope (deg/s), sampled at 50 Hz. Channels: ``wrist_acc_x`` ... ``hip_gyr_z`` (12 columns).

What a shift looks like (activities, the truth labels): ``walking`` between trees and rows,
``carrying`` a full crate to the collection bin (slower steps, a stiff arm, the wrist held differently),
``climbing`` a ladder (slow, vertical, rhythmic), ``picking`` (arm raised, irregular wrist motion, hip
still, with pauses), ``standing``, ``sitting`` on a break, and short ``transition`` periods (1-3 s)
between bouts. Bouts follow a Markov chain of plausible successions with realistic durations.

How the signals are made (all vectorized over samples; the only Python loops are over bouts, which
are few, and over the two sites):

- each body segment (forearm, pelvis) has an orientation over time (yaw, pitch, roll): a posture per
  bout (e.g. forearm hanging, horizontal holding a crate, raised overhead; pelvis upright or reclined
  when sitting) plus the motion of the activity (arm swing at the stride frequency, pelvis rotation,
  reaching for rungs, irregular picking motion, gestures);
- the accelerometer measures gravity plus linear acceleration (vertical bounce and forward/lateral
  sway of gait at the step frequency and its harmonics, pendular arm acceleration, noise of motion),
  both rotated into the segment frame; the gyroscope measures the body angular rate derived from the
  orientation angles (the kinematic equations of yaw-pitch-roll angles);
- each person has their own cadence, arm swing, bounce, lean and vigour, and each sensor sits on the
  body with its own orientation (a random rotation per person and site, fixed for a recording);
- sensor errors: white noise, per-axis bias and scale, slow bias drift, quantization and clipping;
- time stamps with clock drift and jitter; dropouts: short NaN runs (interpolable) and one or two gaps
  of several seconds where rows are missing.

It is meant to be realistically hard: walking with the hands busy and carrying with a crate held at
the side look alike, a picker pausing looks like someone standing with an arm raised, and sitting
upright with the hands in the lap is close to standing; nothing separates the classes with one
feature. Deterministic by seed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd

from labeler.synthetic_parts import (_F32, _band_noise, _body_rates, _events, _mount_rotation, _rng,
                                     _telegraph, _to_body, _upsample)

from labeler.errors import ValueInputError

BOUT_ACTIVITIES: tuple[str, ...] = ("walking", "carrying", "climbing", "picking", "standing",
                                    "sitting")
TRANSITION = "transition"
ACTIVITIES: tuple[str, ...] = BOUT_ACTIVITIES + (TRANSITION,)

SITES = ("wrist", "hip")
CHANNELS: tuple[str, ...] = tuple(f"{site}_{kind}_{axis}" for site in SITES for kind in ("acc", "gyr")
                                  for axis in "xyz")

G = 9.80665  # m/s² per g
_WALK, _CARRY, _CLIMB, _PICK, _STAND, _SIT = range(6)
_TRANS = 6

# Markov chain of successions (rows: from, columns: to, in BOUT_ACTIVITIES order). Invented but
# plausible: walk to a tree, climb the ladder, pick, climb down, carry the crate to the bin, stand
# while it is emptied, walk back; a break now and then.
_SUCCESSION = np.array([
    # walk  carry climb pick  stand sit
    [0.00, 0.10, 0.20, 0.40, 0.20, 0.10],  # walking
    [0.45, 0.00, 0.00, 0.00, 0.50, 0.05],  # carrying
    [0.25, 0.00, 0.00, 0.65, 0.10, 0.00],  # climbing
    [0.20, 0.30, 0.20, 0.00, 0.25, 0.05],  # picking
    [0.45, 0.15, 0.05, 0.25, 0.00, 0.10],  # standing
    [0.50, 0.00, 0.00, 0.00, 0.50, 0.00],  # sitting
])
# bout durations: log-normal (median s, sigma of log), clipped to [min s, max s]
_DURATION = {
    _WALK: (35.0, 0.6, 8.0, 300.0),
    _CARRY: (30.0, 0.5, 10.0, 150.0),
    _CLIMB: (12.0, 0.4, 5.0, 45.0),
    _PICK: (110.0, 0.7, 20.0, 600.0),
    _STAND: (25.0, 0.7, 6.0, 240.0),
    _SIT: (150.0, 0.8, 30.0, 1200.0),
}
_FIRST = np.array([0.45, 0.0, 0.0, 0.10, 0.45, 0.0])
_PERSON_SALT = 0xB21647  # person traits do not depend on the shift's seed
_BASE_DATE = datetime(2026, 9, 14, 6, 30, tzinfo=timezone.utc)  # invented harvest day


@dataclass
class SimulatedRecording:
    name: str  # e.g. "picker03_shift1"
    frame: pd.DataFrame  # column "time" (s from start, jittered, float64) then the 12 channels
    truth: pd.DataFrame  # columns start_s, end_s, activity (contiguous, covering the recording)
    rate: float
    start_time: str  # ISO-8601 UTC
    meta: dict = field(default_factory=dict)  # person traits, gaps, dropouts (for tests and docs)


# --------------------------------------------------------------------------------------------
# the scenario


@dataclass
class _Person:
    step_freq: float  # walking steps per second
    carry_factor: float  # carrying cadence relative to walking
    climb_freq: float  # rungs per second
    intensity: float  # scales linear accelerations
    swing: float  # arm swing amplitude, rad
    bounce: float  # vertical hip acceleration amplitude of gait, g
    sit_lean: float  # pelvis reclined when sitting, deg
    roll_offset: float  # how the forearm is usually turned, deg
    vigour: float  # picking and gesturing motion
    swing_phase: float


def _person(person: int) -> _Person:
    r = _rng(_PERSON_SALT, person)
    return _Person(
        step_freq=float(np.clip(r.normal(1.85, 0.11), 1.55, 2.15)),
        carry_factor=float(r.uniform(0.84, 0.95)),
        climb_freq=float(r.uniform(0.55, 0.85)),
        intensity=float(np.clip(np.exp(r.normal(0.0, 0.12)), 0.8, 1.25)),
        swing=float(r.uniform(0.22, 0.45)),
        bounce=float(r.uniform(0.22, 0.34)),
        sit_lean=float(r.uniform(8.0, 28.0)),
        roll_offset=float(r.uniform(-20.0, 20.0)),
        vigour=float(np.clip(np.exp(r.normal(0.0, 0.2)), 0.7, 1.4)),
        swing_phase=float(r.uniform(0, 2 * np.pi)),
    )


def _bouts(rng: np.random.Generator, duration_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Activity codes and durations (s) of bouts and transitions covering duration_s."""
    codes, lengths = [], []
    total = 0.0
    a = int(rng.choice(6, p=_FIRST))
    while total < duration_s:
        med, sig, lo, hi = _DURATION[a]
        d = float(np.clip(med * math.exp(rng.normal(0.0, sig)), lo, hi))
        codes.append(a)
        lengths.append(d)
        total += d
        if total >= duration_s:
            break
        t = float(rng.uniform(1.0, 3.0))
        codes.append(_TRANS)
        lengths.append(t)
        total += t
        a = int(rng.choice(6, p=_SUCCESSION[a]))
    lengths[-1] -= total - duration_s
    if lengths[-1] <= 0 and len(lengths) > 1:  # the last piece is empty: drop it
        codes.pop()
        lengths.pop()
        lengths[-1] += duration_s - sum(lengths)
    return np.array(codes, dtype=np.int64), np.array(lengths, dtype=np.float64)


def _bout_parameters(rng: np.random.Generator, codes: np.ndarray, p: _Person) -> dict[str, np.ndarray]:
    """Posture and motion parameters per bout (NaN for transitions: interpolated later)."""
    nb = codes.size
    u = rng.random((nb, 8))
    nrm = rng.standard_normal((nb, 8))
    par = {k: np.zeros(nb) for k in (
        "freq", "gait", "climb", "swing", "w_pitch", "w_roll", "h_pitch", "h_roll", "pick",
        "fidget", "sway", "bounce")}
    ro = p.roll_offset
    for i, a in enumerate(codes):  # loop over bouts (few), not samples
        n, v = nrm[i], u[i]
        P = {}
        if a == _WALK:
            busy = v[0] < 0.18  # hands busy (phone, bag, pockets): little arm swing
            P = dict(freq=p.step_freq * (1 + 0.04 * n[0]), gait=1.0,
                     swing=p.swing * math.exp(0.3 * n[1]) * (0.25 if busy else 1.0),
                     w_pitch=(35 + 20 * n[2]) if busy else (80 + 7 * n[2]),
                     w_roll=(ro + 40 * n[3]) if busy else (90 + ro / 2 + 15 * n[3]),
                     h_pitch=3 + 2 * n[4], h_roll=2 * n[5], fidget=0.3,
                     bounce=p.bounce * math.exp(0.12 * n[6]))
        elif a == _CARRY:
            side = v[0] < 0.35  # crate or bucket held at the side by one hand
            P = dict(freq=p.step_freq * p.carry_factor * (1 + 0.04 * n[0]), gait=1.0,
                     swing=(0.06 + 0.06 * v[1]) if side else (0.02 + 0.03 * v[1]),
                     w_pitch=(84 + 4 * n[2]) if side else (15 + 12 * n[2]),
                     w_roll=(90 + 12 * n[3]) if side else (90 + 80 * (v[2] < 0.5) + 20 * n[3]),
                     h_pitch=(2 + 3 * n[4]) if side else (-2 + 3 * n[4]),
                     h_roll=(4 + 2 * n[5]) if side else 2 * n[5], fidget=0.2,
                     bounce=p.bounce * 0.85 * math.exp(0.15 * n[6]))
        elif a == _CLIMB:
            P = dict(freq=p.climb_freq * (1 + 0.06 * n[0]), climb=1.0, swing=0.0,
                     w_pitch=-35 + 15 * n[2], w_roll=90 + ro + 30 * n[3], h_pitch=10 + 5 * n[4],
                     h_roll=3 * n[5], fidget=0.3, bounce=0.0)
        elif a == _PICK:
            low = v[0] < 0.25  # low branches: arm near horizontal
            P = dict(freq=1.0, pick=min(1.5, p.vigour * math.exp(0.2 * n[1])),
                     w_pitch=(0 + 20 * n[2]) if low else (-55 + 18 * n[2]), w_roll=ro + 50 * n[3],
                     h_pitch=-3 + 4 * n[4], h_roll=3 * n[5], fidget=0.0, sway=1.0)
        elif a == _STAND:
            k = v[0]
            if k < 0.55:  # arms hanging
                wp, wr = 82 + 7 * n[2], 90 + ro / 2 + 20 * n[3]
            elif k < 0.9:  # hands in front, arms crossed
                wp, wr = 10 + 20 * n[2], ro + 70 * n[3]
            else:  # a hand raised: holding a branch or the ladder
                wp, wr = -40 + 15 * n[2], ro + 50 * n[3]
            P = dict(freq=1.0, w_pitch=wp, w_roll=wr, h_pitch=1 + 3 * n[4], h_roll=2 * n[5],
                     fidget=min(1.5, p.vigour * math.exp(0.4 * n[1])), sway=0.7)
        elif a == _SIT:
            P = dict(freq=1.0, w_pitch=8 + 20 * n[2], w_roll=ro + 60 * n[3],
                     h_pitch=-(p.sit_lean + 7 * n[4]), h_roll=4 * n[5],
                     fidget=min(1.5, p.vigour * 1.1 * math.exp(0.4 * n[1])), sway=0.3)
        if a == _TRANS:
            for k in par:
                par[k][i] = np.nan
        else:
            for k, val in P.items():
                par[k][i] = val
    return par


_PARAMS = ("freq", "gait", "climb", "swing", "w_pitch", "w_roll", "h_pitch", "h_roll", "pick",
           "fidget", "sway", "bounce")


def _bout_curves(codes: np.ndarray, edges: np.ndarray, par: dict[str, np.ndarray], n: int,
                 rate: float) -> dict[str, np.ndarray]:
    """Bout parameters per sample: constant inside a bout, blending smoothly (smoothstep) across
    the transition between two bouts and 0.3 s into each of them. float32 (n,) each."""
    bouts = np.flatnonzero(codes != _TRANS)
    lo, hi = edges[bouts].astype(np.float64), edges[bouts + 1].astype(np.float64)
    eps = np.minimum(0.3 * rate, (hi - lo) / 4)
    knots = np.column_stack([lo + eps, hi - eps]).ravel()
    values = np.repeat(np.column_stack([par[k][bouts] for k in _PARAMS]), 2, axis=0)
    pos = np.interp(np.arange(n, dtype=np.float64), knots, np.arange(knots.size, dtype=np.float64))
    j = np.minimum(pos.astype(np.int64), knots.size - 2)
    fr = (pos - j).astype(_F32)
    sm = fr * fr * (3 - 2 * fr)
    out = {}
    for i, k in enumerate(_PARAMS):
        v = values[:, i].astype(_F32)
        a = v[j]
        d = v[j + 1] - a
        d *= sm
        d += a
        out[k] = d
    return out


def simulate_recording(duration_s: float, *, seed: int, person: int = 0, rate: float = 50.0,
                       dropouts: bool = True, name: str | None = None) -> SimulatedRecording:
    """One recording of one picker: both sensors, ground truth, dropouts. Deterministic by seed.

    The person's traits (cadence, swing, vigour ...) depend on ``person`` only; the activities,
    the sensor orientation on the body, the noise and the dropouts on ``seed`` and ``person``.
    Rows are missing inside the longer gaps; short dropouts are NaN runs.
    """
    if not (duration_s > 0):
        raise ValueInputError(f"duration must be > 0 s, got {duration_s}")
    if not (10.0 <= rate <= 1000.0):
        raise ValueInputError(f"rate must be within 10-1000 Hz, got {rate}")
    rate = float(rate)
    p = _person(person)
    rng = _rng(seed, person, 1)
    n = max(2, int(round(duration_s * rate)))
    duration_s = n / rate

    # ---- bouts and their parameters
    codes, lengths = _bouts(rng, duration_s)
    edges = np.round(np.concatenate([[0.0], np.cumsum(lengths)]) * rate).astype(np.int64)
    edges[-1] = n
    keep = np.diff(edges) > 0
    if not keep.all():  # rounding made a piece empty
        codes, edges = codes[keep], np.concatenate([[0], edges[1:][keep]])
    nseg = codes.size
    par = _bout_parameters(rng, codes, p)
    ps = _bout_curves(codes, edges, par, n, rate)

    # transitions: a burst of movement; standing up, sitting down and lifting or setting down a
    # crate bend the trunk forward
    t_idx = np.flatnonzero(codes == _TRANS)
    nb = np.stack([codes[np.maximum(t_idx - 1, 0)], codes[np.minimum(t_idx + 1, nseg - 1)]])
    heavy = ((nb == _SIT) | (nb == _CARRY)).any(axis=0)
    bend_amp = np.where(heavy, rng.uniform(25.0, 45.0, t_idx.size), 12.0)
    samples = np.arange(n, dtype=np.float64)
    if t_idx.size:
        tk = np.column_stack([edges[t_idx], (edges[t_idx] + edges[t_idx + 1]) / 2,
                              edges[t_idx + 1]]).ravel().astype(np.float64)
        tri = np.interp(samples, tk, np.tile([0.0, 1.0, 0.0], t_idx.size)).astype(_F32)
        trans_env = 0.5 - 0.5 * np.cos(np.pi * tri)
        bend = trans_env * np.interp(samples, tk, np.repeat(bend_amp, 3)).astype(_F32)
    else:
        trans_env = np.zeros(n, _F32)
        bend = trans_env
    del samples

    # ---- shared phase of rhythmic activity (steps or rungs), with slow cadence wander
    f_inst = ps["freq"] * (1 + 0.025 * _band_noise(rng, n, 0.0, 0.05, rate))
    phase = np.cumsum(f_inst, dtype=np.float64) * (2 * np.pi / rate)
    ph = np.mod(phase, 4 * np.pi).astype(_F32)  # 4 pi keeps the half-frequency stride phase
    del phase

    # irregular motion sources
    pick_gate = 0.15 + 0.85 * _telegraph(rng, n, rate, 6.0, 2.5)  # reaching vs pausing
    drops = _events(rng, n, rate, 10.0, 1.6)  # lowering the hand to the picking bag
    gestures = _telegraph(rng, n, rate, 2.5, 9.0)  # gesturing, eating, adjusting
    hand_to_mouth = _events(rng, n, rate, 45.0, 2.0)
    mot = _band_noise(rng, n, 0.2, 1.6, rate, 3)  # wrist angular motion
    mot_fast = _band_noise(rng, n, 0.8, 5.0, rate, 3)  # wrist linear acceleration
    sway = _band_noise(rng, n, 0.05, 0.6, rate, 3)  # postural sway
    burst = _band_noise(rng, n, 0.5, 3.0, rate, 6)  # transitions
    hip_irreg = _band_noise(rng, n, 0.5, 4.0, rate, 3)  # uneven ground, load shifting
    step_var = 1 + 0.15 * _band_noise(rng, n, 0.0, 0.5, rate)  # step-to-step variability

    deg = np.float32(np.pi / 180)
    gait, climb, pick = ps["gait"], ps["climb"], ps["pick"]
    c1, c2, c3 = np.cos(ph), np.cos(2 * ph + 0.8), np.cos(3 * ph + 2.0)
    s_half = ph / 2
    # ---- pelvis (hip sensor); linear acceleration in g, heading frame (forward, left, up)
    bounce = ps["bounce"] * p.intensity * gait * step_var
    vert = bounce * (0.55 * c1 + 0.25 * c2 + 0.10 * c3)
    fwd = bounce * 0.45 * (np.cos(ph - 1.2) + 0.35 * np.cos(2 * ph + 0.3))
    lat = bounce * 0.30 * np.cos(s_half + 0.5)
    cb = climb * (0.15 * p.intensity)
    vert += cb * (0.8 * c1 + 0.3 * np.cos(2 * ph + 0.5))
    fwd += climb * 0.03 * np.cos(ph + 1.0)
    lat += climb * 0.08 * np.cos(s_half)
    irr = 0.04 * p.intensity * (gait + climb) + 0.15 * trans_env
    vert += irr * hip_irreg[0] + 0.01 * ps["sway"] * hip_irreg[1]
    fwd += irr * hip_irreg[1]
    lat += irr * hip_irreg[2]
    h_pitch = (ps["h_pitch"] + bend + gait * 1.5 * np.cos(ph + 0.3) + climb * 3 * c1
               + ps["sway"] * 1.2 * sway[0] + 0.3 * sway[1] + 6 * trans_env * burst[0])
    h_roll = (ps["h_roll"] + (gait * 3 + climb * 5) * np.cos(s_half)
              + ps["sway"] * sway[1] + 5 * trans_env * burst[1])
    h_yaw = (gait * 4 * np.cos(s_half + 1.0) + climb * 2 * np.cos(s_half) + 2 * sway[2]
             + 15 * trans_env * burst[2])
    hip = (vert, fwd, lat, h_yaw * deg, h_pitch * deg, h_roll * deg)

    # ---- forearm (wrist sensor)
    swing_amp = ps["swing"] * gait * step_var
    s_phase = s_half + np.float32(p.swing_phase)
    sin_s = np.sin(s_phase)
    swing = swing_amp * sin_s  # rad, about the shoulder
    arm = 0.6  # m, shoulder to wrist
    omega2 = (np.pi * f_inst.astype(_F32)) ** 2 / G  # (stride angular frequency)^2, per g
    swing_acc = -arm * swing * omega2  # pendular tangential acceleration of the wrist, g
    reach = climb * 25 * sin_s  # deg: a hand moves up a rung every other step
    reach_acc = -arm * (reach * deg) * omega2
    pick_amp = pick * pick_gate
    fid = ps["fidget"] * gestures
    eats = np.clip((ps["fidget"] - 0.3) / 0.4, 0, 1) * hand_to_mouth
    wp = ps["w_pitch"]
    w_pitch = (wp - swing / deg + reach + pick_amp * 14 * mot[0] + fid * 10 * mot[1]
               + pick * drops * (95 - wp) * 0.7 - eats * (wp + 55) * 0.8
               + 15 * trans_env * burst[3] + sway[0])
    w_roll = (ps["w_roll"] + reach * 0.4 + pick_amp * 20 * mot[1] + fid * 14 * mot[2]
              + 20 * trans_env * burst[4] + 2 * sway[1])
    w_yaw = (gait * 6 * sin_s + pick_amp * 10 * mot[2] + fid * 8 * mot[0]
             + 20 * trans_env * burst[5] + 3 * sway[2])
    lin = (0.10 * pick_amp + 0.04 * fid + 0.12 * trans_env) * p.intensity
    w_vert = 0.8 * vert + 0.5 * swing_acc * np.sin(swing) + 0.5 * reach_acc + lin * mot_fast[0]
    w_fwd = 0.6 * fwd + swing_acc * np.cos(swing) + 0.3 * reach_acc + lin * mot_fast[1]
    w_lat = 0.6 * lat + lin * mot_fast[2]
    wrist = (w_vert, w_fwd, w_lat, w_yaw * deg, w_pitch * deg, w_roll * deg)
    del ps, c1, c2, c3, mot, mot_fast, sway, burst, hip_irreg

    # ---- sensors
    srng = _rng(seed, person, 2)
    # a watch turns a little about the forearm and tilts on the wrist; a belt clip sits further
    # front or back around the waist (about the vertical) and tilts with the belt
    mounts = {"wrist": _mount_rotation(srng, 10.0, 6.0, 6.0),
              "hip": _mount_rotation(srng, 6.0, 6.0, 25.0)}
    data = np.empty((len(CHANNELS), n), dtype=_F32)  # one contiguous row per channel
    knots = max(2, int(duration_s / 30.0) + 2)  # bias drift: a random walk, one step per 30 s
    drift_rate = (knots - 1) / duration_s
    for site, (v, f, l, yaw, pitch, roll) in (("wrist", wrist), ("hip", hip)):
        acc = _to_body(f, l, v + 1, yaw, pitch, roll)  # specific force in g (gravity is +1 g up)
        gyr = _body_rates(yaw, pitch, roll, rate)  # rad/s
        r = mounts[site]
        for kind, body, unit, sd_bias, sd_drift, sd_white, lsb, full in (
                ("acc", acc, 1.0, 0.012, 0.002, 0.006, 4096.0, 8.0),
                ("gyr", gyr, 180 / np.pi, 0.8, 0.08, 0.35, 16.4, 2000.0)):
            drift = _upsample(np.cumsum(srng.normal(0, sd_drift, (3, knots)), axis=1),
                              drift_rate, n, rate)
            scale = 1 + srng.normal(0, 0.01, 3)
            bias = srng.normal(0, sd_bias, 3)
            white = srng.standard_normal((3, n), dtype=_F32)
            row = CHANNELS.index(f"{site}_{kind}_x")
            for j in range(3):
                # sensor axis j: the mount rotation, scale error, bias, drift, white noise,
                # then quantization and clipping
                g = _F32(unit * scale[j])
                out = data[row + j]
                np.multiply(body[0], _F32(r[j, 0]) * g, out=out)
                out += body[1] * (_F32(r[j, 1]) * g)
                out += body[2] * (_F32(r[j, 2]) * g)
                out += drift[j]
                out += white[j] * _F32(sd_white)
                out += _F32(bias[j])
                out *= _F32(lsb)
                np.round(out, out=out)
                out *= _F32(1 / lsb)
                np.clip(out, -full, full, out=out)
        del acc, gyr

    # ---- time stamps: clock drift and jitter (kept monotonic)
    ppm = srng.uniform(-40e-6, 40e-6)
    jitter = np.clip(srng.normal(0, 0.08 / rate, n), -0.3 / rate, 0.3 / rate)
    jitter[0] = 0.0
    time = np.arange(n) / rate * (1 + ppm) + jitter

    keep_rows = np.ones(n, dtype=bool)
    short_runs, gaps = [], []
    if dropouts:
        drng = _rng(seed, person, 3)
        # short NaN runs (radio packets lost): one site or both, 0.06-0.6 s
        for _ in range(max(1, int(drng.poisson(duration_s / 300.0)))):
            m = int(drng.uniform(0.06, 0.6) * rate) + 1
            if n <= m + 2:
                break
            a = int(drng.integers(1, n - m - 1))
            which = int(drng.integers(0, 3))  # 0 wrist, 1 hip, 2 both
            rows = slice(0, 6) if which == 0 else slice(6, 12) if which == 1 else slice(0, 12)
            data[rows, a:a + m] = np.nan
            short_runs.append((a, a + m))
        # one or two longer gaps, 3-12 s, with the rows missing (sensor out of range, restart)
        if duration_s >= 60.0:
            margin = int(rate)
            for _ in range(1 if drng.random() < 0.5 else 2):
                m = int(drng.uniform(3.0, 12.0) * rate)
                lo_a, hi_a = int(0.05 * n), max(int(0.05 * n) + 1, int(0.95 * n) - m)
                for _try in range(20):
                    a = int(drng.integers(lo_a, hi_a))
                    if keep_rows[max(0, a - margin):a + m + margin].all():
                        keep_rows[a:a + m] = False
                        gaps.append((float(time[a - 1]), float(time[a + m])))
                        break
    cols = {"time": time if keep_rows.all() else time[keep_rows]}
    for i, c in enumerate(CHANNELS):
        cols[c] = data[i] if keep_rows.all() else data[i][keep_rows]
    frame = pd.DataFrame(cols, copy=False)

    truth = pd.DataFrame({"start_s": edges[:-1] / rate, "end_s": edges[1:] / rate,
                          "activity": [ACTIVITIES[c] for c in codes]})
    start = _BASE_DATE + timedelta(days=int(seed) % 30,
                                   minutes=float(_rng(seed, person, 4).uniform(0, 20)))
    return SimulatedRecording(
        name=name if name is not None else f"picker{person:02d}_shift{seed}",
        frame=frame, truth=truth, rate=rate,
        start_time=start.strftime("%Y-%m-%dT%H:%M:%SZ"),
        meta={"person": p, "short_dropouts": short_runs, "gaps_s": gaps, "mounts": mounts,
              "clock_ppm": ppm},
    )


def simulate_shift(n_people: int, duration_s: float, *, seed: int) -> list[SimulatedRecording]:
    """One harvest shift: a recording for each of pickers 1..n_people, all of duration_s."""
    return [simulate_recording(duration_s, seed=seed, person=k) for k in range(1, n_people + 1)]


def window_truth(truth: pd.DataFrame, starts_s: np.ndarray, stops_s: np.ndarray) -> np.ndarray:
    """The activity that covers the largest part of each window [start, stop) (object array).

    None for a window that no truth interval overlaps; a tie goes to the alphabetically first.
    """
    starts_s = np.asarray(starts_s, dtype=np.float64).reshape(-1)
    stops_s = np.asarray(stops_s, dtype=np.float64).reshape(-1)
    out = np.full(starts_s.size, None, dtype=object)
    if truth.empty or starts_s.size == 0:
        return out
    t = truth.sort_values("start_s", kind="stable")
    a = t["start_s"].to_numpy(np.float64)
    b = t["end_s"].to_numpy(np.float64)
    labels, codes = np.unique(t["activity"].astype(str).to_numpy(), return_inverse=True)
    first = np.searchsorted(b, starts_s, side="right")  # first interval ending after the start
    last = np.searchsorted(a, stops_s, side="left") - 1  # last interval starting before the stop
    span = int(np.max(last - first, initial=0)) + 1
    cover = np.zeros((starts_s.size, labels.size))
    rows = np.arange(starts_s.size)
    for k in range(span):  # loop over the few intervals a window can touch
        i = first + k
        ok = (i <= last) & (i < a.size)
        ii = np.where(ok, i, 0)
        ov = np.minimum(stops_s, b[ii]) - np.maximum(starts_s, a[ii])
        ov = np.where(ok, np.maximum(ov, 0.0), 0.0)
        np.add.at(cover, (rows, codes[ii]), ov)
    best = np.argmax(cover, axis=1)
    has = cover[rows, best] > 0
    out[has] = labels[best[has]]
    return out
