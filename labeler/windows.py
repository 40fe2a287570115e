"""Cutting a recording into windows.

Defaults: windows of 2.56 s with a step of 1.28 s (50 % overlap). At 50 Hz that is 128 samples, a
power of two for the spectrum, long enough to hold two or more strides of walking (cadence is about
1.6-2 steps/s) and short enough that most bouts of daily activity span many windows. This is common
practice in human activity recognition, no source; 2-5 s windows with 50 % overlap are the usual range.
"""

from __future__ import annotations

import math

from labeler.errors import InputError, ValueInputError

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

DEFAULT_LENGTH_S = 2.56
DEFAULT_STEP_S = 1.28
MAX_SECONDS = 3600.0  # an hour: longer windows hold several activities


def _seconds(value) -> float | None:
    """``value`` as a float, None when it is no number at all."""
    if isinstance(value, bool):
        return None
    try:
        return float(value)
    except (TypeError, ValueError):
        return None


def check_window_settings(length_s, step_s) -> tuple[float, float]:
    """The window length and step of a project, checked; InputError names the option and the fix.

    Both must be finite numbers of seconds, > 0 and at most an hour, and the step no longer than
    the window (a longer step would leave samples between windows that no window holds).
    """
    length, step = _seconds(length_s), _seconds(step_s)
    if length is None or not (0 < length <= MAX_SECONDS):
        shown = length_s if length is None else f"{length:g}"
        raise InputError(f"--window {shown}: the window length must be a number of seconds > 0 "
                         f"and at most {MAX_SECONDS:g}; give e.g. --window {DEFAULT_LENGTH_S:g}")
    if step is None or not (0 < step <= MAX_SECONDS):
        shown = step_s if step is None else f"{step:g}"
        raise InputError(f"--step {shown}: the step between windows must be a number of seconds "
                         f"> 0 and at most {MAX_SECONDS:g}; give e.g. --step {DEFAULT_STEP_S:g}")
    if step > length:
        raise InputError(f"--step {step:g}: longer than the window ({length:g} s), so samples "
                         f"between windows would never be labeled; give a step of at most "
                         f"{length:g}")
    return length, step


def window_samples(rate: float, length_s: float, step_s: float) -> tuple[int, int]:
    """Window length and step in samples (at least one sample each)."""
    if not (0 < rate < math.inf):
        raise ValueInputError(f"sampling rate must be > 0, got {rate}")
    if not (0 < length_s < math.inf):
        raise ValueInputError(f"window length must be > 0 s and finite, got {length_s}")
    if not (0 < step_s < math.inf):
        raise ValueInputError(f"window step must be > 0 s and finite, got {step_s}")
    if step_s > length_s:
        raise ValueInputError(f"window step {step_s} s must not be longer than the window {length_s} s")
    length = max(1, int(round(length_s * rate)))
    step = max(1, int(round(step_s * rate)))
    return length, step


def cut_windows(valid: np.ndarray, length: int, step: int) -> np.ndarray:
    """Start samples of windows of ``length`` samples every ``step`` samples.

    ``valid`` marks the samples that hold signal (False inside gaps); a window never covers an
    invalid sample. After a gap the grid restarts at the first valid sample.
    Returns an int64 array of start indices, in increasing order.
    """
    valid = np.asarray(valid, dtype=bool)
    n = valid.size
    if n == 0:
        return np.empty(0, dtype=np.int64)
    # runs of valid samples
    padded = np.concatenate([[False], valid, [False]])
    edges = np.flatnonzero(padded[1:] != padded[:-1])
    run_starts, run_stops = edges[0::2], edges[1::2]
    parts = []
    for a, b in zip(run_starts, run_stops):  # loop over gaps, not windows
        if b - a >= length:
            parts.append(np.arange(a, b - length + 1, step, dtype=np.int64))
    if not parts:
        return np.empty(0, dtype=np.int64)
    return np.concatenate(parts)


def window_view(signal: np.ndarray, starts: np.ndarray, length: int) -> np.ndarray:
    """Copy of the windows of a (n_samples, n_channels) signal as a (n_windows, length, n_channels) array."""
    signal = np.asarray(signal)
    idx = np.asarray(starts, dtype=np.int64)[:, None] + np.arange(length)[None, :]
    return signal[idx]
