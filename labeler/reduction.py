"""Window features made comparable: the one feature check, standardizing and PCA.

Shared by the window graph (:mod:`labeler.graph`), the map (:mod:`labeler.embedding`) and the app's
stand-in map, so that all three see the same axes.

- :func:`check_features`: a real, finite, 2-D matrix (windows x features), or a one-line error
  naming the window and the feature column.
- :func:`fit_reduction` / :func:`apply_reduction`: each column standardized to mean 0 and standard
  deviation 1 (constant columns stay 0), then projected onto the principal axes of the covariance
  matrix, computed in float64 in one pass over the windows (memory of n_features², exact). Signs are
  fixed so that the largest loading of each axis is positive, as scikit-learn does.
"""

from __future__ import annotations

import numpy as np

from labeler.errors import InputError

#: Upper bound on the number of PCA axes kept when none is asked for (common practice, no source:
#: 50 is the usual number before t-SNE in its literature, e.g. Kobak & Berens 2019).
MAX_COMPONENTS = 50

_BLOCK_VALUES = 8_000_000  # matrix entries converted to float64 at once


class FeatureInputError(InputError, ValueError):
    """Bad feature matrix (also a ValueError, as scikit-learn conventions expect)."""


def check_features(X, *, what: str = "features", task: str = "continue", min_windows: int = 1,
                   dtype=np.float32, error: type[Exception] = FeatureInputError) -> np.ndarray:
    """X as a C-contiguous ``dtype`` array after checking that it is a real, finite 2-D matrix of at
    least ``min_windows`` rows; else ``error`` with one line (``task``: what needs the windows, as
    in "need at least 2 windows to <task>")."""
    X = np.asarray(X)
    if X.ndim != 2:
        raise error(f"{what} must be a 2-D array (windows x features), got shape {X.shape}")
    if X.shape[0] < min_windows:
        raise error(f"need at least {min_windows} windows to {task}, got {X.shape[0]}")
    if X.shape[1] < 1:
        raise error(f"{what} have no column; compute features before you {task}")
    if not np.issubdtype(X.dtype, np.number) or np.issubdtype(X.dtype, np.complexfloating):
        raise error(f"{what} must be real numbers, got dtype {X.dtype}")
    X = np.ascontiguousarray(X, dtype=dtype)
    finite = np.isfinite(X)
    if not finite.all():
        r, c = np.argwhere(~finite)[0]
        raise error(f"{what} have a non-finite value ({X[r, c]}) at window {r}, feature column "
                    f"{c}; recompute features or drop that window")
    return X


def _moments(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    n, d = X.shape
    step = max(1, _BLOCK_VALUES // max(d, 1))
    mean = np.zeros(d)
    for a in range(0, n, step):
        mean += X[a:a + step].astype(np.float64).sum(axis=0)
    mean /= n
    sq = np.zeros(d)
    for a in range(0, n, step):
        block = X[a:a + step].astype(np.float64) - mean
        sq += np.einsum("ij,ij->j", block, block)
    scale = np.sqrt(sq / n)
    scale[~(scale > 1e-12 * np.maximum(1.0, np.abs(mean)))] = 1.0  # constant columns stay 0
    return mean, scale


def standardize(X: np.ndarray) -> np.ndarray:
    """Columns of a checked matrix scaled to mean 0 and standard deviation 1 (float64); constant
    columns become 0."""
    mean, scale = _moments(X)
    return (np.asarray(X, dtype=np.float64) - mean) / scale


def fit_reduction(X: np.ndarray, n_components: int | None = None
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Standardization and PCA fitted on a checked matrix X (at least 2 rows).

    Returns (mean, scale, components, explained_variance): ``components`` is (k, n_features) and
    applies to standardized rows; k = ``n_components`` or min(50, n_features, n - 1), at least 1.
    """
    n, d = X.shape
    if n < 2:
        raise FeatureInputError(f"need at least 2 windows for principal axes, got {n}")
    mean, scale = _moments(X)
    step = max(1, _BLOCK_VALUES // max(d, 1))
    cov = np.zeros((d, d))
    for a in range(0, n, step):
        block = (X[a:a + step].astype(np.float64) - mean) / scale
        cov += block.T @ block
    cov /= n - 1
    values, vectors = np.linalg.eigh(cov)
    values, vectors = values[::-1], vectors[:, ::-1]
    k = n_components if n_components is not None else min(MAX_COMPONENTS, d, n - 1)
    k = int(max(1, min(k, d)))
    comps = vectors[:, :k].T.copy()
    # sign: the largest absolute loading of each axis is positive
    big = np.argmax(np.abs(comps), axis=1)
    signs = np.sign(comps[np.arange(k), big])
    signs[signs == 0] = 1.0
    comps *= signs[:, None]
    return mean, scale, comps, np.maximum(values[:k], 0.0)


def apply_reduction(X: np.ndarray, mean: np.ndarray, scale: np.ndarray, components: np.ndarray
                    ) -> np.ndarray:
    """Standardize rows of X and project them on ``components``: float32 (n, k)."""
    n = X.shape[0]
    k = components.shape[0]
    out = np.empty((n, k), dtype=np.float32)
    W = components.T / scale[:, None]  # (d, k): ((x - mean) / scale) @ C.T
    offset = (mean / scale) @ components.T
    step = max(1, _BLOCK_VALUES // max(X.shape[1], 1))
    for a in range(0, n, step):
        out[a:a + step] = X[a:a + step].astype(np.float64) @ W - offset
    return out


def principal_components(X: np.ndarray, k: int) -> np.ndarray:
    """The first ``k`` principal components of the standardized rows of a checked matrix:
    float32 (n, k), zero columns where there are fewer axes than ``k`` (or fewer than 2 rows)."""
    out = np.zeros((X.shape[0], k), np.float32)
    if X.shape[0] < 2:
        return out
    mean, scale, comps, _ = fit_reduction(X, k)
    got = apply_reduction(X, mean, scale, comps)
    out[:, :got.shape[1]] = got
    return out
