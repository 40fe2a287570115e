"""Arrays read out of an in-memory .npz without copies (labeler.npzview), against numpy.load
(Harris et al., "Array programming with NumPy", 2020) and scipy.sparse.save_npz's archives
(Virtanen et al., "SciPy 1.0", 2020)."""

import io

import numpy as np
from scipy import sparse

from labeler.npzview import npz_arrays


def _archive(save, **arrays) -> bytes:
    buf = io.BytesIO()
    save(buf, **arrays)
    return buf.getvalue()


def test_stored_archive_gives_the_arrays_numpy_load_gives():
    rng = np.random.default_rng(0)
    arrays = {"ids": np.arange(1000, dtype=np.int64), "F": rng.random((1000, 7), np.float32),
              "fortran": np.asfortranarray(rng.random((5, 3))), "scalar": np.float64(2.5),
              "empty": np.empty((0, 4), np.int32), "text": np.array(b"csr"),
              "names": np.array(["a", "bc"])}
    data = _archive(np.savez, **arrays)
    got = npz_arrays(data)
    with np.load(io.BytesIO(data), allow_pickle=False) as z:
        assert set(got) == set(z.files)
        for k in z.files:
            assert got[k].dtype == z[k].dtype and got[k].shape == z[k].shape, k
            np.testing.assert_array_equal(got[k], z[k])
    assert not got["F"].flags.writeable  # a view of the archive's bytes, not a copy


def test_deflated_archives_and_sparse_matrices_read_too():
    rng = np.random.default_rng(1)
    a = rng.random((50, 3))
    np.testing.assert_array_equal(npz_arrays(_archive(np.savez_compressed, a=a))["a"], a)
    W = sparse.random(40, 40, density=0.1, random_state=2, format="csr")
    buf = io.BytesIO()
    sparse.save_npz(buf, W, compressed=False)
    z = npz_arrays(buf.getvalue())
    back = sparse.csr_matrix((z["data"], z["indices"], z["indptr"]), shape=tuple(z["shape"]))
    assert z["format"].item() == b"csr" and abs(back - W).max() == 0


def test_members_at_any_offset_come_back_aligned_and_equal():
    import zipfile

    a = np.arange(100, dtype=np.float64) / 7
    npy = io.BytesIO()
    np.lib.format.write_array(npy, a)
    misaligned = 0
    for pad in range(1, 9):  # names of several lengths put the member's bytes at several offsets
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_STORED) as zf:
            zf.writestr("x" * pad + ".npy", npy.getvalue())
        data = buf.getvalue()
        got = npz_arrays(data)["x" * pad]
        assert got.flags.aligned and not got.flags.writeable
        np.testing.assert_array_equal(got, a)
        misaligned += data.find(npy.getvalue()) % 8 != 0
    assert misaligned  # the copying branch was taken


def test_written_archives_read_back_as_views_by_numpy_load_and_scipy_sparse():
    from labeler.npzview import npz_bytes

    rng = np.random.default_rng(1)
    arrays = {"ids": np.arange(1001, dtype=np.int64), "F": rng.random((1001, 7), np.float32),
              "fortran": np.asfortranarray(rng.random((5, 3))), "scalar": np.float64(2.5),
              "empty": np.empty((0, 4), np.int32), "text": np.array(b"csr"),
              "a_much_longer_member_name": np.arange(3, dtype=np.int16),
              "names": np.array(["a", "bc"])}
    data = npz_bytes(arrays)
    whole = np.frombuffer(data, dtype=np.uint8)
    got = npz_arrays(data)
    with np.load(io.BytesIO(data), allow_pickle=False) as z:  # the reference reader
        assert set(z.files) == set(got) == set(arrays)
        for k in z.files:
            assert got[k].dtype == z[k].dtype and got[k].shape == z[k].shape, k
            np.testing.assert_array_equal(got[k], z[k])
            np.testing.assert_array_equal(z[k], np.asarray(arrays[k]))
            # a view of the archive's bytes, aligned: no copy was needed
            assert got[k].flags.aligned and (got[k].size == 0 or np.shares_memory(got[k], whole)), k
    # as numpy.savez writes them, some members of the same arrays needed copies
    plain = np.frombuffer(plain_data := _archive(np.savez, **arrays), dtype=np.uint8)
    assert not all(v.size == 0 or np.shares_memory(v, plain) for v in npz_arrays(plain_data).values())
    W = sparse.random(40, 30, density=0.2, format="csr", random_state=2)
    blob = npz_bytes({"indices": W.indices, "indptr": W.indptr, "format": b"csr",
                      "shape": W.shape, "data": W.data})
    back = sparse.load_npz(io.BytesIO(blob))
    assert back.format == "csr" and back.shape == W.shape and (back != W).nnz == 0
