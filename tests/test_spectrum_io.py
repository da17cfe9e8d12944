"""Spectrum files: every accepted form, the checks, and the writer.  All data are invented."""

from __future__ import annotations

import warnings

import h5py
import numpy as np
import pytest

import forward
from forward._spectrum_io import NonIntegerCountsWarning


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_one_column(tmp_path):
    path = _write(tmp_path, "one.txt", "# invented\n4\n\n7  # a comment\n0\n")
    s = forward.read_spectrum(path)
    assert s.channel.tolist() == [0, 1, 2] and s.channel.dtype.kind == "i"
    assert s.counts.tolist() == [4.0, 7.0, 0.0] and s.counts.dtype == float
    assert s.source == str(path) and len(s) == 3 and not s.has_gaps


@pytest.mark.parametrize("sep", [",", ";", " ", "\t", " , "])
def test_two_columns_any_separator(tmp_path, sep):
    rows = [(10, 3), (11, 5), (12, 8)]
    path = _write(tmp_path, "two.csv", "\n".join(f"{c}{sep}{n}" for c, n in rows) + "\n")
    s = forward.read_spectrum(str(path))
    assert s.channel.tolist() == [10, 11, 12]
    assert s.counts.tolist() == [3.0, 5.0, 8.0]


def test_header_picks_columns_by_name(tmp_path):
    text = ("# invented, as `sondage simulate` writes it\n"
            "energy_keV,counts,channel,expected,expected_Ta\n"
            "30.0,2,0,2.5,0.0\n"
            "32.2,4,1,3.5,1.0\n")
    s = forward.read_spectrum(_write(tmp_path, "sim.csv", text))
    assert s.channel.tolist() == [0, 1]
    assert s.counts.tolist() == [2.0, 4.0]


def test_header_with_counts_only(tmp_path):
    s = forward.read_spectrum(_write(tmp_path, "c.csv", "counts\n5\n6\n"))
    assert s.channel.tolist() == [0, 1] and s.counts.tolist() == [5.0, 6.0]


def test_gaps_are_kept(tmp_path):
    s = forward.read_spectrum(_write(tmp_path, "gap.txt", "0 1\n1 2\n5 3\n"))
    assert s.channel.tolist() == [0, 1, 5] and s.has_gaps


def test_non_integer_counts_warn(tmp_path):
    path = _write(tmp_path, "f.txt", "1\n2.5\n3\n")
    with pytest.warns(NonIntegerCountsWarning, match=r"line 2: 1 count\(s\) are not whole"):
        s = forward.read_spectrum(path)
    assert s.counts.tolist() == [1.0, 2.5, 3.0]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        forward.read_spectrum(_write(tmp_path, "i.txt", "1\n2.0\n3\n"))  # whole numbers: silent


def test_hdf5_one_and_two_dimensional(tmp_path):
    path = tmp_path / "data.h5"
    counts = np.array([0, 3, 9, 4], dtype=np.int32)
    with h5py.File(path, "w") as f:
        f["spectra/a"] = counts
        f["spectra/b"] = np.column_stack([np.arange(100, 104), counts]).astype(float)
        f["spectra/c"] = np.zeros((2, 3))
    a = forward.read_spectrum(f"{path}:/spectra/a")
    assert a.channel.tolist() == [0, 1, 2, 3] and a.counts.tolist() == [0, 3, 9, 4]
    assert a.source == f"{path}:/spectra/a"
    b = forward.read_spectrum(f"{path}:/spectra/b")
    assert b.channel.tolist() == [100, 101, 102, 103] and b.counts.tolist() == [0, 3, 9, 4]
    with pytest.raises(forward.InputError, match=r"shape \(2, 3\)"):
        forward.read_spectrum(f"{path}:/spectra/c")
    with pytest.raises(forward.InputError, match="group, not a dataset"):
        forward.read_spectrum(f"{path}:/spectra")
    with pytest.raises(forward.InputError, match="this is an HDF5 file; name the dataset"):
        forward.read_spectrum(path)


def test_hdf5_bad_values_name_the_row(tmp_path):
    path = tmp_path / "bad.hdf5"
    with h5py.File(path, "w") as f:
        f["s"] = np.array([1.0, 2.0, -4.0])
    with pytest.raises(forward.InputError) as err:
        forward.read_spectrum(f"{path}:/s")
    assert str(err.value) == f"{path}:/s[2]: negative count -4; counts must be >= 0"


def test_write_then_read_round_trip(tmp_path):
    rng = np.random.default_rng(11)
    channel = np.arange(50)
    expected = rng.uniform(0, 200, 50)
    counts = rng.poisson(expected)
    path = tmp_path / "out.csv"
    forward.write_spectrum_csv(path, {"channel": channel, "energy_keV": 30.0 + 2.2 * channel,
                                      "counts": counts, "expected": expected},
                               ["invented round trip", "second line"])
    text = path.read_text().splitlines()
    assert text[:3] == ["# invented round trip", "# second line", "channel,energy_keV,counts,expected"]
    s = forward.read_spectrum(path)
    assert s.channel.tolist() == channel.tolist()
    assert s.counts.tolist() == counts.astype(float).tolist()
    back = np.loadtxt(path, delimiter=",", skiprows=3)
    assert np.array_equal(back[:, 3], expected)  # floats written so they read back exactly


def test_writer_rejects_bad_columns(tmp_path):
    with pytest.raises(ValueError, match="has 2 values"):
        forward.write_spectrum_csv(tmp_path / "x.csv", {"a": [1, 2, 3], "b": [1, 2]})
    with pytest.raises(ValueError, match="column name"):
        forward.write_spectrum_csv(tmp_path / "x.csv", {"a b": [1]})


@pytest.mark.parametrize("text, fragment", [
    ("", "empty spectrum"),
    ("channel,counts\n", "a header but no rows"),
    ("1.5,3\n2.5,4\n", "line 1: channel 1.5 is not a whole number"),
    ("0,1\n1,,\n", "line 2: ragged row"),
    ("0,\n1,2\n", "line 1: an empty cell in column 2"),
    ("0,1,\n1,2,\n", "line 1: 3 columns without a header"),  # a trailing separator is a column
    ("channel,counts,channel\n0,1,0\n", "appears twice"),
    ("chan nel,counts\n0,1\n", "line 1: header cell 'chan nel' is not a column name"),
])
def test_text_errors(tmp_path, text, fragment):
    path = _write(tmp_path, "bad.csv", text)
    with pytest.raises(forward.InputError) as err:
        forward.read_spectrum(path)
    assert str(err.value).startswith(str(path))
    assert fragment in str(err.value)
    assert "\n" not in str(err.value)


def test_missing_file(tmp_path):
    with pytest.raises(forward.InputError, match="spectrum file not found"):
        forward.read_spectrum(tmp_path / "absent.csv")
    with pytest.raises(forward.InputError, match="HDF5 file not found"):
        forward.read_spectrum(f"{tmp_path}/absent.h5:/s")
