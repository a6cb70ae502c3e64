"""Reading a batch file from disk: regular files only, and never more than the size cap into memory.

A file over ``readers.MAX_BYTES`` is refused from its size alone: its SHA-256 is computed in chunks and
only its first bytes are kept with the record of the refusal (a 1.2 GB file costs a hash, not 1.2 GB
of memory, and the store does not grow by the file's size). A device, pipe or socket is refused before
it is opened (reading a pipe would wait forever).
"""

from __future__ import annotations

import hashlib
import os
import stat
from pathlib import Path

from fieldslope.common.errors import SheetError
from fieldslope.schemas.batch_plan import BatchPlan

KEPT_BYTES = 4096        # what is kept of a file refused for its size
CHUNK = 1 << 20


def read_batch_file(path: Path) -> bytes | BatchPlan:
    """The file's bytes, or (over the size cap) a refused :class:`BatchPlan` holding its first bytes."""
    from fieldslope.schemas.readers import MAX_BYTES

    try:
        info = os.stat(path)
        if stat.S_ISDIR(info.st_mode):
            raise SheetError(f"{path}: is a folder, not a batch file.")
        if not stat.S_ISREG(info.st_mode):
            raise SheetError(f"{path}: is not a regular file (a device, pipe or socket); copy the sheet into a "
                             "file and take that in.")
        with open(path, "rb") as fh:
            if info.st_size <= MAX_BYTES:
                data = fh.read(MAX_BYTES + 1)
                if len(data) <= MAX_BYTES:
                    return data
                fh.seek(0)          # it grew while being read: treat it as the large file it now is
            return _oversize(path.name, fh)
    except FileNotFoundError:
        raise SheetError(f"{path}: no such file; check the name and folder.") from None
    except IsADirectoryError:
        raise SheetError(f"{path}: is a folder, not a batch file.") from None
    except OSError as exc:
        raise SheetError(f"{path}: cannot be read ({exc.strerror}).") from None


def _oversize(name: str, fh) -> BatchPlan:
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
