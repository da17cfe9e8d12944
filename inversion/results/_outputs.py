"""Outputs that never replace an input, and one writer at a time per result file.

The rules (README.md, "Nothing is lost"):

* an output path that names one of the command's inputs is refused, with ``--force`` or not;
* an output that exists is replaced only with ``--force`` (a result file may instead be
  continued with ``--resume``);
* a result file has one writer.  The writer holds an exclusive ``flock`` on ``<file>.lock``
  beside it for as long as it runs, with its process id written inside.  The operating system
  drops the lock when the process ends, however it ends, so the lock of a crashed or killed
  writer is simply taken over by the next one; a live writer's lock makes the next writer
  stop with one line naming the file and the owner's process id.  Readers never take the lock:
  they only ask who holds it, to say "busy" instead of "damaged".

Locks are advisory and work between processes of one machine (and on network file systems
that support ``flock``).  Worker processes forked by the writer drop their inherited copy of
the lock (:func:`release_inherited_locks`), so orphaned workers never keep a dead writer's
lock alive.
"""

from __future__ import annotations

import datetime as _dt
import errno
import fcntl
import logging
import os
import socket
import time
from pathlib import Path

from forward import InputError

__all__ = ["check_output", "same_path", "spectrum_file", "WriterLock", "writer_pid",
           "lock_path", "release_inherited_locks", "is_lock_error", "waiting_for_lock",
           "LOCK_WAIT_S"]

#: seconds a writer waits for another program to close a result file it needs to write
LOCK_WAIT_S = 30.0

#: file descriptors of the locks this process holds (closed in forked workers)
_HELD: set[int] = set()


def spectrum_file(spec) -> Path | None:
    """The file behind a spectrum argument (``file.csv``, ``file.h5:/dataset``, a Spectrum)."""
    source = getattr(spec, "source", spec)
    if not isinstance(source, (str, os.PathLike)):
        return None
    text = str(source)
    if ":" in text and not Path(text).exists():
        head = text.rsplit(":", 1)[0]
        if head:
            text = head
    return Path(text)


def same_path(a, b) -> bool:
    """True when two paths name the same file (existing or not)."""
    a, b = Path(a), Path(b)
    try:
        if a.exists() and b.exists():
            return os.path.samefile(a, b)
    except OSError:
        pass
    return a.expanduser().resolve() == b.expanduser().resolve()


def check_output(output, *, inputs: dict, force: bool, resume: bool = False,
                 resumable: bool = False, option: str = "-o", kind: str = "file") -> Path:
    """Refuse an output that would replace an input, or an existing output without ``force``.

    Parameters
    ----------
    output : path
        The file the command is about to write.
    inputs : dict
        ``{description: path}`` of the command's inputs (None values are skipped).
    force : bool
        The user allows replacing an existing output.
    resume : bool
        The output is continued, not replaced (result files).
    resumable : bool
        The output could be continued with ``--resume`` (said in the message).
    option : str
        The command-line option that named the output, for messages.
    kind : str
        What the output is ("result file", "spectrum file", ...), for messages.

    Returns
    -------
    pathlib.Path
    """
    output = Path(output)
    for what, path in inputs.items():
        if path is not None and same_path(output, path):
            raise InputError(f"{option} names the {what}, an input of this command; it is never "
                             "written over (not even with --force); choose another output path",
                             where=str(output))
    if output.is_dir():
        raise InputError(f"this is a folder; give the path of a {kind} to write",
                         where=str(output))
    if output.exists() and not (force or resume):
        raise InputError(f"{kind} exists; "
                         + ("add --resume to continue it or --force to replace it" if resumable
                            else "add --force to replace it, or choose another output path"),
                         where=str(output))
    return output


def lock_path(path) -> Path:
    """The lock file of a result file: ``<file>.lock`` beside it."""
    path = Path(path)
    return path.with_name(path.name + ".lock")


def _owner_text(fd: int) -> str:
    try:
        os.lseek(fd, 0, os.SEEK_SET)
        return os.read(fd, 512).decode("utf-8", "replace").strip()
    except OSError:
        return ""


def _owner_pid(text: str) -> int | None:
    try:
        return int(text.split()[0])
    except (IndexError, ValueError):
        return None


class WriterLock:
    """The exclusive writer lock of one result file (a context manager).

    Parameters
    ----------
    path : path
        The result file (the lock lives in ``<path>.lock``).
    """

    def __init__(self, path):
        self.path = Path(path)
        self.lock_path = lock_path(path)
        self._fd: int | None = None

    def acquire(self) -> "WriterLock":
        """Take the lock or raise :class:`forward.InputError` naming the live owner."""
        while True:
            try:
                fd = os.open(self.lock_path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644)
            except OSError as exc:
                raise InputError(f"cannot write the result file: its lock file "
                                 f"{self.lock_path.name} cannot be created ({exc.strerror}); "
                                 "choose a folder you can write to", where=str(self.path)
                                 ) from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError as exc:
                owner = _owner_pid(_owner_text(fd))
                os.close(fd)
                if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise
                who = f"process {owner}" if owner is not None else "another process"
                raise InputError(f"another sondage {who} is writing this result file; wait for "
                                 "it to finish (or stop it), then run again", where=str(self.path)
                                 ) from None
            # a previous owner may have removed the lock file between our open and our lock:
            # then we hold a lock on a file nobody else will open; start over
            try:
                same = os.stat(self.lock_path).st_ino == os.fstat(fd).st_ino
            except FileNotFoundError:
                same = False
            if same:
                break
            os.close(fd)
        started = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        os.ftruncate(fd, 0)
        os.write(fd, f"{os.getpid()} {socket.gethostname()} {started}\n".encode())
        self._fd = fd
        _HELD.add(fd)
        return self

    def release(self) -> None:
        """Drop the lock and remove the lock file (safe to call twice)."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        _HELD.discard(fd)
        try:
            os.unlink(self.lock_path)
        except OSError:
            pass
        try:
            fcntl.flock(fd, fcntl.LOCK_UN)
        finally:
            os.close(fd)

    def __enter__(self) -> "WriterLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def writer_pid(path) -> int | None:
    """Process id of the live writer of a result file, -1 if unknown, None if nobody writes."""
    try:
        fd = os.open(lock_path(path), os.O_RDONLY | os.O_CLOEXEC)
    except OSError:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            pid = _owner_pid(_owner_text(fd))
            return -1 if pid is None else pid
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def release_inherited_locks() -> None:
    """In a forked worker process: close the writer locks inherited from the parent.

    The parent keeps its own copy, so its lock stays; if the parent dies, the lock goes with
    it instead of living on in the workers.
    """
    for fd in list(_HELD):
        try:
            os.close(fd)
        except OSError:
            pass
    _HELD.clear()


def is_lock_error(exc: BaseException) -> bool:
    """True for HDF5's "unable to lock file": another process has the file open."""
    return (getattr(exc, "errno", None) in (errno.EAGAIN, errno.EWOULDBLOCK)
            or "unable to lock file" in str(exc))


def waiting_for_lock(opener, filename, *, wait_s: float | None = None,
                     doing: str = "write to it"):
    """``opener()`` (an HDF5 open), retried while another program holds the file's HDF5 lock.

    After two seconds the wait is said once on the ``sondage`` logger; after ``wait_s`` seconds
    one :class:`forward.InputError` says "busy", naming the file.

    Parameters
    ----------
    opener : callable
        Opens the file; raises OSError (:func:`is_lock_error`) while another program holds it.
    filename : path
        For the messages.
    doing : str
        What could not be done, for the message ("write its next step", ...).
    """
    wait_s = LOCK_WAIT_S if wait_s is None else float(wait_s)
    start = time.monotonic()
    told = False
    while True:
        try:
            return opener()
        except OSError as exc:
            if not is_lock_error(exc):
                raise
            waited = time.monotonic() - start
            if waited > wait_s:
                raise InputError(f"busy: another program has kept this file open for "
                                 f"{waited:.0f} s, so sondage cannot {doing}; close it there "
                                 "and run again", where=str(filename)) from None
            if not told and waited > 2.0:
                told = True
                logging.getLogger("sondage").warning(
                    "%s: waiting for another program to close the file (at most %.0f s)",
                    filename, wait_s)
            time.sleep(0.05)
