"""Atomic, optionally durable file writes: the one way pesflow writes a file.

A file is written to a dot-named temporary file beside its final name (the same
suffix, so writers that read the format from it still work), then renamed over
it.  A reader therefore sees the old file or the new one, never a half-written
one, and a writer killed mid-write leaves only a hidden temporary file.  With
``fsync`` the data and the rename reach the disk before the call returns.

>>> import tempfile, pathlib
>>> target = pathlib.Path(tempfile.mkdtemp()) / "note.txt"
>>> atomic_write(target, "done\\n", fsync=False)
>>> target.read_text()
'done\\n'
"""

from __future__ import annotations

import contextlib
import errno
import os
import uuid
from pathlib import Path

#: Prefix of every temporary file (listings skip names starting with ".").
TMP_PREFIX = ".tmp-"


def fsync_dir(path) -> None:
    """Make a rename or unlink in folder ``path`` durable (where the filesystem allows)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    except OSError as exc:
        if exc.errno not in (errno.EINVAL, errno.ENOTSUP, errno.EBADF):
            raise
    finally:
        os.close(fd)


@contextlib.contextmanager
def atomic_path(path, *, fsync: bool = False):
    """Yield a temporary path to write; on success it replaces ``path``, on error it goes.

    With ``fsync`` the file's data and the folder entry are flushed to disk.
    """
    path = Path(path)
    tmp = path.with_name(f"{TMP_PREFIX}{path.stem}-{uuid.uuid4().hex}{path.suffix}")
    try:
        yield tmp
        if fsync:
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    if fsync:
        fsync_dir(path.parent)


def atomic_write(path, data: str | bytes, *, fsync: bool = True) -> None:
    """Write ``data`` (text as UTF-8, or bytes) to ``path`` atomically."""
    with atomic_path(path, fsync=fsync) as tmp:
        if isinstance(data, str):
            tmp.write_text(data, encoding="utf-8")
        else:
            tmp.write_bytes(data)
