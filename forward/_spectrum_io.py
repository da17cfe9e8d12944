"""Spectrum files: our plain text/CSV format and datasets inside HDF5 files.

Text form (``#`` starts a comment)::

    # invented example
    channel,energy_keV,counts
    0,20.0,0
    1,22.0,3

* one column: counts, channels numbered 0, 1, 2, ...;
* two columns without a header: channel, counts;
* a header row (the first non-comment row, any cell not a number): the columns named
  ``counts`` (required) and ``channel`` (optional), in any letter case, are used by name;
  other columns are ignored.

The separator is decided once per file: semicolons if any row holds one; otherwise commas if
any row holds one, unless every row also has a space or tab between two cells that is not next
to a comma (``0 12,5``), in which case whitespace separates; otherwise whitespace.  In semicolon and whitespace files a comma inside a number is a decimal comma
(``12,5`` is 12.5); a file that writes decimal commas in one place and decimal points in
another is refused, since ``1.234`` could then be a thousands separator.  Cells may be quoted
(``"channel","counts"``).  The text is UTF-8, with or without a byte-order mark, or UTF-16 or
UTF-32 with a byte-order mark.

HDF5 form: ``file.h5:/path/to/dataset``, a 1-D dataset of counts or a 2-D dataset with two
columns (channel, counts).

Channels must be whole, from 0 to :data:`MAX_CHANNEL` (65535: a spectrum has at most
``forward._runfile.MAX_CHANNELS`` channels, the span over which a calibration must increase),
and strictly increasing.  Gaps are allowed: the channels are kept explicitly and the model is
compared with the data only in the channels present.  Counts must be finite and
non-negative.  Counts that are not whole numbers are read as they are, with one
:class:`NonIntegerCountsWarning` naming the file, and :attr:`Spectrum.whole_counts` records
the finding so that every command applies the same rule.
"""

from __future__ import annotations

import codecs
import logging
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._errors import InputError, InputWarning, warn_input
from ._conversions import MAX_CHANNELS

__all__ = ["Spectrum", "read_spectrum", "write_spectrum_csv", "decode_text",
           "NonIntegerCountsWarning", "MAX_CHANNEL"]

log = logging.getLogger(__name__)

_HDF5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5")
_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_.\-]*$")
#: Highest channel number a spectrum may hold (channels 0 .. 65535).
MAX_CHANNEL = MAX_CHANNELS - 1
#: Byte-order marks and the codec that reads the text after them; UTF-32 before UTF-16, whose
#: little-endian mark is the start of UTF-32's.
_BOMS = ((codecs.BOM_UTF32_LE, "utf-32", "UTF-32"), (codecs.BOM_UTF32_BE, "utf-32", "UTF-32"),
         (codecs.BOM_UTF8, "utf-8-sig", "UTF-8"), (codecs.BOM_UTF16_LE, "utf-16", "UTF-16"),
         (codecs.BOM_UTF16_BE, "utf-16", "UTF-16"))
#: A number written with a decimal comma: 12,5  ,5  12,  1,5e3
_DECIMAL_COMMA = re.compile(r"^[+-]?(\d+,\d*|,\d+)([eE][+-]?\d+)?$")
#: A number written with a decimal point.
_DECIMAL_POINT = re.compile(r"^[+-]?(\d+\.\d*|\.\d+)([eE][+-]?\d+)?$")
#: A space or tab between two cells that is not next to a comma ("0 12,5" but not "0, 12").
_WHITESPACE_BETWEEN_CELLS = re.compile(r"[^\s,]\s+[^\s,]")


class NonIntegerCountsWarning(InputWarning):
    """A spectrum holds counts that are not whole numbers (they are read as they are)."""


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
    whole_counts : bool
        True if every count is a whole number.  Commands that need counted events (the
        Poisson likelihood) read this instead of deciding again.
    """

    channel: np.ndarray
    counts: np.ndarray
    source: str
    #: True if every count is a whole number.  Decided by :func:`read_spectrum` (which warns
    #: once when it is False); worked out from ``counts`` when the object is built directly.
    whole_counts: bool | None = None

    def __post_init__(self):
        if self.whole_counts is None:
            counts = np.asarray(self.counts, dtype=float)
            object.__setattr__(self, "whole_counts",
                               bool(np.all(counts == np.round(counts))))

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


def decode_text(data: bytes) -> tuple[str, str]:
    """The text of a file's bytes, and the name of the encoding that read it.

    A byte-order mark selects UTF-8, UTF-16 or UTF-32 (and is dropped); without one the bytes
    must be UTF-8.

    Parameters
    ----------
    data : bytes
        The file's content.

    Returns
    -------
    (text, encoding) : tuple of str
        ``encoding`` is ``"UTF-8"``, ``"UTF-16"`` or ``"UTF-32"``.

    Raises
    ------
    UnicodeDecodeError
        If the bytes are not text in that encoding.
    """
    for bom, codec, name in _BOMS:
        if data.startswith(bom):
            return data.decode(codec), name
    return data.decode("utf-8"), "UTF-8"


def _bom_encoding(data: bytes) -> str | None:
    for bom, _, name in _BOMS:
        if data.startswith(bom):
            return name
    return None


def _looks_like_utf16_without_bom(data: bytes) -> bool:
    """True if every other byte is NUL and the rest is printable ASCII or line ends."""
    if len(data) < 4 or len(data) % 2:
        return False
    for zeros, chars in ((data[1::2], data[0::2]), (data[0::2], data[1::2])):
        if zeros.count(0) == len(zeros) and all(32 <= b < 127 or b in (9, 10, 13) for b in chars):
            return True
    return False


def _decode_spectrum(data: bytes, source: str) -> str:
    bom = _bom_encoding(data)
    if bom is None and b"\x00" in data:
        if _looks_like_utf16_without_bom(data):
            raise InputError("UTF-16 text without a byte-order mark; save the file as UTF-8, or as "
                             "UTF-16 with a byte-order mark", where=source)
        raise InputError("binary data (NUL bytes) in a spectrum file; a spectrum is text with one "
                         "or two columns, or file.h5:/dataset", where=source)
    try:
        text, encoding = decode_text(data)
    except UnicodeDecodeError as exc:
        line = data[: exc.start].decode(exc.encoding, errors="replace").count("\n") + 1
        raise InputError(f"not {bom or 'UTF-8'} text (binary data?); a spectrum is text with one "
                         "or two columns, or file.h5:/dataset",
                         where=f"{source}: line {line}") from None
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise InputError(f"binary data (NUL characters) in {encoding} text; a spectrum is text "
                         "with one or two columns, or file.h5:/dataset",
                         where=f"{source}: line {line}")
    return text


def _separator(lines: list[str]) -> str:
    """``"semicolon"``, ``"whitespace"`` or ``"comma"``, decided once for the whole file."""
    if any(";" in line for line in lines):
        return "semicolon"
    if not any("," in line for line in lines):
        return "whitespace"
    # "0 12,5" (decimal comma in a whitespace file) against "0,12" or "0, 12" (commas between)
    if all(_WHITESPACE_BETWEEN_CELLS.search(line) for line in lines):
        return "whitespace"
    return "comma"


def _split(line: str, sep: str) -> list[str]:
    if sep == "whitespace":
        cells = line.split()
    else:
        cells = [c.strip() for c in line.split(";" if sep == "semicolon" else ",")]
    return [_unquote(c) for c in cells]


def _unquote(cell: str) -> str:
    if len(cell) >= 2 and cell[0] == cell[-1] and cell[0] in "\"'":
        return cell[1:-1].strip()
    return cell


#: Added to messages that a decimal comma in a comma-separated file could explain.
_COMMA_HINT = ("(decimal commas? in a comma-separated file every comma separates columns; write "
               "decimal points, or separate the columns with semicolons)")


def _read_text(data: bytes, source: str) -> Spectrum:
    text = _decode_spectrum(data, source)
    kept: list[tuple[int, str]] = []
    for lineno, line in enumerate(text.splitlines(), start=1):
        line = line.split("#", 1)[0].strip()
        if line:
            kept.append((lineno, line))
    if not kept:
        raise InputError("empty spectrum: no rows of numbers; write one count per line, or "
                         "channel and counts", where=source)
    sep = _separator([line for _, line in kept])

    rows: list[tuple[int, list[str]]] = []
    first_comma = first_point = None   # (line, cell) of the first decimal comma / point
    for lineno, line in kept:
        cells = _split(line, sep)
        for k, c in enumerate(cells):
            if sep != "comma" and _DECIMAL_COMMA.match(c):
                cells[k] = c.replace(",", ".")
                first_comma = first_comma or (lineno, c)
            elif _DECIMAL_POINT.match(c):
                first_point = first_point or (lineno, c)
        rows.append((lineno, cells))
    # a comma-separated file without a single decimal point may have meant decimal commas
    hint = f" {_COMMA_HINT}" if sep == "comma" and first_point is None else ""
    if first_comma and first_point:
        (l_comma, c_comma), (l_point, c_point) = first_comma, first_point
        raise InputError(
            f"decimal commas? line {l_comma} writes {c_comma!r} with a decimal comma and line "
            f"{l_point} writes {c_point!r} with a decimal point, so a point could be a thousands "
            "separator; write every number with the same decimal mark",
            where=f"{source}: line {max(l_comma, l_point)}")

    width = len(rows[0][1])
    header: list[str] | None = None
    if any(c and not _is_number(c) for c in rows[0][1]):
        lineno, cells = rows[0]
        rows = rows[1:]
        for c in cells:
            if not _NAME.match(c):
                raise InputError(f"header cell {c!r} is not a column name (letters, digits, _); "
                                 "a header names columns such as channel,counts",
                                 where=f"{source}: line {lineno}")
        header = [c.lower() for c in cells]
        if "counts" not in header:
            raise InputError(f"the header names columns {', '.join(cells)} but no 'counts' "
                             "column; name the counts column 'counts' (and optionally 'channel'), "
                             "in any letter case", where=f"{source}: line {lineno}")
        if len(set(header)) != len(header):
            raise InputError("a column name appears twice in the header (letter case aside)",
                             where=f"{source}: line {lineno}")
        if not rows:
            raise InputError("empty spectrum: a header but no rows of numbers", where=source)
    elif width > 2:
        raise InputError(f"{width} columns without a header row{hint}; give one column (counts), "
                         "two (channel, counts), or a header naming 'channel' and 'counts'",
                         where=f"{source}: line {rows[0][0]}")

    values = np.empty((len(rows), width))
    for r, (lineno, cells) in enumerate(rows):
        if len(cells) != width:
            more = hint if len(cells) > width else ""
            raise InputError(f"ragged row: {len(cells)} cells where the "
                             f"{'header' if header else 'first row'} has {width}{more}; every row "
                             "needs the same number of columns", where=f"{source}: line {lineno}")
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
    order_hint = hint if (header is None and width == 2) else ""
    return _checked(channel, counts, source, lambda i: f"{source}: line {lines[i]}",
                    lambda i: f"line {lines[i]}", order_hint=order_hint)


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _checked(channel, counts, source: str, where_row, row_name, order_hint: str = "") -> Spectrum:
    """Check counts and channels.

    ``where_row(i)`` names row ``i`` with its file in error messages (``"s.csv: line 7"``),
    ``row_name(i)`` names it inside a message that already names the file (``"line 7"``).

    ``order_hint`` is added to the message about channels that do not increase (a file whose
    decimal commas were taken for separators shows it there first).
    """
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
        if counts.size > MAX_CHANNELS:
            raise InputError(f"{counts.size} rows of counts, more than the {MAX_CHANNELS} channels "
                             f"a spectrum may have; allowed: channels 0 to {MAX_CHANNEL}",
                             where=where_row(MAX_CHANNELS))
        channel_int = np.arange(counts.size, dtype=np.int64)
    else:
        channel = np.asarray(channel, dtype=float)
        bad = np.flatnonzero(~np.isfinite(channel) | (channel < 0) | (channel != np.round(channel)))
        if bad.size:
            i = int(bad[0])
            raise InputError(f"channel {channel[i]:g} is not a whole number >= 0",
                             where=where_row(i))
        bad = np.flatnonzero(channel > MAX_CHANNEL)
        if bad.size:
            i = int(bad[0])
            raise InputError(f"channel {channel[i]:.10g} is above {MAX_CHANNEL}; allowed: whole "
                             f"numbers from 0 to {MAX_CHANNEL} (at most {MAX_CHANNELS} channels, "
                             "the span over which a calibration must increase)",
                             where=where_row(i))
        channel_int = channel.astype(np.int64)
        steps = np.flatnonzero(np.diff(channel_int) <= 0)
        if steps.size:
            i = int(steps[0]) + 1
            raise InputError(f"channel {channel_int[i]} does not follow channel "
                             f"{channel_int[i - 1]}{' ' + order_hint if order_hint else ''}; "
                             "channels must be strictly increasing", where=where_row(i))
    frac = np.flatnonzero(counts != np.round(counts))
    if frac.size:
        i = int(frac[0])
        # stacklevel 4: _checked <- _read_text/_read_hdf5 <- read_spectrum <- its caller
        warn_input(f"{frac.size} of {counts.size} counts are not whole numbers (the first, "
                   f"{counts[i]:g}, at {row_name(i)}); they are read as they are and the Poisson "
                   "likelihood treats them as counted events, which misstates the error bars of "
                   "rescaled or background-subtracted counts; give the raw counts if you have them",
                   where=source, category=NonIntegerCountsWarning, stacklevel=4)
    spectrum = Spectrum(channel_int, counts, source, whole_counts=not frac.size)
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
    return _checked(channel, counts, source, lambda i: f"{source}[{i}]", lambda i: f"row {i}")


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
