"""The physics check of acceleration units: at rest an accelerometer reads 1 g.

A body-worn accelerometer that includes gravity reads |acc| = 1 g (9.80665 m/s², 1000 mg) whenever
the body part is still, so the level of the quietest stretches of a recording says its unit: a file
whose level is 9.8 in "g" is in m/s², one whose level is 1000 is in mg. The level is the median
|acc| of the quietest tenth of short blocks (about 1 s), robust to motion because even a busy
recording has still moments and a moving limb averages to about 1 g.

:func:`judge_level` decides: the level fits the unit (nothing to do), another unit fits (convert when
the unit was assumed, refuse when it was stated), the level is far below 1 g (gravity removed: noted,
the unit cannot be checked), or it fits no unit (refuse unless the unit was stated).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from labeler.channels import UNIT_FACTORS

# |acc| at rest in g for a sensor that is still: 1 g; the band allows calibration offsets of
# consumer sensors and slow movement in the quietest blocks (common practice, no source)
REST_BAND_G = (0.7, 1.6)
# below this the sensor reports linear acceleration (gravity removed by the device)
NO_GRAVITY_G = 0.5
BLOCK = 32
CANDIDATES = ("g", "m/s2", "mg")


def rest_level(magnitude: np.ndarray, block: int = BLOCK) -> float | None:
    """Median |acc| of the quietest tenth of blocks of ``block`` samples; None if too short."""
    m = np.asarray(magnitude, dtype=np.float64)
    return finite_rest_level(m[np.isfinite(m)], block)


def finite_rest_level(m: np.ndarray, block: int = BLOCK) -> float | None:
    """:func:`rest_level` of magnitudes that are all finite (float64)."""
    if m.size < 8:
        return None
    block = min(block, max(4, m.size // 4))
    nb = m.size // block
    blocks = m[: nb * block].reshape(nb, block)
    quiet = _smallest(_row_std(blocks), max(1, nb // 10))
    return float(np.median(blocks[quiet].mean(axis=1)))


#: values a step of _row_std reads at a time (its temporaries stay in the cache)
_ROWS_AT_A_TIME = 1 << 15


def _row_std(blocks: np.ndarray) -> np.ndarray:
    """``blocks.std(axis=1)``, a few rows at a time: each row's the same, computed in the cache."""
    rows = max(1, _ROWS_AT_A_TIME // max(1, blocks.shape[1]))
    if blocks.shape[0] <= rows:
        return blocks.std(axis=1)
    out = np.empty(blocks.shape[0], dtype=np.float64)
    for a in range(0, blocks.shape[0], rows):
        out[a:a + rows] = blocks[a:a + rows].std(axis=1)
    return out


def _smallest(values: np.ndarray, k: int) -> np.ndarray:
    """The indices of the k smallest values, ties going to the lower index: the first k of a
    stable argsort, as a set (in another order), from one partition instead of a sort."""
    if k >= values.size:
        return np.arange(values.size)
    kth = np.partition(values, k - 1)[k - 1]
    if np.isnan(kth):  # fewer than k numbers: NaN sorts last, as in the sort
        return np.argsort(values, kind="stable")[:k]
    below = np.flatnonzero(values < kth)
    tied = np.flatnonzero(values == kth)[: k - below.size]
    return np.concatenate([below, tied])


@dataclass
class Verdict:
    action: str             # "ok", "convert", "refuse", "note"
    level_g: float          # the level read in the unit as given
    unit: str               # the unit the values are in (after the verdict)
    fitted_level_g: float | None = None  # the level in `unit` when it differs from the given one


def judge_level(level_g: float, unit: str, stated: bool) -> Verdict:
    """What to do with an acceleration triad whose level at rest is ``level_g`` read in ``unit``."""
    lo, hi = REST_BAND_G
    if lo <= level_g <= hi:
        return Verdict("ok", level_g, unit)
    raw = level_g / UNIT_FACTORS["acc"][unit]  # the level in the file's numbers
    for other in CANDIDATES:
        if other == unit:
            continue
        fitted = raw * UNIT_FACTORS["acc"][other]
        if lo <= fitted <= hi:
            return Verdict("refuse" if stated else "convert", level_g, other, fitted)
    if level_g < NO_GRAVITY_G or stated:
        return Verdict("note", level_g, unit)
    return Verdict("refuse", level_g, unit)
