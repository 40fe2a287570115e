"""How far annotators agree on the windows they both labeled.

Pure functions over label arrays; :meth:`labeler.project.Project.agreement` gathers each annotator's
current labels from the project and calls them.

- :func:`confusion`: for two annotators, how often annotator A's class i met annotator B's class j on
  the same window (rows A, columns B).
- :func:`cohen_kappa`: Cohen, "A coefficient of agreement for nominal scales", 1960:
  ``kappa = (p_o - p_e) / (1 - p_e)``, ``p_o`` the observed share of agreement, ``p_e`` the agreement
  expected by chance from each annotator's own class shares.
- :func:`fleiss_kappa`: Fleiss, "Measuring nominal scale agreement among many raters", 1971, for
  three or more annotators: every window rated by the same number ``n`` of annotators;
  ``P_i = (sum_j n_ij**2 - n) / (n (n - 1))``, ``P_bar`` their mean, ``p_j`` the share of all ratings
  in class j, ``P_e = sum_j p_j**2``, ``kappa = (P_bar - P_e) / (1 - P_e)``.

Both kappas are undefined (NaN) when chance agreement is already 1 (every rating in one class).

**Current label when annotators disagree.** Every annotator keeps their own current label of a
window; the window's current label (what proposals learn from and what is exported) is the one set
most recently, whoever set it. A later confirmation supersedes an earlier one; withdrawing one's own
label hands the window back to the most recent remaining label of another annotator. Windows whose
annotators' current labels differ are listed by ``Project.disagreements()`` so they can be reviewed.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from labeler.errors import ValueInputError


def confusion(a: Sequence, b: Sequence, labels: Sequence | None = None) -> pd.DataFrame:
    """Counts of (a[i], b[i]) pairs; rows are a's labels, columns b's, both in ``labels`` order
    (default: sorted union of the labels that occur)."""
    a, b = np.asarray(a, dtype=object), np.asarray(b, dtype=object)
    if a.shape != b.shape or a.ndim != 1:
        raise ValueInputError(f"a and b must be 1-D and of one length (got {a.shape} and {b.shape})")
    if labels is None:
        labels = sorted(set(a.tolist()) | set(b.tolist()), key=str)
    labels = list(labels)
    index = {c: i for i, c in enumerate(labels)}
    unknown = [c for c in set(a.tolist()) | set(b.tolist()) if c not in index]
    if unknown:
        raise ValueInputError(f"label {unknown[0]!r} is not among labels {labels}")
    table = np.zeros((len(labels), len(labels)), dtype=np.int64)
    if a.size:
        np.add.at(table, ([index[x] for x in a], [index[x] for x in b]), 1)
    return pd.DataFrame(table, index=pd.Index(labels, name="a"), columns=pd.Index(labels, name="b"))


def cohen_kappa_from_confusion(table) -> float:
    """Cohen's kappa of a square confusion table of counts (NaN when undefined)."""
    m = np.asarray(table, dtype=np.float64)
    n = m.sum()
    if m.ndim != 2 or m.shape[0] != m.shape[1]:
        raise ValueInputError(f"a confusion table must be square (got shape {m.shape})")
    if n == 0:
        return float("nan")
    p_o = np.trace(m) / n
    p_e = float((m.sum(axis=1) / n) @ (m.sum(axis=0) / n))
    if p_e >= 1.0:
        return float("nan")
    return float((p_o - p_e) / (1.0 - p_e))


def cohen_kappa(a: Sequence, b: Sequence, labels: Sequence | None = None) -> float:
    """Cohen's kappa between two annotators' labels of the same items (NaN when undefined)."""
    return cohen_kappa_from_confusion(confusion(a, b, labels).to_numpy())


def fleiss_kappa(counts) -> float:
    """Fleiss' kappa of an (items × classes) table: counts[i, j] = how many raters put item i in
    class j. Every item must have the same number of raters (two or more)."""
    m = np.asarray(counts, dtype=np.float64)
    if m.ndim != 2 or m.shape[0] == 0:
        raise ValueInputError("counts must be a non-empty 2-D table (items × classes)")
    if (m < 0).any():
        raise ValueInputError("counts must be non-negative")
    raters = m.sum(axis=1)
    n = raters[0]
    if not np.all(raters == n):
        raise ValueInputError("every item needs the same number of raters for Fleiss' kappa "
                         f"(found {sorted(set(raters.tolist()))})")
    if n < 2:
        raise ValueInputError("Fleiss' kappa needs at least two raters per item")
    p_i = ((m ** 2).sum(axis=1) - n) / (n * (n - 1))
    p_bar = p_i.mean()
    p_j = m.sum(axis=0) / m.sum()
    p_e = float((p_j ** 2).sum())
    if p_e >= 1.0:
        return float("nan")
    return float((p_bar - p_e) / (1.0 - p_e))


def rating_counts(ratings: pd.DataFrame, labels: Sequence) -> np.ndarray:
    """(items × classes) counts from a wide table (one row per item, one column per rater)."""
    index = {c: i for i, c in enumerate(labels)}
    out = np.zeros((len(ratings), len(labels)), dtype=np.int64)
    for j in range(ratings.shape[1]):
        col = ratings.iloc[:, j].map(index).to_numpy()
        out[np.arange(len(ratings)), col.astype(np.int64)] += 1
    return out


def agreement_report(annotations: pd.DataFrame) -> dict:
    """Pairwise confusion tables and Cohen's kappa, and Fleiss' kappa when three or more annotators
    all labeled some windows.

    ``annotations``: window_id, annotator, label (each annotator's current label of a window).
    Returns ``{"annotators", "labels", "double_labeled", "pairs": [{"a", "b", "windows",
    "agreement", "kappa", "confusion"}], "fleiss": {"annotators", "windows", "kappa"} or None}``.
    """
    wide = annotations.pivot(index="window_id", columns="annotator", values="label")
    who = sorted(wide.columns.tolist(), key=str)
    labels = sorted(annotations["label"].unique().tolist(), key=str)
    pairs = []
    for i, a in enumerate(who):
        for b in who[i + 1:]:
            both = wide[[a, b]].dropna()
            if len(both) == 0:
                continue
            table = confusion(both[a].to_numpy(), both[b].to_numpy(), labels)
            pairs.append({"a": a, "b": b, "windows": int(len(both)),
                          "agreement": float(np.trace(table.to_numpy()) / len(both)),
                          "kappa": cohen_kappa_from_confusion(table.to_numpy()),
                          "confusion": table})
    fleiss = None
    if len(who) >= 3:
        full = wide[who].dropna()
        if len(full):
            fleiss = {"annotators": who, "windows": int(len(full)),
                      "kappa": fleiss_kappa(rating_counts(full, labels))}
    double = int((wide.notna().sum(axis=1) >= 2).sum()) if len(wide) else 0
    return {"annotators": who, "labels": labels, "double_labeled": double, "pairs": pairs,
            "fleiss": fleiss}


def disagreeing(annotations: pd.DataFrame) -> np.ndarray:
    """Window ids whose annotators' current labels differ (sorted)."""
    if len(annotations) == 0:
        return np.empty(0, dtype=np.int64)
    n = annotations.groupby("window_id")["label"].nunique()
    return np.asarray(sorted(n.index[n > 1]), dtype=np.int64)
