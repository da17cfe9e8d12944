"""Spectrum files: every accepted form, the checks, and the writer.  All data are invented."""

from __future__ import annotations

import warnings
from pathlib import Path

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


def test_non_integer_counts_warn_once_naming_the_file(tmp_path):
    path = _write(tmp_path, "f.txt", "1\n2.5\n3\n4.25\n")
    with pytest.warns(NonIntegerCountsWarning) as record:
        s = forward.read_spectrum(path)
    assert len(record) == 1
    text = str(record[0].message)
    assert text.startswith(f"{path}: 2 of 4 counts are not whole numbers (the first, 2.5, at "
                           "line 2); they are read as they are")
    assert "\n" not in text
    assert s.counts.tolist() == [1.0, 2.5, 3.0, 4.25] and s.whole_counts is False
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        whole = forward.read_spectrum(_write(tmp_path, "i.txt", "1\n2.0\n3\n"))  # silent
    assert whole.whole_counts is True


def test_non_integer_counts_in_hdf5_name_the_dataset_row(tmp_path):
    path = tmp_path / "frac.h5"
    with h5py.File(path, "w") as f:
        f["s"] = np.array([4.0, 5.0, 6.5])
    with pytest.warns(NonIntegerCountsWarning, match=r"frac\.h5:/s: 1 of 3 counts .* at row 2\)"):
        s = forward.read_spectrum(f"{path}:/s")
    assert s.whole_counts is False


def test_whole_counts_is_worked_out_for_a_spectrum_built_directly():
    assert forward.Spectrum(np.arange(2), np.array([1.0, 2.0]), "x").whole_counts is True
    assert forward.Spectrum(np.arange(2), np.array([1.0, 2.5]), "x").whole_counts is False


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


# ----------------------------------------------------------------------------------------------
# files as editors and spreadsheets save them (invented numbers)
CORPUS = Path(__file__).resolve().parent / "bad_inputs"


@pytest.mark.parametrize("name", ["capitalised_header.csv", "quoted_cells.csv",
                                  "semicolon_decimal_commas.csv", "semicolon_two_columns.csv",
                                  "tab_decimal_commas.txt", "utf8_bom.csv", "utf16_bom.csv"])
def test_corpus_files_people_save_read_back(name):
    # every one of these files holds channels 0, 1, 2 with counts 12, 15, 9
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = forward.read_spectrum(CORPUS / name)
    assert s.channel.tolist() == [0, 1, 2]
    assert s.counts.tolist() == [12.0, 15.0, 9.0]
    assert s.whole_counts


@pytest.mark.parametrize("text, channel, counts", [
    # header names in any letter case, quoted or not
    ("CHANNEL,COUNTS\n3,1\n4,2\n", [3, 4], [1.0, 2.0]),
    ("'Counts'\n7\n8\n", [0, 1], [7.0, 8.0]),
    ("\"channel\", \"counts\"\n5, 6\n", [5], [6.0]),
    # semicolons with decimal commas, and with decimal points
    ("Channel;Energy_keV;Counts\n0;35,5;12\n1;37,75;13\n", [0, 1], [12.0, 13.0]),
    ("0;12.0\n1;13.0\n", [0, 1], [12.0, 13.0]),
    ("channel;counts\n0;1,5e3\n1;2,0e3\n", [0, 1], [1500.0, 2000.0]),
    # whitespace with decimal commas
    ("channel counts energy_keV\n0 12 35,5\n1 13 37,75\n", [0, 1], [12.0, 13.0]),
    ("10\t4,0\n11\t5,0\n", [10, 11], [4.0, 5.0]),
    # a comma next to a space is a separator, not a decimal comma
    ("0, 12\n1, 13\n", [0, 1], [12.0, 13.0]),
])
def test_kind_reader_numbers(tmp_path, text, channel, counts):
    s = forward.read_spectrum(_write(tmp_path, "k.csv", text))
    assert s.channel.tolist() == channel
    assert s.counts.tolist() == counts


def test_decimal_commas_in_counts_are_read_as_fractions(tmp_path):
    path = _write(tmp_path, "dc.csv", "channel;counts\n0;12,5\n1;3\n")
    with pytest.warns(NonIntegerCountsWarning, match="1 of 2 counts"):
        s = forward.read_spectrum(path)
    assert s.counts.tolist() == [12.5, 3.0]


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-be", "utf-32"])
def test_unicode_with_byte_order_mark(tmp_path, encoding):
    import codecs

    bom = {"utf-16": b"", "utf-16-be": codecs.BOM_UTF16_BE, "utf-32": b""}[encoding]
    path = tmp_path / "u.csv"
    path.write_bytes(bom + "# \u00b5C noted\r\nChannel,Counts\r\n0,4\r\n1,5\r\n".encode(encoding))
    s = forward.read_spectrum(path)
    assert s.channel.tolist() == [0, 1] and s.counts.tolist() == [4.0, 5.0]


def test_utf16_without_byte_order_mark_is_named(tmp_path):
    path = tmp_path / "u.csv"
    path.write_bytes("channel,counts\n0,4\n".encode("utf-16-le"))
    with pytest.raises(forward.InputError, match="UTF-16 text without a byte-order mark"):
        forward.read_spectrum(path)
    path.write_bytes("0,4\n".encode("utf-16") + b"\x00\x00")  # a NUL character inside
    with pytest.raises(forward.InputError, match="binary data"):
        forward.read_spectrum(path)


@pytest.mark.parametrize("text, fragment", [
    ("channel;counts\n0;1,5\n1;2.5\n", "line 3: decimal commas? line 2 writes '1,5'"),
    ("0 1,5\n1 2.5\n", "decimal commas?"),
    ("counts,Counts\n1,2\n", "appears twice"),
    ("channel,counts\n0,12,5\n", "ragged row: 3 cells where the header has 2 (decimal commas?"),
    ("12,5\n13,0\n9,5\n", "line 3: channel 9 does not follow channel 13 (decimal commas?"),
])
def test_decimal_mark_problems_are_named(tmp_path, text, fragment):
    path = _write(tmp_path, "d.csv", text)
    with pytest.raises(forward.InputError) as err:
        forward.read_spectrum(path)
    assert str(err.value).startswith(str(path)) and fragment in str(err.value)


def test_no_decimal_comma_hint_where_points_are_used(tmp_path):
    path = _write(tmp_path, "p.csv", "0,2.5,1\n1,2.7,3\n")
    with pytest.raises(forward.InputError) as err:
        forward.read_spectrum(path)
    assert "3 columns without a header" in str(err.value)
    assert "decimal commas" not in str(err.value)


def test_channel_limit(tmp_path):
    ok = forward.read_spectrum(_write(tmp_path, "ok.csv", "0,1\n65535,2\n"))
    assert ok.channel.tolist() == [0, 65535]
    for bad in ("65536", "4294967296", "1e300"):
        with pytest.raises(forward.InputError) as err:
            forward.read_spectrum(_write(tmp_path, "big.csv", f"0,1\n{bad},2\n"))
        assert str(err.value).startswith(f"{tmp_path / 'big.csv'}: line 2: channel ")
        assert "is above 65535; allowed: whole numbers from 0 to 65535" in str(err.value)


def test_one_column_row_limit(tmp_path):
    full = forward.read_spectrum(_write(tmp_path, "full.txt", "1\n" * 65536))
    assert full.channel[-1] == 65535
    with pytest.raises(forward.InputError, match=r"line 65537: 65537 rows of counts, more than "
                                                 "the 65536 channels"):
        forward.read_spectrum(_write(tmp_path, "over.txt", "1\n" * 65537))


def test_hdf5_channel_limit_names_the_row(tmp_path):
    path = tmp_path / "big.h5"
    with h5py.File(path, "w") as f:
        f["s"] = np.array([[0.0, 1.0], [2.0 ** 32, 2.0]])
    with pytest.raises(forward.InputError) as err:
        forward.read_spectrum(f"{path}:/s")
    assert str(err.value).startswith(f"{path}:/s[1]: channel 4294967296 is above 65535")
