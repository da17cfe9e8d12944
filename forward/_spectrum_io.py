"""Spectrum files: our plain text/CSV format and datasets inside HDF5 files.

Text form (comma, semicolon or whitespace separated; ``#`` starts a comment)::

    # invented example
    channel,energy_keV,counts
    0,20.0,0
    1,22.0,3

* one column: counts, channels numbered 0, 1, 2, ...;
* two columns without a header: channel, counts;
* a header row (the first non-comment row, any cell not a number): the columns named
  ``counts`` (required) and ``channel`` (optional) are used by name, others are ignored.

HDF5 form: ``file.h5:/path/to/dataset``, a 1-D dataset of counts or a 2-D dataset with two
columns (channel, counts).

Channels must be whole, non-negative and strictly increasing.  Gaps are allowed: the channels
are kept explicitly and the model is compared with the data only in the channels present.
Counts must be finite and non-negative; non-integer counts are accepted with a warning, since
the likelihood assumes counted events.
"""

from __future__ import annotations

import logging
import math
import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._errors import InputError

__all__ = ["Spectrum", "read_spectrum", "write_spectrum_csv", "NonIntegerCountsWarning"]

log = logging.getLogger(__name__)

_HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5")
_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")


class NonIntegerCountsWarning(UserWarning):
    """A spectrum holds counts that are not whole numbers."""


@dataclass(frozen=True, eq=False)
class Spectrum:
    """A measured spectrum.

    Attributes
    ----------
    channel : numpy.ndarray of int
        Channel numbers, non-negative and strictly increasing (gaps allowed).
    counts : numpy.ndarray of float
        Counts per channel, finite and non-negative.
    source : str
        Where the spectrum came from (file, or ``file.h5:/dataset``).
    """

    channel: np.ndarray
    counts: np.ndarray
    source: str

    def __len__(self) -> int:
        return int(self.channel.size)

    @property
    def has_gaps(self) -> bool:
        """True if some channel between the first and the last is missing."""
        return bool(self.channel.size and self.channel[-1] - self.channel[0] + 1 != self.channel.size)


def read_spectrum(spec) -> Spectrum:
    """Read a spectrum from a text/CSV file or an HDF5 dataset.

    Parameters
    ----------
    spec : str or Path
        A text file, or ``"file.h5:/path/to/dataset"``.

    Returns
    -------
    Spectrum

    Raises
    ------
    InputError
        Naming the file and line (or dataset) for every problem.
    """
    text = str(spec)
    h5 = _split_hdf5(text)
    if h5 is not None:
        return _read_hdf5(*h5)
    path = Path(text)
    if not path.exists():
        raise InputError("spectrum file not found; give a text/CSV file or file.h5:/dataset",
                         where=text)
    if path.is_dir():
        raise InputError("this is a folder, not a spectrum file", where=text)
    data = path.read_bytes()
    if data.startswith(_HDF5_MAGIC):
        raise InputError("this is an HDF5 file; name the dataset as file.h5:/path/to/dataset",
                         where=text)
    return _read_text(data, text)


def _split_hdf5(text: str):
    """``(file, dataset)`` if ``text`` is ``file.h5:/dataset``, else None."""
    idx = text.rfind(":/")
    if idx <= 0:
        return None
    head, tail = text[:idx], text[idx + 1:]
    if head.lower().endswith(_HDF5_SUFFIXES) or (Path(head).is_file() and not Path(text).exists()):
        return head, tail
    return None


def _read_text(data: bytes, source: str) -> Spectrum:
    if b"\x00" in data:
        raise InputError("binary data (NUL bytes) in a spectrum file; a spectrum is text with one "
                         "or two columns, or file.h5:/dataset", where=source)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError("not UTF-8 text (binary data?); a spectrum is text with one or two "
                         "columns, or file.h5:/dataset", where=f"{source}: line {line}") from None

    rows: list[tuple[int, list[str]]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        if "," in line or ";" in line:
            cells = [c.strip() for c in re.split(r"[,;]", line)]
        else:
            cells = line.split()
        rows.append((lineno, cells))
    if not rows:
        raise InputError("empty spectrum: no rows of numbers; write one count per line, or "
                         "channel and counts", where=source)

    width = len(rows[0][1])
    header: list[str] | None = None
    if any(c and not _is_number(c) for c in rows[0][1]):
        lineno, header = rows[0]
        rows = rows[1:]
        for c in header:
            if not _NAME.match(c):
                raise InputError(f"header cell {c!r} is not a column name (letters, digits, _); "
                                 "a header names columns such as channel,counts",
                                 where=f"{source}: line {lineno}")
        if "counts" not in header:
            raise InputError(f"the header names columns {', '.join(header)} but no 'counts' "
                             "column; name the counts column 'counts' (and optionally 'channel')",
                             where=f"{source}: line {lineno}")
        if len(set(header)) != len(header):
            raise InputError("a column name appears twice in the header",
                             where=f"{source}: line {lineno}")
        if not rows:
            raise InputError("empty spectrum: a header but no rows of numbers", where=source)
    elif width > 2:
        raise InputError(f"{width} columns without a header row; give one column (counts), two "
                         "(channel, counts), or a header naming 'channel' and 'counts'",
                         where=f"{source}: line {rows[0][0]}")

    values = np.empty((len(rows), width))
    for r, (lineno, cells) in enumerate(rows):
        if len(cells) != width:
            raise InputError(f"ragged row: {len(cells)} cells where the "
                             f"{'header' if header else 'first row'} has {width}; every row needs "
                             "the same number of columns", where=f"{source}: line {lineno}")
        for k, c in enumerate(cells):
            try:
                values[r, k] = float(c)
            except ValueError:
                what = "an empty cell" if not c else f"{c[:20]!r} is not a number"
                raise InputError(f"{what} in column {k + 1}; cells must be numbers",
                                 where=f"{source}: line {lineno}") from None
    lines = [lineno for lineno, _ in rows]
    if header is not None:
        counts = values[:, header.index("counts")]
        channel = values[:, header.index("channel")] if "channel" in header else None
    elif width == 1:
        counts, channel = values[:, 0], None
    else:
        channel, counts = values[:, 0], values[:, 1]
    return _checked(channel, counts, source, lambda i: f"{source}: line {lines[i]}")


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _checked(channel, counts, source: str, where_row) -> Spectrum:
    """Check counts and channels; ``where_row(i)`` names row ``i`` in messages."""
    counts = np.asarray(counts, dtype=float)
    bad = np.flatnonzero(~np.isfinite(counts))
    if bad.size:
        i = int(bad[0])
        raise InputError(f"count {counts[i]} is not a finite number; counts must be finite and >= 0",
                         where=where_row(i))
    bad = np.flatnonzero(counts < 0)
    if bad.size:
        i = int(bad[0])
        raise InputError(f"negative count {counts[i]:g}; counts must be >= 0", where=where_row(i))
    if channel is None:
        channel_int = np.arange(counts.size, dtype=np.int64)
    else:
        channel = np.asarray(channel, dtype=float)
        bad = np.flatnonzero(~np.isfinite(channel) | (channel < 0) | (channel != np.round(channel)))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"channel {channel[i]:g} is not a whole number >= 0",
                             where=where_row(i))
        channel_int = channel.astype(np.int64)
        steps = np.flatnonzero(np.diff(channel_int) <= 0)
        if steps.size:
            i = int(steps[0]) + 1
            raise InputError(f"channel {channel_int[i]} does not follow channel "
                             f"{channel_int[i - 1]}; channels must be strictly increasing",
                             where=where_row(i))
    frac = np.flatnonzero(counts != np.round(counts))
    if frac.size:
        i = int(frac[0])
        warnings.warn(f"{where_row(i)}: {frac.size} count(s) are not whole numbers (first: "
                      f"{counts[i]:g}); the likelihood treats them as counted events",
                      NonIntegerCountsWarning, stacklevel=3)
    spectrum = Spectrum(channel_int, counts, source)
    if spectrum.has_gaps:
        log.info("%s: %d channel(s) missing between %d and %d; the fit uses the channels present",
                 source, int(channel_int[-1] - channel_int[0] + 1 - channel_int.size),
                 int(channel_int[0]), int(channel_int[-1]))
    return spectrum


def _read_hdf5(filename: str, dataset: str) -> Spectrum:
    import h5py

    source = f"{filename}:{dataset}"
    path = Path(filename)
    if not path.is_file():
        raise InputError("HDF5 file not found; write file.h5:/path/to/dataset", where=filename)
    try:
        fh = h5py.File(path, "r")
    except OSError:
        raise InputError("not a readable HDF5 file; write file.h5:/path/to/dataset",
                         where=filename) from None
    with fh:
        if dataset not in fh:
            found: list[str] = []
            fh.visititems(lambda name, obj: found.append("/" + name)
                          if isinstance(obj, h5py.Dataset) and len(found) < 8 else None)
            hint = f"; datasets in the file: {', '.join(found)}" if found else "; the file has no datasets"
            raise InputError(f"no dataset {dataset!r}{hint}", where=filename)
        obj = fh[dataset]
        if not isinstance(obj, h5py.Dataset):
            raise InputError("this is a group, not a dataset; name a dataset inside it",
                             where=source)
        if obj.dtype.kind not in "iuf":
            raise InputError(f"dataset holds {obj.dtype} values; counts must be numbers",
                             where=source)
        values = np.asarray(obj[()], dtype=float)
    if values.size == 0:
        raise InputError("empty spectrum: the dataset has no values", where=source)
    if values.ndim == 1:
        channel, counts = None, values
    elif values.ndim == 2 and values.shape[1] == 2:
        channel, counts = values[:, 0], values[:, 1]
    else:
        raise InputError(f"dataset has shape {values.shape}; allowed: 1-D counts, or 2-D with two "
                         "columns (channel, counts)", where=source)
    return _checked(channel, counts, source, lambda i: f"{source}[{i}]")


def write_spectrum_csv(path, columns: dict, header_lines: list[str] | None = None) -> None:
    """Write columns in our spectrum format (comma separated, a header row, ``#`` comments).

    Parameters
    ----------
    path : str or Path
        The file to write.
    columns : dict[str, array]
        Column name -> 1-D array, all the same length, written in this order.  Integer arrays
        are written as whole numbers, floats in the shortest form that reads back exactly.
    header_lines : list of str, optional
        Comment lines written first, each prefixed with ``# ``.
    """
    if not columns:
        raise ValueError("write_spectrum_csv needs at least one column")
    arrays = {}
    length = None
    for name, arr in columns.items():
        if not _NAME.match(name):
            raise ValueError(f"column name {name!r} must be letters, digits and _")
        a = np.asarray(arr)
        if a.ndim != 1:
            raise ValueError(f"column {name!r} must be 1-D, got shape {a.shape}")
        if length is None:
            length = a.size
        elif a.size != length:
            raise ValueError(f"column {name!r} has {a.size} values, the first column {length}")
        arrays[name] = a
    formatters = [(_fmt_int if a.dtype.kind in "iub" else _fmt_float) for a in arrays.values()]
    out = []
    for line in header_lines or []:
        for part in str(line).splitlines() or [""]:
            out.append(f"# {part}".rstrip())
    out.append(",".join(arrays))
    cols = list(arrays.values())
    for i in range(length):
        out.append(",".join(f(c[i]) for f, c in zip(formatters, cols)))
    Path(path).write_text("\n".join(out) + "\n", encoding="utf-8")


def _fmt_int(v) -> str:
    return str(int(v))


def _fmt_float(v) -> str:
    v = float(v)
    if math.isfinite(v) and v == int(v) and abs(v) < 1e15:
        return str(int(v))
    return repr(v)
