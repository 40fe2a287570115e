"""The project file: one self-contained SQLite database, written through sqlite-utils.

Storage knows SQLite and nothing of the numerics or the user interface. Its errors derive from
:class:`labeler.errors.LabelerError`, imported from the leaf module ``labeler.errors`` (which
imports nothing); that is the only thing storage takes from labeler. Arrays cross this boundary
as float32/int64 blobs (see :mod:`storage.blobs`).
"""

from storage.store import (
    SCHEMA_VERSION,
    BusyError,
    DiskFullError,
    NewerSchemaError,
    NotAProjectError,
    ReadOnlyError,
    Store,
    StoreError,
)

__all__ = ["SCHEMA_VERSION", "Store", "StoreError", "NotAProjectError", "NewerSchemaError",
           "BusyError", "DiskFullError", "ReadOnlyError"]
