"""Reading a batch file from disk: regular files only, and never more than the size cap into memory.

A file over ``readers.MAX_BYTES`` is refused from its size alone: its SHA-256 is computed in chunks and
only its first bytes are kept with the record of the refusal (a 1.2 GB file costs a hash, not 1.2 GB
of memory, and the store does not grow by the file's size). A folder, device, pipe or socket is refused with
a sentence and never read (reading a pipe would wait forever); in the drop folder a symbolic link is refused.
"""

from __future__ import annotations

import errno
import hashlib
import os
import stat
from pathlib import Path

from fieldslope.common.errors import SheetError
from fieldslope.schemas.batch_plan import BatchPlan

KEPT_BYTES = 4096        # what is kept of a file refused for its size
CHUNK = 1 << 20


def read_batch_file(path: Path, follow_links: bool = True) -> bytes | BatchPlan:
    """The file's bytes, or (over the size cap) a refused :class:`BatchPlan` holding its first bytes.

    A folder, device, pipe or socket is refused with one sentence before it is opened (opening a device can
    act on it, reading a pipe would wait forever), and again from ``fstat`` of what was opened (nothing can
    be swapped in between; the open itself never waits). ``follow_links=False`` (the drop folder) refuses a
    symbolic link instead of reading what it points to.
    """
    from fieldslope.schemas.readers import MAX_BYTES

    flags = os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOCTTY", 0)
    if not follow_links:
        flags |= getattr(os, "O_NOFOLLOW", 0)
    try:
        _refuse_kind(path, os.stat(path, follow_symlinks=follow_links))
        fd = os.open(path, flags)
    except FileNotFoundError:
        raise SheetError(f"{path}: no such file; check the name and folder.") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP and not follow_links:
            raise SheetError(_LINK_SENTENCE.format(path=path)) from None
        raise SheetError(f"{path}: cannot be read ({exc.strerror}).") from None
    with os.fdopen(fd, "rb") as fh:
        try:
            info = os.fstat(fd)
            _refuse_kind(path, info)
            if info.st_size <= MAX_BYTES:
                data = fh.read(MAX_BYTES + 1)
                if len(data) <= MAX_BYTES:
                    return data
                fh.seek(0)          # it grew while being read: treat it as the large file it now is
            return _oversize(path.name, fh)
        except OSError as exc:
            raise SheetError(f"{path}: cannot be read ({exc.strerror}).") from None


_LINK_SENTENCE = ("{path}: is a symbolic link, and the drop folder takes only files copied into it (a link is "
                  "never followed); copy the file itself into the folder.")


def kind_problem(path: object, mode: int) -> str:
    """The sentence for anything that is not a regular file (a link, folder, device, pipe or socket), else ""."""
    if stat.S_ISLNK(mode):
        return _LINK_SENTENCE.format(path=path)
    if stat.S_ISDIR(mode):
        return f"{path}: is a folder, not a batch file; take in the files inside it one by one."
    if not stat.S_ISREG(mode):
        return (f"{path}: is not a regular file (a device, pipe or socket); copy the sheet into a file and "
                "take that in.")
    return ""


def _refuse_kind(path: Path, info: os.stat_result) -> None:
    problem = kind_problem(path, info.st_mode)
    if problem:
        raise SheetError(problem)


def file_sha256(path: Path) -> str:
    """SHA-256 of a regular file read in chunks (never whole into memory); a link is not followed."""
    flags = os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NOCTTY", 0)
    fd = os.open(path, flags)
    with os.fdopen(fd, "rb") as fh:
        _refuse_kind(path, os.fstat(fd))
        digest = hashlib.sha256()
        while chunk := fh.read(CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


def _oversize(name: str, fh) -> BatchPlan:
    import hashlib

    from fieldslope.schemas.readers import MAX_BYTES

    digest, head, size = hashlib.sha256(), b"", 0
    while chunk := fh.read(CHUNK):
        if len(head) < KEPT_BYTES:
            head += chunk[: KEPT_BYTES - len(head)]
        digest.update(chunk)
        size += len(chunk)
    refusal = (f"{name}: the file is {size / 2**20:.1f} MB, over the {MAX_BYTES / 2**20:.0f} MB limit; split it "
               f"into smaller batches (only its first {len(head)} bytes and its SHA-256 are kept with this "
               "refusal).")
    return BatchPlan(name, head, digest.hexdigest(), None, refusal)
