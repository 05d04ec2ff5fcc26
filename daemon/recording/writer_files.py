"""The files beside a run store that let several processes record into it at once.

A store ``runs.db`` may have any number of writer processes (two terminals, two
rigs sharing one config folder). Beside it live:

``runs.db.writer-TOKEN.lock`` — one per live writer, TOKEN random (64 bits,
hex). Its first line is the writer's pid; after it, ``DISK_RESERVE_BYTES``
allocated on the disk are the writer's reserve for a full disk: when a write
fails, the writer truncates the file to give them up and stores the failure
in the room they leave (a full disk would otherwise have no room even for
that). The writer holds an exclusive ``flock`` on it for its lifetime and stores
TOKEN in ``runs.writer_token`` of every run it starts. The kernel drops the
lock when the process dies, however it dies (``kill -9``, a crash), so a run
whose ``outcome`` is still NULL is being recorded if and only if its writer's
lock is held: :func:`writer_alive` tries to take it shared, and a lock it can
take, or a file that is gone, means the writer is dead. A writer deletes its
own file when it closes; a starting writer deletes those of dead writers
(:func:`remove_dead_writer_locks`).

``runs.db.run-ids`` — the run ids issued. Its length in bytes is the last id
issued: :meth:`RunIds.issue` appends one byte (``O_APPEND``) and the new
length, read back from its own file offset, is the id. The kernel serialises
appends to a local file and moves each appender's offset to the end of its own
write, so two writers can never be handed the same id. Issuing one is two
system calls and takes no lock that another process could hold while it runs
or sleeps, so it is safe on the daemon's event loop (``Recorder.start_run``),
where waiting for a flock, the writer thread or SQLite's write lock is not.
A starting writer makes sure the file is at least ``MAX(run_id)`` long
(:meth:`RunIds.at_least`, a one-byte write at that offset, which never
shortens the file), so ids go on from the runs in the store. Edge cases:

- a store made before this file existed, a file deleted while no one was
  recording, or one whose last bytes a power cut lost: ids go on from
  ``MAX(run_id) + 1``, as a writer alone always counted;
- an id issued to a run that never reached the disk (its writer died within
  the first flush interval, or the store refused the write) is in no run, and
  is issued again only if the file is lost;
- ids follow the order in which runs were started, not the order in which
  their first rows were committed;
- the file must not be deleted while writers run (like SQLite's own ``-wal``
  and ``-shm`` files): a writer starting then would make a new one from
  ``MAX(run_id)``, which misses runs started within the last flush interval
  and not yet committed, and could issue one of their ids again.

The same file is also :meth:`RunIds.setup`'s lock: starting writers take it
exclusive one at a time while they create, migrate and recover the store and
create their own lock file, so no two migrate at once and no clean-up deletes
a lock file that is not yet locked. It is held for milliseconds, never while
recording.

``runs.db.lock`` — the writer lock of Poise before schema version 3, which
took it exclusive and allowed one writer per store. Writers now hold it
*shared* for their lifetime: an older Poise, which cannot record into a
version-3 store anyway, cannot start beside them, and they refuse to start
beside a running older Poise (whose run ids they cannot know). Runs stored
before version 3 have no token; their writer is alive only if this lock is
held exclusive.

The locks are kernel locks on local files: a store on a network file system
shared between machines is not supported.
"""

from __future__ import annotations

import contextlib
import fcntl
import glob
import os
import secrets
import time
from collections.abc import Iterator
from pathlib import Path

from daemon.recording.errors import RecordingError

DISK_RESERVE_BYTES = 128 * 1024
"""Held by each writer's lock file, given up to store a write failure on a full disk."""
SETUP_WAIT_S = 10.0
"""How long a starting writer waits for others to finish setting up (each takes milliseconds)."""
_SETUP_POLL_S = 0.005


def legacy_lock_path(db_path: str | Path) -> Path:
    return Path(f"{db_path}.lock")


def writer_lock_path(db_path: str | Path, token: str) -> Path:
    return Path(f"{db_path}.writer-{token}.lock")


def run_ids_path(db_path: str | Path) -> Path:
    return Path(f"{db_path}.run-ids")


def _describe(exc: OSError) -> str:
    return exc.strerror or str(exc)


def _open(db_path: str | Path, path: Path, flags: int) -> int:
    try:
        return os.open(path, flags, 0o644)
    except OSError as exc:
        raise RecordingError(f"run store {db_path}: cannot open {path}: {_describe(exc)}") from None


def _lock_is_free(path: Path) -> bool:
    """True if a shared flock on ``path`` can be taken now (or the file is gone)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except FileNotFoundError:
        return True
    try:
        fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
    except BlockingIOError:
        return False
    finally:
        os.close(fd)  # closing drops the shared lock, if taken
    return True


def writer_alive(db_path: str | Path, token: str | None) -> bool:
    """Whether the writer of a run with this ``runs.writer_token`` is alive (module docstring)."""
    path = legacy_lock_path(db_path) if token is None else writer_lock_path(db_path, token)
    return not _lock_is_free(path)


def remove_dead_writer_locks(db_path: str | Path) -> None:
    """Delete the lock files of writers that are gone. Call it under RunIds.setup()."""
    for name in glob.glob(f"{glob.escape(str(db_path))}.writer-*.lock"):
        path = Path(name)
        if _lock_is_free(path):
            with contextlib.suppress(OSError):  # gone already, or not ours to delete: harmless
                path.unlink()


class RunIds:
    """Run ids shared by every writer of one store, via ``<db>.run-ids`` (module docstring)."""

    def __init__(self, db_path: str | Path):
        self.db_path = str(db_path)
        self.path = run_ids_path(db_path)
        self._fd = _open(db_path, self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT)

    @contextlib.contextmanager
    def setup(self) -> Iterator[None]:
        """Be the one writer setting up the store (create, migrate, recover) in this block."""
        deadline = time.monotonic() + SETUP_WAIT_S
        while True:
            try:
                fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    raise RecordingError(
                        f"run store {self.db_path}: another process has been setting it up for "
                        f"{SETUP_WAIT_S:g} s (it holds {self.path}); is it stopped?"
                    ) from None
                time.sleep(_SETUP_POLL_S)
        try:
            yield
        finally:
            fcntl.flock(self._fd, fcntl.LOCK_UN)

    def at_least(self, last_run_id: int) -> None:
        """Issue no id at or below ``last_run_id`` from now on (the file grows, never shrinks)."""
        if last_run_id <= os.fstat(self._fd).st_size:
            return
        # pwrite on an O_APPEND descriptor appends on Linux (pwrite(2), BUGS): use a second one.
        fd = _open(self.db_path, self.path, os.O_WRONLY)
        try:
            os.pwrite(fd, b"\n", last_run_id - 1)
        except OSError as exc:
            raise RecordingError(
                f"run store {self.db_path}: cannot write {self.path}: {_describe(exc)}"
            ) from None
        finally:
            os.close(fd)

    def issue(self) -> int:
        """A run id no other writer of this store has been or will be given."""
        try:
            os.write(self._fd, b"\n")
            return os.lseek(self._fd, 0, os.SEEK_CUR)
        except OSError as exc:
            raise RecordingError(
                f"run store {self.db_path}: cannot issue a run id in {self.path}: {_describe(exc)}"
            ) from None

    def close(self) -> None:
        if self._fd >= 0:
            os.close(self._fd)
            self._fd = -1


class WriterLocks:
    """What one writer process holds while it records: its own lock and the legacy lock, shared.

    Create it inside ``RunIds.setup()`` (see the module docstring for why).
    """

    def __init__(self, db_path: str | Path):
        self.db_path = str(db_path)
        legacy = legacy_lock_path(db_path)
        self._legacy_fd = _open(db_path, legacy, os.O_RDWR | os.O_CREAT)
        try:
            fcntl.flock(self._legacy_fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(self._legacy_fd, 32, 0).decode(errors="replace").strip() or "?"
            os.close(self._legacy_fd)
            raise RecordingError(
                f"run store {db_path}: already being recorded into by process {holder}, a Poise "
                f"older than this one that allows no other writer; stop it first"
            ) from None
        self.token = secrets.token_hex(8)
        self.path = writer_lock_path(db_path, self.token)
        try:
            self._fd = _open(db_path, self.path, os.O_RDWR | os.O_CREAT | os.O_EXCL)
        except RecordingError:
            os.close(self._legacy_fd)
            raise
        fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)  # a new file: no one else has it
        pid_line = f"{os.getpid()}\n".encode()
        try:
            os.write(self._fd, pid_line)
            os.posix_fallocate(self._fd, len(pid_line), DISK_RESERVE_BYTES)  # blocks, not a hole
        except OSError as exc:
            self.release()
            raise RecordingError(
                f"run store {db_path}: no room for the writer's {DISK_RESERVE_BYTES // 1024} KiB "
                f"failure reserve in {self.path}: {_describe(exc)}"
            ) from None
        self._reserve_at = len(pid_line)

    def give_up_reserve(self) -> None:
        """Free the disk reserve (the store just failed a write): the failure is stored in it."""
        if self._fd >= 0:
            os.ftruncate(self._fd, self._reserve_at)

    def release(self) -> None:
        """Give up both locks and delete this writer's lock file. Idempotent."""
        if self._fd < 0:
            return
        with contextlib.suppress(FileNotFoundError):
            self.path.unlink()
        os.close(self._fd)  # closing drops the flock
        os.close(self._legacy_fd)
        self._fd = self._legacy_fd = -1
