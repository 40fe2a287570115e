"""Arrays of an ``.npz`` held in memory, read without copying them.

``numpy.load`` copies every array out of the archive; for the large blobs a short command reads
(the window graph, the latest proposals) the copies cost more than the reading. An archive written
by ``numpy.savez`` (members stored, not deflated) holds each array's bytes in one piece, so the
arrays can be read-only views of the archive's bytes (copied where a member's numbers do not
start on a multiple of their size). Anything else (deflated members, object
arrays) goes through ``numpy.load``.

:func:`npz_bytes` writes such an archive with every member's numbers starting on a multiple of
64 bytes (a padding record in each member's extra field), so none needs the copy: the project's
blobs are written with it, and ``numpy.load`` (and ``scipy.sparse.load_npz``) read them as any
``.npz``.
"""

from __future__ import annotations

import io
import struct
import zipfile
from typing import Mapping

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

_LOCAL_HEADER = 30  # bytes of a zip member's local header before its name and extra field
ALIGN = 64          # numpy pads an array's header to a multiple of this, so numbers follow aligned
_PAD_ID = 0x6C62    # the extra-field record that only pads (an id no zip tool assigns meaning to)


class _NotStored(Exception):
    """The archive is not one whose arrays can be viewed in place (numpy.load reads it)."""


def npz_arrays(data: bytes) -> dict[str, np.ndarray]:
    """Every array of the ``.npz`` archive ``data``, by name (read-only views when stored)."""
    try:
        return _views(data)
    except (_NotStored, ValueError, KeyError, struct.error, zipfile.BadZipFile):
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            return {k: z[k] for k in z.files}


def npz_bytes(arrays: Mapping[str, object]) -> bytes:
    """The ``.npz`` archive of ``arrays`` (what ``numpy.savez(buf, **arrays)`` holds: members
    ``NAME.npy``, stored), each member's numbers starting on a multiple of 64 bytes of the
    archive, so that :func:`npz_arrays` reads every one as a view."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for name, value in arrays.items():
            member = io.BytesIO()
            np.lib.format.write_array(member, np.asanyarray(value), allow_pickle=False)
            info = zipfile.ZipInfo(f"{name}.npy", date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_STORED
            # the member's bytes follow its local header, name and extra field; numpy's header
            # inside the member is a multiple of ALIGN long already
            start = buf.tell() + _LOCAL_HEADER + len(info.filename.encode("utf-8")) + 4
            pad = -start % ALIGN
            info.extra = struct.pack("<HH", _PAD_ID, pad) + bytes(pad)
            zf.writestr(info, member.getbuffer())
    return buf.getvalue()


def _views(data: bytes) -> dict[str, np.ndarray]:
    whole = memoryview(data)
    out = {}
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        for info in zf.infolist():
            if info.compress_type != zipfile.ZIP_STORED or not info.filename.endswith(".npy"):
                raise _NotStored(f"member {info.filename} is not a stored array")
            at = info.header_offset
            if data[at:at + 4] != b"PK\x03\x04":
                raise _NotStored("no local header")
            n_name, n_extra = struct.unpack("<HH", data[at + 26:at + _LOCAL_HEADER])
            start = at + _LOCAL_HEADER + n_name + n_extra
            member = whole[start:start + info.file_size]
            head = io.BytesIO(member[:65536].tobytes())
            version = np.lib.format.read_magic(head)
            read = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                    else np.lib.format.read_array_header_2_0)
            shape, fortran, dtype = read(head)
            if dtype.hasobject:
                raise _NotStored("object array")
            count = int(np.prod(shape, dtype=np.int64))
            if head.tell() + count * dtype.itemsize > info.file_size:
                raise _NotStored("member shorter than its array")
            a = np.frombuffer(member, dtype=dtype, count=count, offset=head.tell())
            if not a.flags.aligned:  # the member starts anywhere in the archive; numpy's loops
                a = a.copy()         # on misaligned numbers are many times slower than a copy
                a.flags.writeable = False
            out[info.filename[:-4]] = a.reshape(shape, order="F" if fortran else "C")
    return out
