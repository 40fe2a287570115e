"""A crew of pickers who differ strongly from one another (invented demo scenario, with truth).

Built on :func:`labeler.synthetic.simulate_recording` (one picker's shift) and changed afterwards
per person, so that examples confirmed on some people carry over to the others only in part:

- how the watch sits on the wrist: turned about the forearm by a multiple of 90 degrees (on the
  inside or the outside of the wrist, upside down) plus up to 20 degrees of tilt; how the belt clip
  sits around the waist (front, side, back: up to 100 degrees about the vertical) and tilts. Both
  rotate the gravity direction and every axis the sensor sees;
- cadence: the whole shift runs faster or slower (0.8-1.2x), so steps, rungs and gestures come at
  other frequencies and the angular rates scale with them;
- amplitude: the motion part of the acceleration (what is left after a 0.5 s moving mean, the
  posture) is scaled by 0.65-1.5, the angular rates likewise;
- noise: extra white noise of 0.004-0.04 g on the accelerometers and 0.3-3 deg/s on the gyroscopes.

No dropouts (the crew is for measuring how labels carry between people, not for repairs). Every
recording is 50 Hz with the channels of :data:`labeler.synthetic.CHANNELS`. Deterministic by seed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import ndimage

from labeler.errors import ValueInputError
from labeler.synthetic import CHANNELS, SimulatedRecording, simulate_recording

RATE = 50.0
_CREW_SALT = 0x5C4E77  # crew traits depend on the person only, not on the shift's seed


@dataclass(frozen=True)
class CrewTraits:
    """How one crew member differs from the simulator's plain picker."""

    wrist_rotation: np.ndarray  # 3x3, sensor = R @ simulated sensor
    hip_rotation: np.ndarray
    speed: float  # cadence multiplier
    amplitude: float  # motion-part multiplier
    acc_noise: float  # g
    gyr_noise: float  # deg/s


def _rotation(axis: int, deg: float) -> np.ndarray:
    a = math.radians(deg)
    c, s = math.cos(a), math.sin(a)
    i, j = [k for k in range(3) if k != axis]
    R = np.eye(3)
    R[i, i], R[i, j], R[j, i], R[j, j] = c, -s, s, c
    return R


def crew_traits(person: int) -> CrewTraits:
    """The traits of crew member ``person`` (deterministic)."""
    r = np.random.default_rng(np.random.SeedSequence([_CREW_SALT, int(person) & 0xFFFFFFFF]))
    # the watch: a quarter turn about the forearm (x) per person, then a tilt
    turn = 90.0 * int(r.integers(0, 4)) + r.normal(0, 10)
    wrist = _rotation(1, r.uniform(-20, 20)) @ _rotation(2, r.uniform(-20, 20)) @ _rotation(0, turn)
    # the belt clip: around the waist (vertical axis z), then a tilt
    hip = _rotation(0, r.uniform(-15, 15)) @ _rotation(1, r.uniform(-15, 15)) \
        @ _rotation(2, r.uniform(-100, 100))
    return CrewTraits(wrist_rotation=wrist, hip_rotation=hip,
                      speed=float(r.uniform(0.8, 1.2)),
                      amplitude=float(math.exp(r.uniform(math.log(0.65), math.log(1.5)))),
                      acc_noise=float(math.exp(r.uniform(math.log(0.004), math.log(0.04)))),
                      gyr_noise=float(math.exp(r.uniform(math.log(0.3), math.log(3.0)))))


def simulate_member(duration_s: float, *, seed: int, person: int) -> SimulatedRecording:
    """One shift of crew member ``person``: 50 Hz, the 12 simulator channels, truth."""
    tr = crew_traits(person)
    # simulating at RATE / speed and reading the samples as RATE plays the shift at `speed`
    sim = simulate_recording(duration_s * tr.speed, seed=seed, person=person, rate=RATE / tr.speed,
                             dropouts=False, name=f"crew{person:02d}_shift{seed}")
    n = len(sim.frame)
    rng = np.random.default_rng(np.random.SeedSequence([_CREW_SALT, int(seed), int(person), 1]))
    data = {"time": np.arange(n) / RATE}
    width = int(0.5 * RATE)
    for site, R in (("wrist", tr.wrist_rotation), ("hip", tr.hip_rotation)):
        acc = sim.frame[[f"{site}_acc_{a}" for a in "xyz"]].to_numpy(np.float64)
        gyr = sim.frame[[f"{site}_gyr_{a}" for a in "xyz"]].to_numpy(np.float64)
        posture = ndimage.uniform_filter1d(acc, width, axis=0, mode="nearest")
        acc = posture + tr.amplitude * (acc - posture)
        gyr = gyr * (tr.speed * tr.amplitude)
        acc = acc @ R.T + rng.normal(0, tr.acc_noise, acc.shape)
        gyr = gyr @ R.T + rng.normal(0, tr.gyr_noise, gyr.shape)
        for k, a in enumerate("xyz"):
            data[f"{site}_acc_{a}"] = np.clip(acc[:, k], -8.0, 8.0).astype(np.float32)
            data[f"{site}_gyr_{a}"] = np.clip(gyr[:, k], -2000.0, 2000.0).astype(np.float32)
    frame = pd.DataFrame({c: data[c] for c in ("time", *CHANNELS)})
    truth = sim.truth.copy()
    truth["start_s"] = truth["start_s"] / tr.speed
    truth["end_s"] = truth["end_s"] / tr.speed
    truth.loc[truth.index[-1], "end_s"] = n / RATE
    meta = dict(sim.meta, crew=tr)
    return SimulatedRecording(name=sim.name, frame=frame, truth=truth, rate=RATE,
                              start_time=sim.start_time, meta=meta)


def simulate_crew(n_people: int, duration_s: float, *, seed: int) -> list[SimulatedRecording]:
    """One shift of crew members 1..n_people, each ``duration_s`` long."""
    if int(n_people) != n_people or n_people < 1:
        raise ValueInputError(f"n_people must be a whole number >= 1, got {n_people}")
    return [simulate_member(duration_s, seed=seed + k, person=k) for k in range(1, n_people + 1)]
