"""What label spreading says about each window: a plain record of arrays.

Kept apart from :mod:`labeler.spreading` so that reading stored proposals (the review queue,
`labeler queue`) needs neither scikit-learn nor the solver.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class WindowOutputs:
    """What spreading says about each window (arrays of length n_windows unless noted).

    label: proposed class code (the confirmed one for confirmed windows).
    distribution: (n_windows, n_classes) normalized scores, columns in ``classes`` order.
    confidence: probability of ``label`` in ``distribution`` (0 where nothing reached the window).
    margin: top probability minus the second one.
    support: label mass received relative to :func:`reference_mass`, in [0, 1]; low means no
        confirmed window nearby.
    conflict: for confirmed windows, the weighted share of graph neighbours whose distribution
        does not back the confirmed label (0..1); 0 for unconfirmed windows.
    """

    classes: np.ndarray
    label: np.ndarray
    distribution: np.ndarray
    confidence: np.ndarray
    margin: np.ndarray
    support: np.ndarray
    conflict: np.ndarray
