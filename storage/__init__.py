"""The project file: one self-contained SQLite database, written through sqlite-utils.

Storage knows SQLite and nothing of the numerics or the user interface. Arrays cross this boundary
as float32/int64 blobs (see :mod:`storage.blobs`).
"""

from storage.store import (
    SCHEMA_VERSION,
    NewerSchemaError,
    NotAProjectError,
    Store,
    StoreError,
)

__all__ = ["SCHEMA_VERSION", "Store", "StoreError", "NotAProjectError", "NewerSchemaError"]
