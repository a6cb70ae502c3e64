"""A study folder: ``protocol.toml``, the ``intake/`` drop folder and the record store."""

from __future__ import annotations

import contextlib
import errno
import hashlib
import os
import shutil
import sqlite3
import stat
import tempfile
from dataclasses import dataclass
from pathlib import Path

from fieldslope.common.errors import FieldslopeError, SheetError, StudyError
from fieldslope.common.names import Outcome
from fieldslope.schemas.protocol import Protocol, load_protocol
from fieldslope.schemas.store import Progress, Store
from fieldslope.schemas.store_types import ImportResult

PROTOCOL_FILE = "protocol.toml"
INTAKE_DIR = "intake"
DB_FILE = "fieldslope.sqlite"
ENV_VAR = "FIELDSLOPE_STUDY"
NOT_A_FILE = "not a file"


def default_study_dir() -> Path:
    from platformdirs import user_data_dir
    return Path(user_data_dir("fieldslope")) / "study"


def resolve_study_dir(arg: str | os.PathLike | None) -> Path:
    """The study folder: the argument, else $FIELDSLOPE_STUDY, else the user data folder's ``study``."""
    if arg:
        return Path(arg).expanduser()
    env = os.environ.get(ENV_VAR, "").strip()
    if env:
        return Path(env).expanduser()
    return default_study_dir()


def account_can_write(root: str | os.PathLike) -> bool:
    """Whether this account may write the study's store and create its journal files beside it."""
    root = Path(root)
    return os.access(root / DB_FILE, os.W_OK) and os.access(root, os.W_OK)


def is_study(path: str | os.PathLike) -> bool:
    path = Path(path)
    return (path / PROTOCOL_FILE).is_file() and (path / DB_FILE).is_file()


def _short(path: Path, limit: int = 70) -> str:
    text = str(path)
    return text if len(text) <= limit else f"{text[:limit - 20]}…{text[-19:]}"


def init_failure_sentence(root: Path, exc: OSError) -> str:
    """One sentence for an operating-system failure while a study folder is made (nothing was kept)."""
    where = _short(root)
    code = exc.errno
    if code in (errno.EACCES, errno.EPERM):
        return (f"{where}: cannot create the study here (permission denied); nothing was made: choose a folder "
                f"you may write to, or ask for write access to {_short(root.parent)}.")
    if code == errno.ENAMETOOLONG:
        return (f"{where}: the path is too long for this file system (a name over 255 bytes or a path over "
                "4096); nothing was made: choose a shorter folder name.")
    if code in (errno.ENOSPC, getattr(errno, "EDQUOT", errno.ENOSPC)):
        return (f"{where}: the disk is full (or the account's quota is used up); nothing was made: free some "
                "space and run init again.")
    if code == errno.EROFS:
        return f"{where}: the disk is read-only; nothing was made: choose a folder on a writable disk."
    return (f"{where}: cannot create the study folder ({exc.strerror or exc}); nothing was made: check the path "
            "and permissions.")


def _write_study(folder: Path, data: bytes, protocol: Protocol) -> None:
    """The drop folder, the protocol (synced to disk) and the record store, inside ``folder``."""
    intake = folder / INTAKE_DIR
    intake.mkdir(exist_ok=True)
    # several accounts on one station laptop: the group may write the store and drop batches;
    # setgid keeps new files (the -wal and -shm files too) in the folder's group
    os.chmod(intake, 0o2770)
    tmp = folder / (PROTOCOL_FILE + ".tmp")
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, folder / PROTOCOL_FILE)
    try:
        Store.create(folder / DB_FILE, protocol).close()
    except sqlite3.Error as exc:         # SQLite's own failure (e.g. disk full while it writes the schema)
        full = getattr(exc, "sqlite_errorname", "") == "SQLITE_FULL"
        raise OSError(errno.ENOSPC if full else errno.EIO, "disk full" if full else str(exc)) from None


def _build_beside(root: Path, data: bytes, protocol: Protocol) -> None:
    """A new folder: made under a temporary name beside ``root`` and renamed into place when whole."""
    parent = root.parent
    made = []                                         # parent folders made here, removed again on failure
    for folder in reversed([parent, *parent.parents]):
        if not folder.exists():
            folder.mkdir()
            made.append(folder)
    work = None
    try:
        work = Path(tempfile.mkdtemp(prefix=f".{root.name[:40]}.", suffix=".creating", dir=parent))
        _write_study(work, data, protocol)
        os.chmod(work, 0o2770)
        os.rename(work, root)
    except BaseException:
        if work is not None:
            shutil.rmtree(work, ignore_errors=True)
        for folder in reversed(made):
            with contextlib.suppress(OSError):
                folder.rmdir()
        raise


def _build_in_place(root: Path, data: bytes, protocol: Protocol) -> None:
    """A folder that exists already (perhaps holding other files): what is made is removed on failure."""
    had_intake = (root / INTAKE_DIR).exists()
    try:
        _write_study(root, data, protocol)
    except BaseException:
        for name in (PROTOCOL_FILE + ".tmp", PROTOCOL_FILE, DB_FILE, *(DB_FILE + x for x in ("-wal", "-shm", "-journal"))):
            with contextlib.suppress(OSError):
                (root / name).unlink()
        if not had_intake:
            with contextlib.suppress(OSError):
                (root / INTAKE_DIR).rmdir()
        raise


@dataclass(frozen=True)
class IntakeFile:
    path: Path
    size: int
    status: str          # new | arriving | taken in | partial | refused | not a file
    batch_id: int | None = None
    problem: str = ""    # for "not a file": the sentence saying why it is not taken in

    @property
    def name(self) -> str:
        return self.path.name


class Study:
    def __init__(self, root: Path, protocol: Protocol, store: Store):
        self.root, self.protocol, self.store = root, protocol, store
        self._sizes: dict[str, tuple[int, int]] = {}
        self._digests: dict[tuple[str, int, int], str] = {}

    @property
    def intake_dir(self) -> Path:
        return self.root / INTAKE_DIR

    @property
    def db_path(self) -> Path:
        return self.root / DB_FILE

    @classmethod
    def create(cls, root: str | os.PathLike, protocol_file: str | os.PathLike) -> "Study":
        """Make a study folder from a protocol file; refuse a folder that already holds a study.

        The protocol is read once (at most 1 MB) and checked before anything is touched. A new folder is
        built under a temporary name beside it and renamed into place when whole; in a folder that exists
        already, whatever was made is removed again on failure. Either way a permission error, a path too
        long, or a full disk leaves no half-made study, and is said in one sentence."""
        from fieldslope.schemas.protocol import decode_protocol, read_protocol_bytes

        root = Path(root).expanduser()
        data = read_protocol_bytes(protocol_file)
        protocol = decode_protocol(data, protocol_file)         # check before touching the folder
        try:
            if (root / PROTOCOL_FILE).exists() or (root / DB_FILE).exists():
                raise StudyError(f"{root}: this folder already holds a study; open it with --study {root}, "
                                 "or choose a new folder.")
            if root.exists() and not root.is_dir():
                raise StudyError(f"{root}: is a file, not a folder; choose a folder for the study.")
            if root.exists():
                _build_in_place(root, data, protocol)
            else:
                _build_beside(root, data, protocol)
        except OSError as exc:
            raise StudyError(init_failure_sentence(root, exc)) from None
        return cls.open(root)

    @classmethod
    def open(cls, root: str | os.PathLike, readonly: bool | None = False) -> "Study":
        """Open a study folder. ``readonly=None`` (browsing): read-only when this account cannot write the
        store or its folder, else as usual (so a store that needs an upgrade is upgraded)."""
        root = Path(root).expanduser()
        if not root.exists():
            raise StudyError(f"{root}: no study folder here; create one with "
                             f"fieldslope init {root} --protocol FILE, or pick one with --study DIR.")
        if not (root / PROTOCOL_FILE).is_file() or not (root / DB_FILE).is_file():
            missing = PROTOCOL_FILE if not (root / PROTOCOL_FILE).is_file() else DB_FILE
            raise StudyError(f"{root}: not a fieldslope study (no {missing}); create one with "
                             f"fieldslope init DIR --protocol FILE, or pick another folder with --study DIR.")
        protocol = load_protocol(root / PROTOCOL_FILE)
        if readonly is None:
            readonly = not account_can_write(root)
        return cls(root, protocol, Store(root / DB_FILE, protocol, readonly=readonly))

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> "Study":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- the drop folder ------------------------------------------------------
    def intake_files(self) -> list[IntakeFile]:
        """Files in ``intake/`` with their status. A file counts as arrived only when its size
        and modification time are the same at two looks; temp and lock names are skipped. A symbolic
        link, folder, pipe or device is listed as "not a file" with its sentence, and never read."""
        from fieldslope.schemas.batch_file import kind_problem
        from fieldslope.schemas.readers import is_partial_name

        try:
            entries = sorted(p for p in self.intake_dir.iterdir() if not is_partial_name(p.name))
        except FileNotFoundError:
            return []
        known = {b.sha256: b for b in reversed(self.store.batches())}
        taken = {b.sha256: b for b in self.store.batches() if b.outcome != Outcome.REFUSED}
        known.update(taken)
        out, seen = [], {}
        for path in entries:
            try:
                st = path.lstat()          # a link is looked at, not followed
            except OSError:
                continue
            if not stat.S_ISREG(st.st_mode):
                out.append(IntakeFile(path, st.st_size, NOT_A_FILE, problem=kind_problem(path.name, st.st_mode)))
                continue
            look = (st.st_size, st.st_mtime_ns)
            seen[path.name] = look
            if self._sizes.get(path.name) != look:
                out.append(IntakeFile(path, st.st_size, "arriving"))
                continue
            digest = self._digest(path, look)
            batch = known.get(digest) if digest else None
            if batch is None:
                out.append(IntakeFile(path, st.st_size, "new"))
            else:
                status = {"stored": "taken in", "partial": "partial", "refused": "refused"}[batch.outcome]
                out.append(IntakeFile(path, st.st_size, status, batch.id))
        self._sizes = seen
        return out

    def _digest(self, path: Path, look: tuple[int, int]) -> str | None:
        from fieldslope.schemas.batch_file import file_sha256

        key = (path.name, *look)
        if key not in self._digests:
            import hashlib

            try:
                self._digests[key] = file_sha256(path)
            except (OSError, SheetError):
                return None
        return self._digests[key]

    def in_drop_folder(self, path: str | os.PathLike) -> bool:
        """Whether ``path`` names a file in this study's drop folder (where links are never followed)."""
        try:
            return Path(path).absolute().parent.resolve() == self.intake_dir.resolve()
        except OSError:
            return False

    def import_intake(self, operator: str | None = None, accept_valid: bool = False,
                      progress: Progress | None = None) -> list[ImportResult]:
        """Import every intake file whose status is ``new`` (call intake_files() first)."""
        results = []
        for item in self.intake_files():
            if item.status == "new":
                results.append(self.store.import_file(item.path, operator=operator, accept_valid=accept_valid,
                                                      progress=progress, follow_links=False))
        return results
