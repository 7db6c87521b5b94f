"""Atomic, optionally durable file writes: the one way pesflow writes a file.

A file is written to a dot-named temporary file beside its final name (the same
suffix, so writers that read the format from it still work), then renamed over
it.  A reader therefore sees the old file or the new one, never a half-written
one, and a writer killed mid-write leaves only a hidden temporary file.  With
``fsync`` the data and the rename reach the disk before the call returns.

>>> import tempfile, pathlib
>>> target = pathlib.Path(tempfile.mkdtemp()) / "note.txt"
>>> inode = atomic_write(target, "done\\n", fsync=False)
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


def atomic_write(path, data, *, fsync: bool = True) -> int:
    """Write ``data`` (text as UTF-8, or anything with the buffer protocol: bytes, a
    pyarrow Buffer) to ``path`` atomically; returns the file's inode (kept by the rename).

    One open file for the write and the fsync, and the data in as few ``write`` calls as
    the kernel takes (one, for a small file): the cheap way for many small files.
    """
    path = Path(path)
    view = memoryview(data.encode("utf-8") if isinstance(data, str) else data).cast("B")
    with atomic_path(path) as tmp:  # the file's fsync is done here, on the open file
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        try:
            while view:
                view = view[os.write(fd, view) :]
            if fsync:
                os.fsync(fd)
            inode = os.fstat(fd).st_ino
        finally:
            os.close(fd)
    if fsync:
        fsync_dir(path.parent)
    return inode
