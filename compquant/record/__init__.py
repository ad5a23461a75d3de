"""The lab's record: results database, review and release with an audit trail, control charts.

See ``docs/record.md``.  Modules: :mod:`~compquant.record.db` (where the record is, schema
version, transactions), :mod:`~compquant.record.store` (an analysis into the record),
:mod:`~compquant.record.review` (draft -> released | rejected, amendments, checking a file),
:mod:`~compquant.record.charts` (Shewhart control charts after ISO 7870-2),
:mod:`~compquant.record.export` (the whole record as CSV or Parquet).
"""

from compquant.record.db import DB_ENV, Record, RecordError, configured, default_location, open_record

__all__ = ["DB_ENV", "Record", "RecordError", "configured", "default_location", "open_record"]
