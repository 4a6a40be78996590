"""The inspection store (SQLite by default, PostgreSQL for a shop), lot processing and lot statistics.

Only this package talks to a database.
"""

from .store import (  # noqa: F401
    InspectionRecord,
    IssuedDocument,
    RecordFilter,
    RecordMeta,
    Store,
    open_store,
)

__all__ = ["InspectionRecord", "IssuedDocument", "RecordFilter", "RecordMeta", "Store", "open_store"]
