"""Writing a job's points while it computes the next one.

A durable write of one point (Parquet file, fsync of the file, rename, fsync of the folder)
costs a few milliseconds, most of it waiting for the disk.  On a walk of cheap points that
is a tenth of the job's time, so :class:`PointWriter` hands each point's records to one
background thread and returns: the disk wait overlaps the next point's computation.

The guarantee stays what it was, shifted by one point: the writer takes a point's records
only when the previous point's are durable, so at any moment at most one finished point is
not yet on disk (besides the one being computed).  :meth:`PointWriter.close` (also on
KeyboardInterrupt, through ``with``) writes what is pending before it returns, and a failed
write is raised in the caller's thread at its next call.  At the end of a job
:meth:`PointWriter.compact` moves its fragments into one part from the records in memory
(:func:`~pesflow.store.compaction.compact_written`), so the run's final compaction reads
almost nothing.

>>> import tempfile
>>> from pesflow.store.point_store import PointStore
>>> with PointWriter(PointStore(tempfile.mkdtemp())) as writer:
...     writer.written
[]
"""

from __future__ import annotations

import threading
import time

from pesflow.store.records import make_record


class PointWriter:
    """Durable point writes of one job, one point ahead of the caller (see module doc).

    ``store``: the :class:`~pesflow.store.point_store.PointStore` written to.
    ``written``: (records, path, inode) of every fragment written so far, in order (one
    fragment holds the records of one point; a point of more than
    :data:`~pesflow.store.records.MAX_FRAGMENT_KEYS` records takes more).
    """

    def __init__(self, store):
        self.store = store
        self.written: list[tuple[list[dict], object, int]] = []
        self._pending: list[dict] | None = None
        self._error: BaseException | None = None
        self._closed = False
        #: seconds the caller waited for the previous point to be durable (a slow disk
        #: shows here: the job's log reports it)
        self.waited_s = 0.0
        self._cond = threading.Condition()
        self._thread = threading.Thread(target=self._run, name="pesflow-point-writer", daemon=True)
        self._thread.start()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def _run(self):
        while True:
            with self._cond:
                while self._pending is None and not self._closed:
                    self._cond.wait()
                records = self._pending
                if records is None:  # closed, nothing left
                    return
            try:
                for path, inode in self.store.write_point(records):  # checked in write()
                    self.written.append((records, path, inode))
            except BaseException as exc:  # raised in the caller's thread
                self._error = exc
            with self._cond:
                self._pending = None
                self._cond.notify_all()

    def _wait_idle(self):
        with self._cond:
            while self._pending is not None:
                self._cond.wait()
        if self._error is not None:
            error, self._error = self._error, None
            raise error

    def write(self, *records: dict) -> None:
        """Queue the records of one point (validated here, in the caller's thread) once the
        previous point's are durable; raises the error of a failed earlier write."""
        checked = [make_record(**record) for record in records]
        start = time.perf_counter()
        self._wait_idle()
        self.waited_s += time.perf_counter() - start
        if self._closed:
            raise RuntimeError("PointWriter is closed")
        if not checked:
            return
        with self._cond:
            self._pending = checked
            self._cond.notify_all()

    def flush(self) -> None:
        """Return when every record handed over is durable (raises a failed write's error)."""
        self._wait_idle()

    def close(self) -> None:
        """Write what is pending, stop the thread; raises a failed write's error."""
        if self._closed:
            return
        try:
            self._wait_idle()
        finally:
            with self._cond:
                self._closed = True
                self._cond.notify_all()
            self._thread.join()

    def compact(self) -> dict:
        """After :meth:`close`: move this writer's fragments into one part (see
        :func:`~pesflow.store.compaction.compact_written`); returns its stats."""
        from pesflow.store.compaction import compact_written

        self.close()
        return compact_written(self.store, self.written)
