"""Tests for the one reader of delimited numeric text (bayesprobe.io.read_delimited_table).

Outside references: the CSV quoting rules of RFC 4180 as implemented by Python's ``csv`` module
(the writer produces the files); Python's ``repr`` of a float, which reads back exactly (the
shortest round-tripping form, IEEE 754 binary64); the UTF-16 byte-order mark of the Unicode
Standard (section 23.8) and the Windows-1252 code page (0xB5 is MICRO SIGN); ``numpy.loadtxt`` as
an independent parser for the plain numeric case.
"""
from __future__ import annotations

import csv
import io
import subprocess
import sys

import numpy as np
import pytest

from bayesprobe.errors import InputError
from bayesprobe.io import DelimitedTable, load_sweep, read_delimited_table

RNG = np.random.default_rng(20261205)
A = RNG.normal(size=40) * 10.0 ** RNG.integers(-12, 4, size=40)
B = RNG.normal(size=40)


def csv_bytes(header, columns, *, delimiter=",", comments=()):
    """A table written by Python's csv module (RFC 4180 quoting), values as repr(float)."""
    buf = io.StringIO()
    for line in comments:
        buf.write("# " + line + "\n")
    w = csv.writer(buf, delimiter=delimiter, lineterminator="\n")
    w.writerow(header)
    for row in zip(*columns):
        w.writerow([repr(float(x)) for x in row])
    return buf.getvalue().encode("utf-8")


def one_line_error(excinfo, *phrases):
    msg = str(excinfo.value)
    assert isinstance(excinfo.value, InputError)
    assert "\n" not in msg
    for p in phrases:
        assert p in msg, msg
    return msg


@pytest.mark.parametrize("delimiter", [",", ";", "\t"])
def test_numbers_read_back_exactly(delimiter):
    """repr(float) round-trips exactly (Python float repr, IEEE 754 binary64)."""
    table = read_delimited_table(csv_bytes(["a", "b"], [A, B], delimiter=delimiter))
    assert isinstance(table, DelimitedTable)
    assert table.header == ["a", "b"] and table.delimiter == delimiter and len(table) == A.size
    a, b = table.numbers(["a", "b"])
    np.testing.assert_array_equal(a, A)
    np.testing.assert_array_equal(b, B)
    assert table.notes == []


def test_white_space_table_matches_numpy_loadtxt():
    """Runs of spaces separate fields; numpy.loadtxt is the independent parser of the same text."""
    body = "\n".join(f"{float(x)!r}   {float(y)!r}" for x, y in zip(A, B))
    table = read_delimited_table(("x  y\n" + body + "\n").encode())
    assert table.delimiter is None
    ref = np.loadtxt(io.StringIO(body))
    got = table.numbers([0, 1])
    np.testing.assert_array_equal(got[0], ref[:, 0])
    np.testing.assert_array_equal(got[1], ref[:, 1])


def test_quoted_names_and_fields_follow_rfc4180():
    """A quoted header name may hold the separator; quoted numbers are numbers (RFC 4180 via csv)."""
    buf = io.StringIO()
    w = csv.writer(buf, quoting=csv.QUOTE_ALL, lineterminator="\n")
    w.writerow(["sweep, id", "current [mA]"])
    for k, y in enumerate(B):
        w.writerow([f"s{k // 10}", repr(float(y))])
    table = read_delimited_table(buf.getvalue().encode())
    assert table.quoted and table.header == ["sweep, id", "current [mA]"]
    (ids,) = table.strings(["sweep, id"])
    assert ids == [f"s{k // 10}" for k in range(B.size)]
    np.testing.assert_array_equal(table.numbers([1])[0], B)


def test_fast_and_line_by_line_paths_agree():
    """More than 16 columns goes line by line; the result must equal the one-call path's."""
    narrow = read_delimited_table(csv_bytes(["a", "b"], [A, B]))
    wide_cols = [A, B] + [np.arange(A.size, dtype=float)] * 18
    wide = read_delimited_table(csv_bytes(["a", "b"] + [f"c{k}" for k in range(18)], wide_cols))
    for x, y in zip(narrow.numbers([0, 1]), wide.numbers([0, 1])):
        np.testing.assert_array_equal(x, y)


def test_row_slices_give_the_same_numbers_as_the_whole_column():
    table = read_delimited_table(csv_bytes(["a", "b"], [A, B]))
    whole = table.numbers([0, 1])
    part = table.numbers([0, 1], rows=slice(10, 25))
    np.testing.assert_array_equal(part[0], whole[0][10:25])
    np.testing.assert_array_equal(part[1], whole[1][10:25])
    assert table.line_numbers[10:25] == list(range(12, 27))


def test_missing_values_become_nan_and_line_numbers_count_every_line():
    text = "# made by hand\nv;i\n\n1;2\n2;NA\n# paused\n3;\n4;n/a\n5;-\n"
    table = read_delimited_table(text.encode())
    assert table.header_line == 2 and table.line_numbers == [4, 5, 7, 8, 9]
    v, i = table.numbers([0, 1])
    np.testing.assert_array_equal(v, [1, 2, 3, 4, 5])
    assert i[0] == 2 and np.isnan(i[1:]).all()


def test_decimal_commas_with_semicolons_and_not_with_commas():
    table = read_delimited_table(b"v;i\n1,5;2,25\n-3,0;1e-3\n")
    np.testing.assert_array_equal(table.numbers([0, 1])[0], [1.5, -3.0])
    assert table.notes == ["decimal commas read as decimal points"]
    comma = read_delimited_table(b"v,i\n1,5,2\n")
    with pytest.raises(InputError) as exc:
        comma.numbers([0, 1])
    one_line_error(exc, "line 2 has 3 fields but the header has 2")


def test_a_word_in_a_number_column_names_line_and_column():
    """Negative control: a non-number must not pass as NaN."""
    table = read_delimited_table(b"v,i\n1,2\n2,abc\n")
    with pytest.raises(InputError) as exc:
        table.numbers(["v", "i"])
    one_line_error(exc, "line 3, column 'i': 'abc' is not a number", "comment the line out")


def test_rows_reports_bad_quoting_without_raising():
    table = read_delimited_table(b'id,v\n"a,1\nb,2\n')
    rows = list(table.rows())
    assert rows[0] == (2, None) and rows[1] == (3, ["b", "2"])
    with pytest.raises(InputError) as exc:
        table.strings([0])
    one_line_error(exc, "line 2 has unbalanced quotes")


def test_encodings_utf16_bom_and_windows_1252():
    """UTF-16 with its byte-order mark (Unicode Standard 23.8); 0xB5 is MICRO SIGN in Windows-1252."""
    text = "V\tI [\u00b5A]\n1\t2\n"
    for data in (text.encode("utf-16"), text.encode("cp1252"), b"\xef\xbb\xbf" + text.encode("utf-8")):
        table = read_delimited_table(data)
        assert table.header == ["V", "I [\u00b5A]"]
        np.testing.assert_array_equal(table.numbers([1])[0], [2.0])


def test_limits_and_unusable_input(tmp_path):
    rows = "v,i\n" + "1,2\n" * 30
    assert len(read_delimited_table(rows.encode(), max_rows=30)) == 30
    with pytest.raises(InputError) as exc:
        read_delimited_table(rows.encode(), max_rows=29, where="'t.csv'", subject="sweep table")
    one_line_error(exc, "'t.csv' has more than 29 data rows, the limit for one sweep table")
    with pytest.raises(InputError) as exc:
        read_delimited_table(rows.encode(), max_bytes=20)
    one_line_error(exc, "limit")
    with pytest.raises(InputError) as exc:
        read_delimited_table(b"# nothing\n\n")
    one_line_error(exc, "holds no header or data")
    with pytest.raises(InputError) as exc:
        read_delimited_table(b"v,i\n1,\x002\n")
    one_line_error(exc, "not a text file")
    path = tmp_path / "t.csv"
    path.write_text(rows)
    from_file = read_delimited_table(path)
    assert from_file.where.startswith("'") and "t.csv" in from_file.where and len(from_file) == 30
    with pytest.raises(InputError) as exc:
        read_delimited_table(tmp_path / "missing.csv")
    one_line_error(exc, "not found")
    header_only = read_delimited_table(b"v,i\n")
    assert len(header_only) == 0 and header_only.numbers([0])[0].size == 0


def test_load_sweep_reads_through_the_table(tmp_path):
    """The sweep reader and the table reader see the same numbers (units converted by the sweep reader)."""
    v = np.linspace(-40.0, 20.0, 61)
    i = 1e-3 * np.exp(np.minimum(v - 10.0, 0.0) / 3.0) - 1e-5
    path = tmp_path / "s.csv"
    path.write_bytes(csv_bytes(["bias", "current [mA]"], [v, i * 1e3]))
    sw = load_sweep(path)
    tv, ti = read_delimited_table(path).numbers(["bias", "current [mA]"])
    np.testing.assert_array_equal(sw.voltage, tv)
    np.testing.assert_array_equal(sw.current, ti * 1e-3)


def test_old_import_paths_still_work():
    """Existing code imports these private helpers from bayesprobe.io; they must stay there."""
    from bayesprobe.io import (_MISSING, _choose_delimiter, _decode_text, _identify_columns, _load_text,  # noqa: F401
                               _norm_name, _parse_numbers, _split_fields, atomic_path, write_csv)
    assert _choose_delimiter("a;b", "1;2") == ";"
    assert _split_fields('"x, y",2', ",", True) == ["x, y", "2"]


def test_importing_io_alone_loads_no_heavy_library():
    """bayesprobe.io needs only NumPy and the standard library (parent package __init__ skipped)."""
    code = (
        "import sys, types, pathlib\n"
        "import importlib.util\n"
        "root = pathlib.Path(importlib.util.find_spec('bayesprobe').origin).parent\n"
        "p = types.ModuleType('bayesprobe'); p.__path__ = [str(root)]; sys.modules['bayesprobe'] = p\n"
        "import bayesprobe.io\n"
        "print(','.join(m for m in ('scipy', 'matplotlib', 'arviz', 'emcee', 'xarray') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


# --------------------------------------------------------------------------
# write_csv: streamed into the temporary file of atomic_path
# --------------------------------------------------------------------------


def _reference_csv(header, rows, comments=()):
    """The expected bytes, built by Python's csv module (RFC 4180 quoting) in memory."""
    buf = io.StringIO()
    for line in comments:
        buf.write(("# " + line).rstrip() + "\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    for row in rows:
        w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, (float, np.floating)) else v)
                    for v in row])
    return buf.getvalue().encode("utf-8")


def test_write_csv_bytes_equal_the_csv_module(tmp_path):
    """Quoting by RFC 4180 (Python csv), floats as repr (they read back exactly), None as an empty field."""
    from bayesprobe.io import write_csv
    rows = [["s,1", 1.5, None, 3], ['quote "q"', np.float32(0.1), "µA", -0.0], ["line\nbreak", float("nan"), "", 7]]
    rows += [[f"r{k}", float(a), float(b), k] for k, (a, b) in enumerate(zip(A, B))]
    comments = ["made by a test", "second  line  "]
    out = write_csv(tmp_path / "t.csv", ["id", "x", "y", "k"], iter(rows), comments=comments)
    assert out == tmp_path / "t.csv"
    assert out.read_bytes() == _reference_csv(["id", "x", "y", "k"], rows, comments)
    back = read_delimited_table(out)
    np.testing.assert_array_equal(back.numbers(["x"], rows=slice(-A.size, None))[0], A)


def test_write_csv_consumes_a_generator_row_by_row(tmp_path):
    """Rows reach the temporary file while the generator is still producing them (negative control:
    building the text in memory first would leave the temporary file empty until the end)."""
    from bayesprobe.io import write_csv
    sizes = []

    def temp_size():
        temps = [p for p in tmp_path.iterdir() if p.name.startswith(".t.csv.")]
        return temps[0].stat().st_size if temps else None

    def rows():
        for k in range(20_000):
            if k in (0, 19_999):
                sizes.append(temp_size())
            yield [k, float(k) / 7.0, "x" * 20]

    write_csv(tmp_path / "t.csv", ["k", "v", "s"], rows())
    assert sizes[0] is not None and sizes[0] < 1000          # the file is open before the first row
    assert sizes[1] > 400_000                                # most rows are on disk before the last is made
    assert len((tmp_path / "t.csv").read_text().splitlines()) == 20_001
    assert [p.name for p in tmp_path.iterdir()] == ["t.csv"]


def test_write_csv_failure_midway_leaves_no_file_and_no_temp(tmp_path):
    from bayesprobe.io import write_csv

    def rows():
        for k in range(10_000):
            if k == 9_000:
                raise RuntimeError("source broke")
            yield [k, float(k)]

    with pytest.raises(RuntimeError, match="source broke"):
        write_csv(tmp_path / "new.csv", ["k", "v"], rows())
    assert list(tmp_path.iterdir()) == []
    (tmp_path / "old.csv").write_text("k,v\n1,2\n")
    with pytest.raises(RuntimeError, match="source broke"):
        write_csv(tmp_path / "old.csv", ["k", "v"], rows())
    assert [p.name for p in tmp_path.iterdir()] == ["old.csv"]
    assert (tmp_path / "old.csv").read_text() == "k,v\n1,2\n"


def test_public_column_helpers():
    """identify_columns and norm_name are public; the old private names are the same objects."""
    import bayesprobe.io as bio
    assert bio.identify_columns is bio._identify_columns and bio.norm_name is bio._norm_name
    assert bio.norm_name("  Sweep - No ") == "sweep_no"
    iv, ic, fv, fi, notes = bio.identify_columns(["sweep", "current [mA]", "bias"], None, None, "'t'")
    assert (iv, ic, fv, fi) == (2, 1, 1.0, 1e-3) and notes == ["current column 'current [mA]' converted from mA to A"]
    with pytest.raises(InputError) as exc:
        bio.identify_columns(["a", "b"], None, None, "'t'")
    one_line_error(exc, "no column is recognisable as the probe voltage")


def test_tab_separated_rows_keep_their_empty_end_fields():
    """In tab-separated text (IANA text/tab-separated-values: one tab between fields) a row ending in a
    tab ends with an empty field; white space other than tabs is still trimmed.  Negative control: a row
    short of a field with no tab for it stays an error."""
    table = read_delimited_table(b"id\tx\ty \n a\t1\t\t\nb\t\t2 \n\tc\t3\n")
    assert table.header == ["id", "x", "y"]
    assert table.strings([0, 1, 2]) == [["a", "b", ""], ["1", "", "c"], ["", "2", "3"]]
    x, y = table.numbers([1, 2], rows=slice(0, 2))
    assert x[0] == 1.0 and np.isnan(x[1]) and np.isnan(y[0]) and y[1] == 2.0
    with pytest.raises(InputError) as exc:
        read_delimited_table(b"id\tx\ty\na\t1\n").strings([0])
    one_line_error(exc, "line 2 has 2 fields but the header has 3")
    comma = read_delimited_table(b"v,i\t\n1,2\t\n\t3,4\n")      # tabs at the ends of a comma table are trimmed
    assert comma.delimiter == "," and comma.header == ["v", "i"]
    np.testing.assert_array_equal(comma.numbers([0, 1])[1], [2.0, 4.0])
