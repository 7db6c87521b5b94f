"""Stage 5, the store: one durable Parquet record per point, keyed by content.

* :mod:`pesflow.store.records` - the record schema and :func:`make_record`;
* :mod:`pesflow.store.point_store` - :class:`PointStore` (write, list keys, load, quarantine,
  verify);
* :mod:`pesflow.store.compaction` - fragments merged into parts, without losing a record;
* :mod:`pesflow.store.files` - atomic Parquet writes and the checks of a file.

The store is also a plain Parquet dataset: ``pyarrow.dataset.dataset(root / "fragments")``
and ``root / "parts"`` read with any Parquet reader (see README).
"""

from pesflow.store.point_store import PointStore
from pesflow.store.records import POINT_SCHEMA, SCHEMA_VERSION, make_record

__all__ = ["POINT_SCHEMA", "SCHEMA_VERSION", "PointStore", "make_record"]
