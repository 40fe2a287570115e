"""Tests of the window graph (labeler.graph)."""

import json
import math

import numpy as np
import pytest
from scipy import sparse

from labeler.errors import InputError
from labeler.graph import (build_graph, local_scaling_weights, nearest_neighbors, standardize,
                           temporal_edges)

# Five points on a line, no ties among neighbour distances.
POINTS = np.array([[0.0], [1.0], [3.0], [7.0], [12.0]])


def hand_weights():
    """Local scaling by hand (Zelnik-Manor & Perona, "Self-tuning spectral clustering", 2004):
    w_ij = exp(-d_ij^2 / (sigma_i sigma_j)), sigma_i = distance to the K-th neighbour, here K = 2
    with 2 neighbours per point.

    neighbours (distance):  0: 1 (1), 3 (3)       -> sigma_0 = 3
                            1: 0 (1), 3 (2)       -> sigma_1 = 2
                            3: 1 (2), 0 (3)       -> sigma_3 = 3   (7 is at 4)
                            7: 3 (4), 12 (5)      -> sigma_7 = 5   (1 is at 6)
                            12: 7 (5), 3 (9)      -> sigma_12 = 9
    edges (either end lists the other), by point index 0..4 for values 0, 1, 3, 7, 12:
      (0,1): exp(-1 / (3*2)) = exp(-1/6)      (0,2): exp(-9 / (3*3)) = exp(-1)
      (1,2): exp(-4 / (2*3)) = exp(-2/3)      (2,3): exp(-16 / (3*5)) = exp(-16/15)
      (3,4): exp(-25 / (5*9)) = exp(-5/9)     (2,4): exp(-81 / (3*9)) = exp(-3)
    """
    W = np.zeros((5, 5))
    for (i, j), v in {(0, 1): -1 / 6, (0, 2): -1.0, (1, 2): -2 / 3, (2, 3): -16 / 15,
                      (3, 4): -5 / 9, (2, 4): -3.0}.items():
        W[i, j] = W[j, i] = math.exp(v)
    return W


def test_local_scaling_matches_hand_arithmetic():
    ind, dist = nearest_neighbors(POINTS, 2)
    W = local_scaling_weights(ind, dist, k_scale=2)
    np.testing.assert_allclose(W.toarray(), hand_weights(), rtol=1e-12, atol=0)


def test_build_graph_is_scale_free_and_matches_hand_example():
    # standardizing multiplies every distance by one factor, which local scaling cancels
    W = build_graph(POINTS * 37.0 + 5.0, n_neighbors=2, k_scale=2, temporal_weight=0)
    assert sparse.isspmatrix_csr(W)
    np.testing.assert_allclose(W.toarray(), hand_weights(), rtol=1e-12)


def test_graph_symmetric_zero_diagonal_deterministic():
    rng = np.random.default_rng(3)
    X = rng.normal(size=(200, 6)).astype(np.float32)
    W1 = build_graph(X, n_neighbors=8)
    W2 = build_graph(X, n_neighbors=8)
    assert (W1 != W2).nnz == 0
    assert abs(W1 - W1.T).max() < 1e-12
    assert np.all(W1.diagonal() == 0)
    assert W1.data.min() > 0 and W1.data.max() <= 1
    # every window has at least its n_neighbors edges (union of both directions)
    assert np.diff(W1.indptr).min() >= 8


def test_exact_neighbours_agree_with_brute_force():
    rng = np.random.default_rng(0)
    Z = rng.normal(size=(60, 3))
    ind, dist = nearest_neighbors(Z, 4)
    D = np.linalg.norm(Z[:, None] - Z[None], axis=2)
    np.fill_diagonal(D, np.inf)
    np.testing.assert_array_equal(ind, np.argsort(D, axis=1)[:, :4])
    np.testing.assert_allclose(dist, np.sort(D, axis=1)[:, :4])


def test_duplicates_do_not_produce_self_edges_or_nan():
    X = np.array([[0.0, 0], [0, 0], [0, 0], [1, 1], [2, 2], [3, 3]])
    W = build_graph(X, n_neighbors=3, k_scale=2)
    assert np.all(np.isfinite(W.data)) and np.all(W.diagonal() == 0)


def test_temporal_edges_only_between_adjacent_sequence_numbers():
    # windows given out of order; recording 'b' restarts at 0; seq 1 -> 3 is a gap (no edge)
    recording = np.array(["a", "b", "a", "a", "b"])
    seq = np.array([3, 1, 0, 1, 0])
    T = temporal_edges(recording, seq).toarray()
    expected = np.zeros((5, 5))
    for i, j in [(2, 3), (4, 1)]:  # a:0-a:1, b:0-b:1
        expected[i, j] = expected[j, i] = 1
    np.testing.assert_array_equal(T, expected)


def test_temporal_weight_adds_and_zero_turns_off():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(30, 4))
    rec, seq = np.zeros(30, int), np.arange(30)
    W0 = build_graph(X, recording=rec, seq=seq, temporal_weight=0.0)
    W1 = build_graph(X, recording=rec, seq=seq, temporal_weight=0.5)
    np.testing.assert_allclose((W1 - W0).toarray(), 0.5 * temporal_edges(rec, seq).toarray())
    assert (build_graph(X) != W0).nnz == 0


def test_standardize_constant_column():
    Z = standardize(np.array([[1.0, 5.0], [3.0, 5.0]]))
    np.testing.assert_allclose(Z, [[-1, 0], [1, 0]])


@pytest.mark.parametrize("X, match", [
    (np.ones(5), "2-D"),
    (np.array([[1.0, np.nan], [2.0, 3.0], [0, 0]]), "window 0, feature column 1"),
    (np.ones((1, 3)), "at least 2 windows"),
])
def test_bad_features_name_the_problem(X, match):
    with pytest.raises(InputError, match=match):
        build_graph(X)


def test_bad_parameters():
    X = np.random.default_rng(0).normal(size=(10, 2))
    with pytest.raises(ValueError, match="temporal_weight"):
        build_graph(X, temporal_weight=-1)
    with pytest.raises(ValueError, match="n_neighbors"):
        build_graph(X, n_neighbors=0)
    with pytest.raises(ValueError, match="recording and seq"):
        build_graph(X, recording=np.zeros(10))
    with pytest.raises(ValueError, match="9 windows"):
        build_graph(X, recording=np.zeros(9), seq=np.arange(9))


def test_auto_weighs_the_exact_search_against_compiling_the_approximate_one(monkeypatch, tmp_path):
    import labeler.graph as graph

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    monkeypatch.setattr(graph, "APPROXIMATE_ABOVE", 50)
    monkeypatch.setattr(graph, "_APPROX", {"compiled": False})
    monkeypatch.setattr(graph, "COST_SAMPLE", 100)
    Z = np.random.default_rng(1).normal(size=(400, 3))
    # a new process with a compilation measured at an hour: the exact search is cheaper, and its
    # index and the rows searched to measure it come back ready to use
    graph._remember_costs(compile_s=3600.0, s_per_row=1e-4)
    method, measured = graph.choose_method(Z, 5)
    assert method == "exact" and measured[1].size == graph.COST_SAMPLE
    assert json.loads((tmp_path / "labeler" / "neighbour-costs.json").read_text())["compile_s"] == 3600
    # the same costs in a process that has compiled it already: only the search counts
    graph._remember_costs(s_per_row=0.0)
    monkeypatch.setattr(graph, "_APPROX", {"compiled": True})
    assert graph.choose_method(Z, 5)[0] == "approximate"
    # at or below the threshold the exact search is used without measuring
    assert graph.choose_method(Z[:50], 5) == ("exact", None)
    # "auto" through the exact branch gives the exact neighbours
    monkeypatch.setattr(graph, "_APPROX", {"compiled": False})
    graph._remember_costs(compile_s=3600.0, s_per_row=1.0)
    ind, _ = nearest_neighbors(Z, 5)
    D = np.linalg.norm(Z[:, None] - Z[None], axis=2)
    np.fill_diagonal(D, np.inf)
    np.testing.assert_array_equal(ind, np.argsort(D, axis=1)[:, :5])


def test_unreadable_cost_file_falls_back_to_the_defaults(monkeypatch, tmp_path):
    import labeler.graph as graph

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path))
    (tmp_path / "labeler").mkdir()
    (tmp_path / "labeler" / "neighbour-costs.json").write_text("{not json")
    assert graph._approximate_costs() == {"compile_s": graph.DEFAULT_COMPILE_S,
                                          "s_per_row": graph.DEFAULT_APPROX_S_PER_ROW}
