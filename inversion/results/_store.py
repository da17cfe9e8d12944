"""HDF5 input and output of result files and series files: the one module of :mod:`inversion`
that opens them (beside :mod:`inversion.results._backend`, emcee's backend for ``/mcmc``).

Writing
    :func:`write_input` creates a result file with its input part; :func:`write_groups` writes
    final groups under ``/_staging`` and then moves each into place, so a crash while writing
    leaves the previous complete state readable; :func:`write_tree` writes or replaces groups
    directly (series files); :func:`set_attrs` sets attributes.  Numeric datasets carry
    Fletcher-32 checksums, so damaged bytes raise an error on reading instead of becoming
    numbers.

Reading
    :func:`read_tree` copies a file (or the parts asked for) into plain :class:`Node` objects,
    and converts HDF5's complaints about a missing, cut-short, damaged or foreign file into one
    :class:`forward.InputError`; what the nodes mean is decided elsewhere
    (:mod:`inversion.results._result`, :mod:`inversion.series._seriesfile`).  Readers never take
    the writer lock; they retry for a few seconds while another process has the file open for
    writing, then say "busy".

Layouts and dataset names: :mod:`inversion.results._schema`.
"""

from __future__ import annotations

import datetime as _dt
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numpy as np

from forward import InputError

from ._outputs import is_lock_error, waiting_for_lock, writer_pid
from ._schema import FORMAT_VERSION, INPUT_MEASURED, INPUT_MEASUREMENT_CHANNELS, \
    INPUT_MEASUREMENTS, INPUT_PRIORS, INPUT_RUN, INPUT_SPECTRUM, MCMC, attrs_of

__all__ = ["Node", "Link", "HDF5_ERRORS", "now_text", "checksummed", "write_input",
           "set_attrs", "write_groups", "write_tree", "read_tree", "is_hdf5",
           "open_for_reading", "unreadable", "damaged_message", "check_finished",
           "read_head", "read_mcmc_head", "has_same_input", "READ_LOCK_WAIT_S"]

#: What reading a file that is cut short, damaged or not HDF5 raises: h5py's OSError (the file
#: and its data, checksum failures included), KeyError (an object HDF5 can no longer find) and
#: RuntimeError (damaged internal indices), and UnicodeDecodeError for text whose bytes were
#: damaged.  Measured by overwriting and cutting short result files at hundreds of offsets;
#: nothing else came up.  Only reading and writing calls are wrapped with it, never our own
#: logic, and forward.InputError (a ValueError) passes through.
HDF5_ERRORS = (OSError, KeyError, RuntimeError, UnicodeDecodeError)

_STR = h5py.string_dtype()

#: seconds a reader retries while a writer holds HDF5's own file lock (a writer keeps the file
#: open only for the moment of writing one step)
READ_LOCK_WAIT_S = 5.0


def now_text() -> str:
    """The current time (UTC, seconds) for the files' time stamps."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


@dataclass(frozen=True)
class Link:
    """An HDF5 external link to ``path`` inside ``file`` (relative to the linking file)."""

    file: str
    path: str = "/"


@dataclass
class Node:
    """A group or dataset read from a file: its attributes, and its value or children.

    ``node["a/b"]`` walks down by path; ``"a/b" in node`` asks whether it exists.
    """

    attrs: dict = field(default_factory=dict)
    value: object = None
    children: dict = field(default_factory=dict)
    is_dataset: bool = False
    link: Link | None = None

    def get(self, path: str):
        node = self
        for part in path.strip("/").split("/"):
            if not part:
                continue
            node = node.children.get(part)
            if node is None:
                return None
        return node

    def __getitem__(self, path: str) -> "Node":
        node = self.get(path)
        if node is None:
            raise KeyError(path)
        return node

    def __contains__(self, path: str) -> bool:
        return self.get(path) is not None

    def datasets(self) -> dict:
        """Name -> value of the datasets directly in this group, in file order."""
        return {k: n.value for k, n in self.children.items() if n.is_dataset}


# ----------------------------------------------------------------------------------------------
# writing
def checksummed(arr) -> dict:
    """Dataset options adding a Fletcher-32 checksum to each chunk of a numeric array.

    HDF5 verifies the checksum on every read, so bytes damaged on disk raise an error instead
    of being read as numbers (scalars and empty arrays cannot be chunked and go without).
    """
    arr = np.asarray(arr)
    if arr.ndim == 0 or arr.size == 0 or arr.dtype.kind not in "biuf":
        return {}
    return {"fletcher32": True}


def write_input(path, *, run_text, counts, measured, priors, attrs, measurements=None):
    """Create a result file (replacing any file there) with its root attributes and
    ``/input``; the attribute ``format_version`` is added.  ``measurements``: a joint run's
    ``(names, channels per spectrum)`` (``counts`` and ``measured`` then hold the spectra
    joined in that order)."""
    counts = np.asarray(counts, dtype=float)
    measured = np.asarray(measured, dtype=bool)
    with h5py.File(path, "w") as f:
        for key, value in {**attrs, "format_version": FORMAT_VERSION}.items():
            f.attrs[key] = value
        f.create_dataset(INPUT_RUN, data=run_text, dtype=_STR)
        d = f.create_dataset(INPUT_SPECTRUM, data=counts, **checksummed(counts))
        d.attrs.update(attrs_of(INPUT_SPECTRUM))
        f.create_dataset(INPUT_MEASURED, data=measured, **checksummed(measured))
        f.create_dataset(INPUT_PRIORS, data=np.array(priors, dtype=object), dtype=_STR)
        if measurements is not None:
            names, channels = measurements
            d = f.create_dataset(INPUT_MEASUREMENTS, data=np.array(names, dtype=object),
                                 dtype=_STR)
            d.attrs.update(attrs_of(INPUT_MEASUREMENTS))
            channels = np.asarray(channels, dtype=np.int64)
            d = f.create_dataset(INPUT_MEASUREMENT_CHANNELS, data=channels,
                                 **checksummed(channels))
            d.attrs.update(attrs_of(INPUT_MEASUREMENT_CHANNELS))


def _open_for_writing(path):
    """``h5py.File(path, "a")``, waiting a while (then "busy", naming the file) while another
    program has the file open."""
    return waiting_for_lock(lambda: h5py.File(path, "a"), path)


def set_attrs(path, group: str = "/", **attrs) -> None:
    """Set attributes of a group (created if missing) of an existing file."""
    with _open_for_writing(path) as f:
        g = f.require_group(group) if group not in ("", "/") else f
        for key, value in attrs.items():
            g.attrs[key] = value


def _write_tree(group, tree):
    """Write a nested dict: dict -> group; (array, attrs) or array -> dataset; Link -> an
    external link; '@attrs' -> attributes."""
    for key, value in tree.items():
        if key == "@attrs":
            for k, v in value.items():
                group.attrs[k] = v
            continue
        if isinstance(value, dict):
            _write_tree(group.create_group(key), value)
            continue
        if isinstance(value, Link):
            group[key] = h5py.ExternalLink(value.file, value.path)
            continue
        attrs = {}
        if isinstance(value, tuple):
            value, attrs = value
        arr = np.asarray(value)
        if arr.dtype.kind in ("U", "O"):
            d = group.create_dataset(key, data=arr.astype(object), dtype=_STR)
        else:
            d = group.create_dataset(key, data=arr, **checksummed(arr))
        for k, v in attrs.items():
            d.attrs[k] = v


def write_groups(path, groups: dict):
    """Write final groups under /_staging, then swap each into place."""
    with _open_for_writing(path) as f:
        if "_staging" in f:
            del f["_staging"]
        stage = f.create_group("_staging")
        for name, tree in groups.items():
            _write_tree(stage.create_group(name), tree)
        f.flush()
        for name in groups:
            if name in f:
                del f[name]
            f.move(f"_staging/{name}", name)
        del f["_staging"]


def write_tree(path, tree: dict, *, mode: str = "a") -> None:
    """Write groups given by path (``"members/summary"``), replacing any there (a value of
    None removes the group); ``'@attrs'`` sets root attributes.  ``mode="w"`` starts a new
    file (``format_version`` added)."""
    with (h5py.File(path, mode) if mode == "w" else _open_for_writing(path)) as f:
        if mode == "w":
            f.attrs["format_version"] = FORMAT_VERSION
        for key, value in tree.items():
            if key == "@attrs":
                for k, v in value.items():
                    f.attrs[k] = v
                continue
            if key in f:
                del f[key]
            if value is None:  # removed, not replaced
                continue
            parent, _, name = key.rpartition("/")
            _write_tree(f.require_group(parent) if parent else f, {name: value})


# ----------------------------------------------------------------------------------------------
# reading
def is_hdf5(path) -> bool:
    """True for an HDF5 file (False for anything else, also a file that cannot be read)."""
    try:
        return bool(h5py.is_hdf5(path))
    except OSError:
        return False


def open_for_reading(path, wait_s: float | None = None):
    """``h5py.File(path, "r")``, retried for ``wait_s`` seconds (default
    :data:`READ_LOCK_WAIT_S`) while another process has the file open for writing; then the
    lock error is raised (see :func:`unreadable`)."""
    deadline = time.monotonic() + (READ_LOCK_WAIT_S if wait_s is None else wait_s)
    while True:
        try:
            return h5py.File(path, "r")
        except OSError as exc:
            if not is_lock_error(exc) or time.monotonic() > deadline:
                raise
            time.sleep(0.05)


def damaged_message(exc) -> str:
    """One line saying a result file cannot be read, with HDF5's own reason."""
    reason = " ".join(str(exc).split()) or type(exc).__name__
    return (f"damaged or not a result file (HDF5 says: {reason}); re-run the inversion "
            "with --force, or restore the file from a copy")


def unreadable(exc, path):
    """The :class:`forward.InputError` for a file that could not be read: "busy" when
    another process holds it, "damaged" otherwise."""
    if is_lock_error(exc):
        pid = writer_pid(path)
        who = (f"sondage process {pid} is writing it"
               if pid is not None and pid > 0 and pid != os.getpid()
               else "another program has it open")
        return InputError(f"busy: {who}; try again when it has finished or closed the file",
                          where=str(path))
    if (Path(path).is_file() and Path(path).suffix.lower() not in (".h5", ".hdf5", ".hdf", ".he5")
            and not is_hdf5(path)):
        return InputError("not an HDF5 file, so not a result file of sondage invert; give the "
                          "file that sondage invert -o wrote", where=str(path))
    return InputError(damaged_message(exc), where=str(path))


def check_finished(path, attrs) -> None:
    """Refuse a result file whose inversion is still writing it or stopped before finishing."""
    status = attrs.get("status", "")
    status = status.decode() if isinstance(status, bytes) else str(status)
    if status != "running":
        return
    pid = writer_pid(path)
    if pid is not None:
        who = f"sondage process {pid}" if pid > 0 else "another sondage process"
        raise InputError(f"busy: {who} is still writing this result file; wait for it to "
                         "finish", where=str(path))
    raise InputError("the inversion writing this file stopped before it finished (status "
                     "'running', no process writing it); continue it with sondage invert ... "
                     "--resume, then try again", where=str(path))


def _plain(value):
    """An HDF5 value as plain Python: text decoded (strictly: undecodable bytes mean damage),
    string arrays as lists, numbers and numeric arrays as numpy gives them."""
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.ndarray) and value.dtype.kind in "SO":
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def _read(obj, skip: tuple, prefix: str, head: dict) -> Node:
    node = Node(attrs={k: _plain(v) for k, v in obj.attrs.items()})
    if isinstance(obj, h5py.Dataset):
        node.is_dataset = True
        if prefix in head:
            n = head[prefix]
            if isinstance(n, str):  # rows up to a counter kept as the group's attribute
                n = obj.parent.attrs.get(n)
                n = None if n is None else int(n)
            node.value = _plain(obj[:n] if n is not None else obj[()])
        else:
            node.value = _plain(obj[()])
        return node
    for key in obj.keys():
        path = f"{prefix}/{key}" if prefix else key
        link = obj.get(key, getlink=True)
        if isinstance(link, h5py.ExternalLink):
            node.children[key] = Node(link=Link(link.filename, link.path))
            continue
        child = obj[key]
        if isinstance(child, h5py.Dataset) and prefix in skip and path not in head:
            continue
        node.children[key] = _read(child, skip, path, head)
    return node


def read_tree(path, *, skip=(), head=None, require_finished: bool = False,
              what: str = "result file") -> Node:
    """Read a whole file into a :class:`Node` tree.

    Parameters
    ----------
    path : path
    skip : tuple of str
        Groups whose datasets are left out (their attributes are read), unless ``head``
        names them.
    head : dict, optional
        Dataset path -> number of leading rows to read (None for all; a string names the
        attribute of the dataset's group that holds the number, e.g. emcee's "iteration").
    require_finished : bool
        Refuse a result file still being written, or whose writer died (status "running").
    what : str
        What the file should be, for the "not found" message.

    Raises
    ------
    forward.InputError
        Missing, a folder, busy, cut short, damaged or not HDF5 (one line naming the file).
    """
    path = Path(path)
    if not path.exists():
        raise InputError(f"{what} not found", where=str(path))
    if path.is_dir():
        raise InputError(f"this is a folder, not a {what}", where=str(path))
    head = dict(head or {})
    try:
        with open_for_reading(path) as f:
            if require_finished:
                check_finished(path, dict(f.attrs))
            return _read(f, tuple(skip), "", head)
    except HDF5_ERRORS as exc:
        raise unreadable(exc, path) from exc


def read_head(path) -> tuple[dict, set]:
    """Root attributes and the names of the top-level groups of a file, read cheaply.

    Raises
    ------
    forward.InputError
        A file that cannot be read (busy, damaged, not HDF5).
    """
    try:
        with h5py.File(path, "r") as f:
            return {k: _plain(v) for k, v in f.attrs.items()}, set(f.keys())
    except HDF5_ERRORS as exc:
        raise unreadable(exc, path) from exc


def read_attrs(path, group: str = "/") -> dict:
    """The attributes of one group ({} when the group is absent)."""
    try:
        with open_for_reading(path) as f:
            return {k: _plain(v) for k, v in f[group].attrs.items()} if group in f else {}
    except HDF5_ERRORS as exc:
        raise unreadable(exc, path) from exc


def read_mcmc_head(path) -> tuple[dict, dict | None]:
    """Root attributes and the ``/mcmc`` attributes (None without a chain) of a result file,
    for resuming it."""
    try:
        with h5py.File(path, "r") as f:
            root = {k: _plain(v) for k, v in f.attrs.items()}
            mcmc = {k: _plain(v) for k, v in f[MCMC].attrs.items()} if MCMC in f else None
    except HDF5_ERRORS as exc:
        raise unreadable(exc, path) from exc
    return root, mcmc


def has_same_input(path, *, run_text: str, counts) -> bool:
    """True if the file's stored input equals this run text and these counts (False for a
    file that is no result file)."""
    try:
        if not h5py.is_hdf5(path):
            return False
        with h5py.File(path, "r") as f:
            if "input" not in f:
                return False
            stored = _plain(f[INPUT_RUN][()])
            same_counts = np.array_equal(f[INPUT_SPECTRUM][()],
                                         np.asarray(counts, dtype=float))
    except HDF5_ERRORS as exc:
        raise unreadable(exc, path) from exc
    return stored == run_text and same_counts
