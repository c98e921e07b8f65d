"""Tests for reading sweeps and writing results (bayesprobe.io)."""
from __future__ import annotations

import io
import os
import pickle
import threading
import zipfile

import numpy as np
import pytest

from bayesprobe.errors import InputError
from bayesprobe.io import (
    atomic_write_bytes,
    atomic_write_text,
    load_sweep,
    sanitise_id,
    staged_output_dir,
    sweep_from_arrays,
    write_sweep_csv,
)
from bayesprobe.sweep import Sweep


# --------------------------------------------------------------------------
# synthetic data
# --------------------------------------------------------------------------


def characteristic(v):
    """Idealised probe current (A) for bias v (V).

    Exponential electron retardation below a 10 V knee, flat electron
    saturation of 1 mA above it, and a constant 10 uA ion current.
    Common practice, no source.
    """
    v = np.asarray(v, dtype=float)
    return 1e-3 * np.exp(np.minimum(v - 10.0, 0.0) / 3.0) - 1e-5


V = np.linspace(-40.0, 20.0, 121)
I = characteristic(V)


def write_table(path, header, rows, *, sep=",", encoding="utf-8", newline="\n", preamble=""):
    lines = [sep.join(header)] + [sep.join(str(x) for x in row) for row in rows]
    path.write_bytes((preamble + newline.join(lines) + newline).encode(encoding))
    return path


def csv_of(path, v=V, i=I, header=("voltage", "current"), **kw):
    return write_table(path, header, zip(v.tolist(), i.tolist()), **kw)


def one_line(excinfo, *phrases):
    msg = str(excinfo.value)
    assert isinstance(excinfo.value, InputError)
    assert isinstance(excinfo.value, ValueError)
    assert msg and "\n" not in msg and "\r" not in msg
    assert "Traceback" not in msg
    for phrase in phrases:
        assert phrase in msg, f"{phrase!r} not in {msg!r}"
    return msg


# --------------------------------------------------------------------------
# round trip and basic reading
# --------------------------------------------------------------------------


def test_round_trip_write_then_load_is_exact(tmp_path):
    path = write_sweep_csv(tmp_path / "shot_17.csv", (V, I), header_comment="synthetic\nsecond line")
    text = path.read_text()
    assert text.startswith("# synthetic\n# second line\nvoltage_V,current_A\n")
    sw = load_sweep(path)
    assert isinstance(sw, Sweep)
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_array_equal(sw.current, I)
    assert sw.sweep_id == "shot_17"
    assert sw.source == str(path)
    assert sw.notes == []
    assert sw.sign_flipped is False
    assert sw.n_points == V.size


def test_write_sweep_csv_accepts_a_sweep_and_neutralises_comment_lines(tmp_path):
    sw = sweep_from_arrays(V, I)
    # a comment line that looks like data must stay a comment
    path = write_sweep_csv(tmp_path / "s.csv", sw, header_comment="1,2\nvoltage,current")
    back = load_sweep(path)
    np.testing.assert_array_equal(back.voltage, sw.voltage)
    np.testing.assert_array_equal(back.current, sw.current)
    assert not list(tmp_path.glob(".*tmp"))


def test_write_sweep_csv_rejects_mismatched_arrays(tmp_path):
    with pytest.raises(ValueError):
        write_sweep_csv(tmp_path / "x.csv", (V, I[:-1]))
    assert not (tmp_path / "x.csv").exists()


@pytest.mark.parametrize(
    "name, factor, note",
    [
        ("current", 1.0, None),
        ("I", 1.0, None),
        ("I_probe", 1.0, None),
        ("current_A", 1.0, None),
        ("current [A]", 1.0, None),
        ("current [mA]", 1e-3, "current column 'current [mA]' converted from mA to A"),
        ("current (uA)", 1e-6, "converted from uA to A"),
        ("I_mA", 1e-3, "current column 'I_mA' converted from mA to A"),
        ("I_uA", 1e-6, "converted from uA to A"),
        ("I [\u00b5A]", 1e-6, "converted from uA to A"),
        ("I (\u03bcA)", 1e-6, "converted from uA to A"),
        ("I_nA", 1e-9, "converted from nA to A"),
        ("current [pA]", 1e-12, "converted from pA to A"),
        ("I/mA", 1e-3, "converted from mA to A"),
        ("Current-mA", 1e-3, "converted from mA to A"),
        ("I_probe_mA", 1e-3, "converted from mA to A"),
    ],
)
def test_current_units(tmp_path, name, factor, note):
    path = csv_of(tmp_path / "u.csv", V, I / factor, header=("voltage", name))
    sw = load_sweep(path)
    np.testing.assert_allclose(sw.current, I, rtol=1e-12, atol=0)
    if note is None:
        assert not any("converted" in n for n in sw.notes)
    else:
        assert any(note in n for n in sw.notes), sw.notes


@pytest.mark.parametrize(
    "name, factor, unit",
    [
        ("V", 1.0, None),
        ("U", 1.0, None),
        ("bias", 1.0, None),
        ("V_bias", 1.0, None),
        ("Bias Voltage", 1.0, None),
        ("bias (V)", 1.0, None),
        ("voltage [mV]", 1e-3, "mV"),
        ("V_mV", 1e-3, "mV"),
        ("V_kV", 1e3, "kV"),
        ("voltage/kV", 1e3, "kV"),
    ],
)
def test_voltage_units(tmp_path, name, factor, unit):
    path = csv_of(tmp_path / "u.csv", V / factor, I, header=(name, "I"))
    sw = load_sweep(path)
    np.testing.assert_allclose(sw.voltage, V, rtol=1e-12, atol=1e-12)
    converted = [n for n in sw.notes if "converted" in n]
    if unit is None:
        assert converted == []
    else:
        assert converted == [f"voltage column '{name}' converted from {unit} to V"]


def test_tab_separated(tmp_path):
    path = csv_of(tmp_path / "s.tsv", V, I * 1e3, header=("Voltage [V]", "Current [mA]"), sep="\t")
    sw = load_sweep(path)
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_allclose(sw.current, I, rtol=1e-12)


def test_whitespace_separated_with_units_after_a_space(tmp_path):
    rows = [f"  {v!r}   {i * 1e6!r}" for v, i in zip(V.tolist(), I.tolist())]
    text = "# bench probe\nvoltage [V]    current [uA]\n" + "\n".join(rows) + "\n"
    (tmp_path / "s.txt").write_text(text)
    sw = load_sweep(tmp_path / "s.txt")
    np.testing.assert_allclose(sw.voltage, V)
    np.testing.assert_allclose(sw.current, I, rtol=1e-12)


def test_semicolon_with_decimal_commas(tmp_path):
    rows = [f"{v:.6f};{i:.9e}".replace(".", ",") for v, i in zip(V.tolist(), I.tolist())]
    (tmp_path / "eu.csv").write_text("U;I\n" + "\n".join(rows) + "\n")
    sw = load_sweep(tmp_path / "eu.csv")
    np.testing.assert_allclose(sw.voltage, V, atol=1e-6)
    np.testing.assert_allclose(sw.current, I, rtol=1e-8)
    assert "decimal commas read as decimal points" in sw.notes


def test_semicolon_with_decimal_points(tmp_path):
    sw = load_sweep(csv_of(tmp_path / "s.dat", sep=";"))
    np.testing.assert_array_equal(sw.current, I)


def test_comments_blank_lines_crlf_bom_quotes_and_trailing_separator(tmp_path):
    rows = [f'{v!r},{i!r},' for v, i in zip(V.tolist(), I.tolist())]
    rows.insert(30, "# a comment between data rows")
    rows.insert(60, "")
    text = '# exported by a bench\r\n\r\n"Voltage (V)","Current (A)",\r\n' + "\r\n".join(rows) + "\r\n"
    (tmp_path / "s.csv").write_bytes(text.encode("utf-8-sig"))
    sw = load_sweep(tmp_path / "s.csv")
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_array_equal(sw.current, I)


def test_windows_1252_micro_sign_and_utf16(tmp_path):
    p1 = csv_of(tmp_path / "l1.csv", V, I * 1e6, header=("voltage", "current [\u00b5A]"), encoding="cp1252",
                preamble="# bench \u2013 probe 2\n")
    np.testing.assert_allclose(load_sweep(p1).current, I, rtol=1e-12)
    p2 = csv_of(tmp_path / "u16.csv", V, I, encoding="utf-16")
    np.testing.assert_array_equal(load_sweep(p2).current, I)


def test_other_columns_are_ignored_and_explicit_columns_work(tmp_path):
    rows = [(f"2024-01-01T00:00:{k:02d}", f"{v!r}", f"{i * 1e3!r}", "x") for k, (v, i) in
            enumerate(zip(V.tolist(), I.tolist()))]
    path = write_table(tmp_path / "t.csv", ("time", "bias", "Ch2 [mA]", "flag"), rows)
    # the current column has no recognisable name: reading must ask for it ...
    with pytest.raises(InputError) as ei:
        load_sweep(path)
    one_line(ei, "current", "name the current column explicitly")
    # ... and naming it (by name or by index) works and keeps its unit
    by_name = load_sweep(path, current_column="ch2 [ma]")
    by_index = load_sweep(path, voltage_column=1, current_column=2)
    by_index_text = load_sweep(path, current_column="2")
    for sw in (by_name, by_index, by_index_text):
        np.testing.assert_allclose(sw.current, I, rtol=1e-12)
        np.testing.assert_array_equal(sw.voltage, V)


def test_explicit_unknown_column_is_rejected(tmp_path):
    path = csv_of(tmp_path / "s.csv")
    with pytest.raises(InputError) as ei:
        load_sweep(path, voltage_column="nope")
    one_line(ei, "no voltage column named 'nope'", "name one of these")
    with pytest.raises(InputError) as ei:
        load_sweep(path, current_column=7)
    one_line(ei, "out of range", "use an index from 0 to 1")


# --------------------------------------------------------------------------
# NumPy files
# --------------------------------------------------------------------------


@pytest.mark.parametrize("orientation", ["columns", "rows"])
def test_npy_both_orientations(tmp_path, orientation):
    arr = np.column_stack([V, I]) if orientation == "columns" else np.vstack([V, I])
    np.save(tmp_path / "s.npy", arr)
    sw = load_sweep(tmp_path / "s.npy")
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_array_equal(sw.current, I)
    assert sw.sweep_id == "s"


def test_npy_record_array_uses_field_names_and_units(tmp_path):
    rec = np.zeros(V.size, dtype=[("V_bias", float), ("I_uA", float)])
    rec["V_bias"], rec["I_uA"] = V, I * 1e6
    np.save(tmp_path / "r.npy", rec)
    sw = load_sweep(tmp_path / "r.npy")
    np.testing.assert_allclose(sw.current, I, rtol=1e-12)
    assert any("field 'I_uA' converted from uA to A" in n for n in sw.notes)


def test_npz_default_keys(tmp_path):
    np.savez(tmp_path / "s.npz", voltage=V, current=I, temperature=np.array(3.0))
    sw = load_sweep(tmp_path / "s.npz")
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_array_equal(sw.current, I)


def test_npz_unit_keys_and_explicit_keys(tmp_path):
    np.savez_compressed(tmp_path / "s.npz", V=V, I_mA=I * 1e3, other=I)
    sw = load_sweep(tmp_path / "s.npz")
    np.testing.assert_allclose(sw.current, I, rtol=1e-12)
    assert any("converted from mA to A" in n for n in sw.notes)
    sw2 = load_sweep(tmp_path / "s.npz", current_column="other")
    np.testing.assert_array_equal(sw2.current, I)


def test_pickle_containing_npy_is_rejected(tmp_path):
    obj = np.empty(2, dtype=object)
    obj[0], obj[1] = V, I
    np.save(tmp_path / "obj.npy", obj, allow_pickle=True)
    with pytest.raises(InputError) as ei:
        load_sweep(tmp_path / "obj.npy")
    one_line(ei, "Python objects", "never unpickled", "save plain float arrays")

    (tmp_path / "raw.npy").write_bytes(pickle.dumps({"voltage": V, "current": I}))
    with pytest.raises(InputError) as ei:
        load_sweep(tmp_path / "raw.npy")
    one_line(ei, "not a readable NumPy array file", "numpy.save")

    np.savez(tmp_path / "obj.npz", voltage=V, current=obj, allow_pickle=True)
    with pytest.raises(InputError) as ei:
        load_sweep(tmp_path / "obj.npz")
    one_line(ei, "Python objects", "save plain float arrays")


# --------------------------------------------------------------------------
# cleaning
# --------------------------------------------------------------------------


def test_sign_flip_detected(tmp_path):
    sw = load_sweep(csv_of(tmp_path / "neg.csv", V, -I))
    assert sw.sign_flipped is True
    np.testing.assert_array_equal(sw.current, I)
    assert (
        "current sign flipped: the file uses the ion-current-positive convention "
        "(electron saturation was negative)"
    ) in sw.notes


def test_sign_forcing(tmp_path):
    normal = csv_of(tmp_path / "pos.csv")
    assert load_sweep(normal, sign="electron-positive").sign_flipped is False
    # forcing electron-positive on an ion-positive file is honoured (and then fails loudly)
    with pytest.raises(InputError) as ei:
        load_sweep(csv_of(tmp_path / "neg.csv", V, -I), sign="electron-positive")
    one_line(ei, "falls from positive to negative", "'ion-positive'")
    # an ion-positive file whose ion side is the larger one: auto cannot tell, forcing can
    # (test data only: 0.3 mA electron saturation, 0.2 mA ion current)
    odd = 3e-4 * np.exp(np.minimum(V - 10.0, 0.0) / 3.0) - 2e-4
    path = csv_of(tmp_path / "odd.csv", V, -odd)
    with pytest.raises(InputError) as ei:
        load_sweep(path)
    one_line(ei, "falls from positive to negative", "'ion-positive'")
    sw = load_sweep(path, sign="ion-positive")
    assert sw.sign_flipped is True
    np.testing.assert_array_equal(sw.current, odd)
    assert any("flipped as requested" in n for n in sw.notes)
    with pytest.raises(InputError) as ei:
        load_sweep(normal, sign="backwards")
    one_line(ei, "unknown sign convention", "'electron-positive'")


def test_non_finite_rows_dropped_with_note(tmp_path):
    cur = [repr(x) for x in I.tolist()]
    cur[3], cur[50], cur[70], cur[90] = "nan", "inf", "", "NA"
    volt = [repr(x) for x in V.tolist()]
    volt[100] = "-inf"
    path = write_table(tmp_path / "gaps.csv", ("V", "I"), zip(volt, cur))
    sw = load_sweep(path)
    keep = np.ones(V.size, bool)
    keep[[3, 50, 70, 90, 100]] = False
    np.testing.assert_array_equal(sw.voltage, V[keep])
    np.testing.assert_array_equal(sw.current, I[keep])
    assert "dropped 5 rows with a missing or non-finite voltage or current" in sw.notes


def test_unsorted_input_is_sorted_and_repeated_voltages_kept(tmp_path):
    # an up-then-down sweep repeats every voltage
    v = np.concatenate([V, V[::-1]])
    i = np.concatenate([I, I[::-1] + 1e-7])
    sw = load_sweep(csv_of(tmp_path / "updown.csv", v, i))
    assert sw.n_points == 2 * V.size
    assert np.all(np.diff(sw.voltage) >= 0)
    assert any("sorted by voltage" in n for n in sw.notes)
    # stable: at each repeated voltage the up-sweep point comes first
    np.testing.assert_array_equal(sw.current[0::2], I)
    np.testing.assert_array_equal(sw.current[1::2], I + 1e-7)
    assert not any("sorted" in n for n in load_sweep(csv_of(tmp_path / "up.csv")).notes)


def test_sweep_from_arrays_shared_checks():
    rng = np.random.default_rng(3)
    perm = rng.permutation(V.size)
    sw = sweep_from_arrays(V[perm], I[perm], sweep_id="../evil/name")
    np.testing.assert_array_equal(sw.voltage, V)
    np.testing.assert_array_equal(sw.current, I)
    assert sw.sweep_id == "evil_name"
    assert sw.source == "array"
    for args, phrase in [
        ((V, I[:-1]), "same length"),
        ((V, I + 0j), "complex"),
        ((np.vstack([V, V]), np.vstack([I, I])), "batch command"),
        ((["a"] * V.size, I), "not numbers"),
    ]:
        with pytest.raises(InputError) as ei:
            sweep_from_arrays(*args)
        one_line(ei, phrase)


# --------------------------------------------------------------------------
# rejections
# --------------------------------------------------------------------------


def _text(path, text):
    path.write_text(text)
    return path


def _rows(v, i):
    return "".join(f"{a!r},{b!r}\n" for a, b in zip(np.asarray(v).tolist(), np.asarray(i).tolist()))


REJECTIONS = {
    "missing file": (lambda d: d / "nope.csv", {}, "not found", "check the path"),
    "directory": (lambda d: (d / "dir.csv").mkdir() or d / "dir.csv", {}, "is a directory", "batch command"),
    "empty file": (lambda d: _text(d / "e.csv", ""), {}, "is empty", "export the sweep"),
    "comments only": (lambda d: _text(d / "c.csv", "# nothing\n\n# here\n"), {}, "no header or data",
                      "header row"),
    "header only": (lambda d: _text(d / "h.csv", "voltage,current\n"), {}, "no data rows", "export the sweep"),
    "one column": (lambda d: _text(d / "o.csv", "voltage\n" + "1.0\n" * 30), {}, "only one column",
                   "separated by commas, tabs, semicolons or spaces"),
    "no header": (lambda d: _text(d / "n.csv", _rows(V, I)), {}, "is data, not a header",
                  "add a header row"),
    "non-numeric": (lambda d: _text(d / "x.csv", "# c\nvoltage,current\n" + _rows(V[:5], I[:5]) + "1.0,abc\n"
                                    + _rows(V[5:], I[5:])),
                    {}, "line 8, column 'current': 'abc' is not a number", "comment the line out"),
    "ragged row": (lambda d: _text(d / "r.csv", "voltage,current\n" + _rows(V[:5], I[:5]) + "1,2,3\n"
                                   + _rows(V[5:], I[5:])),
                   {}, "line 7 has 3 fields but the header has 2", "check the separator"),
    "too few points": (lambda d: _text(d / "f.csv", "V,I\n" + _rows(V[::12], I[::12])), {},
                       "only 11 usable points", "more voltage steps"),
    "too few after dropping": (lambda d: _text(d / "f2.csv", "V,I\n" + _rows(V[::8], I[::8])
                                               + "nan,1\n" * 30), {},
                               "after dropping 30 unusable rows", "more voltage steps"),
    "narrow range": (lambda d: _text(d / "w.csv", "V,I\n" + _rows(np.linspace(0, 0.5, 50),
                                                                  np.linspace(-1e-5, 1e-4, 50))), {},
                     "too narrow to hold ion saturation, retardation and the knee", "sweep across tens of volts"),
    "constant current": (lambda d: _text(d / "k.csv", "V,I\n" + _rows(V, np.full(V.size, 1e-4))), {},
                         "the current is the same", "check that the current column"),
    "no zero crossing (positive)": (
        lambda d: _text(d / "p.csv", "V,I\n" + _rows(V[V > 5], I[V > 5])), {},
        "the sweep never crosses zero current, so there is no floating potential and no "
        "electron-retardation region", "extend the sweep to more negative bias"),
    "no zero crossing (negative)": (
        lambda d: _text(d / "m.csv", "V,I\n" + _rows(V[V < -15], I[V < -15])), {},
        "never crosses zero current", "extend the sweep to more positive bias"),
    "file too large": (lambda d: _text(d / "big.csv", "V,I\n" + _rows(V, I)), {"max_bytes": 1000},
                       "limit for one sweep", "split it into smaller files"),
    "too many rows": (lambda d: _text(d / "many.csv", "V,I\n" + _rows(V, I)), {"max_points": 50},
                      "more than 50 data rows", "split it into separate sweep files"),
    "too many npy points": (lambda d: (np.save(d / "many.npy", np.column_stack([V, I])), d / "many.npy")[1],
                            {"max_points": 50}, "more than the limit of 50", "split it"),
    "unknown extension": (lambda d: _text(d / "s.xlsx", "V,I\n" + _rows(V, I)), {},
                          "unsupported file type ('.xlsx')", ".csv, .tsv, .txt, .dat, .npy, .npz"),
    "no extension": (lambda d: _text(d / "sweep", "V,I\n" + _rows(V, I)), {},
                     "unsupported file type ('no extension')", "save the sweep as"),
    "binary junk": (lambda d: _bytes(d / "junk.csv", bytes(range(256)) * 40), {},
                    "binary data", "export the sweep as CSV text"),
    "high-byte junk": (lambda d: _bytes(d / "hi.csv", b"V,I\n" + bytes(range(0x80, 0x100)) * 8), {},
                       "neither UTF-8 nor Windows-1252", "export the sweep as UTF-8"),
    "unknown names": (lambda d: _text(d / "a.csv", "alpha,beta\n" + _rows(V, I)), {},
                      "no column is recognisable as the probe voltage", "call them 'voltage' and 'current'"),
    "ambiguous names": (lambda d: _text(d / "b.csv", "V,voltage,I\n" + "".join(
        f"{a!r},{a!r},{b!r}\n" for a, b in zip(V.tolist(), I.tolist()))), {},
                        "several columns could be the probe voltage", "name the voltage column explicitly"),
    "unknown unit": (lambda d: _text(d / "uu.csv", "voltage,current [A/cm2]\n" + _rows(V, I)), {},
                     "unrecognised unit 'a/cm2'", "write the unit as one of A, mA"),
    "wrong kind of unit": (lambda d: _text(d / "wk.csv", "voltage [mA],current\n" + _rows(V, I)), {},
                           "which is not a voltage unit", "use one of V, mV or kV"),
    "npy 1-D": (lambda d: (np.save(d / "one.npy", V), d / "one.npy")[1], {},
                "shape (121,)", "save one sweep as shape (n, 2) or (2, n)"),
    "npy with column options": (lambda d: (np.save(d / "c.npy", np.column_stack([V, I])), d / "c.npy")[1],
                                {"voltage_column": "V"}, "column names apply to text files",
                                "drop the column options"),
    "npz many sweeps": (lambda d: (np.savez(d / "m.npz", voltage=np.vstack([V, V]), current=np.vstack([I, I])),
                                   d / "m.npz")[1], {}, "many sweeps", "use the batch command"),
    "npz missing keys": (lambda d: (np.savez(d / "k.npz", a=V, b=I), d / "k.npz")[1], {},
                         "no array is recognisable", "call them 'voltage' and 'current'"),
    "npz corrupt": (lambda d: _bytes(d / "c.npz", b"PK\x03\x04" + bytes(200)), {},
                    "not a readable .npz archive", "numpy.savez"),
    "npz truncated": (lambda d: _truncated_npz(d), {}, "could not be read as NumPy data", "numpy.savez"),
    "bad sign option": (lambda d: _text(d / "s.csv", "V,I\n" + _rows(V, I)), {"sign": "negative"},
                        "unknown sign convention", "use 'auto', 'electron-positive' or 'ion-positive'"),
}


def _bytes(path, data):
    path.write_bytes(data)
    return path


def _truncated_npz(d):
    # a valid archive whose "current" member has a correct header but lost most of its data
    buf = io.BytesIO()
    np.save(buf, I)
    short = buf.getvalue()[:-800]
    with zipfile.ZipFile(d / "t.npz", "w") as zf:
        buf = io.BytesIO()
        np.save(buf, V)
        zf.writestr("voltage.npy", buf.getvalue())
        zf.writestr("current.npy", short)
    return d / "t.npz"


@pytest.mark.parametrize("case", sorted(REJECTIONS))
def test_rejections_are_one_line_and_name_the_fix(tmp_path, case):
    make, kwargs, problem, fix = REJECTIONS[case]
    path = make(tmp_path)
    with pytest.raises(InputError) as ei:
        load_sweep(path, **kwargs)
    msg = one_line(ei, problem, fix)
    assert ";" in msg  # problem; fix


def test_fifo_is_rejected_without_hanging(tmp_path):
    if not hasattr(os, "mkfifo"):
        pytest.skip("no named pipes on this platform")
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    result = {}

    def run():
        try:
            load_sweep(fifo)
        except InputError as exc:
            result["msg"] = str(exc)

    t = threading.Thread(target=run, daemon=True)
    t.start()
    t.join(10)
    if t.is_alive():  # unblock the reader before failing
        with open(fifo, "wb"):
            pass
        t.join(5)
        pytest.fail("load_sweep blocked on a named pipe")
    assert "not a regular file" in result["msg"] and "\n" not in result["msg"]


def test_rejection_of_hostile_file_name_stays_one_line(tmp_path):
    path = tmp_path / "bad\nname\r.csv"
    with pytest.raises(InputError) as ei:
        load_sweep(path)
    one_line(ei, "not found")


@pytest.mark.parametrize("suffix", [".csv", ".npy", ".npz"])
def test_damaged_files_give_input_error_or_a_sweep(tmp_path, suffix):
    good = tmp_path / f"good{suffix}"
    if suffix == ".csv":
        write_sweep_csv(good, (V, I))
    elif suffix == ".npy":
        np.save(good, np.column_stack([V, I]))
    else:
        np.savez_compressed(good, voltage=V, current=I)
    base = good.read_bytes()
    rng = np.random.default_rng(7)
    outcomes = set()
    for trial in range(120):
        data = bytearray(base)
        if trial % 3 == 0:
            data = data[: int(rng.integers(len(data)))]
        else:
            for _ in range(int(rng.integers(1, 12))):
                data[int(rng.integers(len(data)))] = int(rng.integers(256))
        path = tmp_path / f"damaged{suffix}"
        path.write_bytes(bytes(data))
        try:
            sw = load_sweep(path)
        except InputError as exc:
            assert "\n" not in str(exc)
            outcomes.add("rejected")
        else:
            assert np.all(np.isfinite(sw.voltage)) and np.all(np.isfinite(sw.current))
            outcomes.add("loaded")
    assert "rejected" in outcomes


# --------------------------------------------------------------------------
# names
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text, expected",
    [
        ("../../etc/passwd", "etc_passwd"),
        ("a/b", "a_b"),
        ("a\\b", "a_b"),
        ("..", "sweep"),
        ("", "sweep"),
        (".hidden", "hidden"),
        ("run 1 (probe)", "run_1_probe"),
        ("x..y", "x.y"),
        ("-rf", "rf"),
        ("CON", "_CON"),
        ("shot-12_a.b", "shot-12_a.b"),
    ],
)
def test_sanitise_id(text, expected):
    assert sanitise_id(text) == expected


def test_sanitise_id_properties():
    for text in ["../" * 50, "é" * 300, "a" * 500, "/abs/path/..", "\x00\n\t", "...."]:
        s = sanitise_id(text)
        assert 0 < len(s) <= 64
        assert "/" not in s and "\\" not in s and ".." not in s
        assert not s.startswith(".")
        assert all(c.isascii() and (c.isalnum() or c in "._-") for c in s)


def test_sweep_id_default_and_override(tmp_path):
    path = csv_of(tmp_path / "run 1 (probe).csv")
    assert load_sweep(path).sweep_id == "run_1_probe"
    assert load_sweep(path, sweep_id="../../x").sweep_id == "x"


# --------------------------------------------------------------------------
# atomic writing
# --------------------------------------------------------------------------


def test_atomic_write_text_and_bytes(tmp_path):
    target = tmp_path / "sub" / "out.txt"
    atomic_write_text(target, "first\n")
    assert target.read_text() == "first\n"
    atomic_write_bytes(target, b"second")
    assert target.read_bytes() == b"second"
    assert sorted(p.name for p in target.parent.iterdir()) == ["out.txt"]
    with pytest.raises(TypeError):
        atomic_write_text(target, b"not text")
    assert target.read_bytes() == b"second"


def test_atomic_write_failure_leaves_old_file(tmp_path, monkeypatch):
    target = tmp_path / "out.json"
    target.write_text("old")

    def broken_replace(src, dst):
        raise OSError("disk full")

    monkeypatch.setattr(os, "replace", broken_replace)
    with pytest.raises(OSError, match="disk full"):
        atomic_write_text(target, "new")
    monkeypatch.undo()
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["out.json"]


def _snapshot(root):
    return {
        str(p.relative_to(root)): (p.read_bytes() if p.is_file() else None)
        for p in sorted(root.rglob("*"))
    }


def test_staged_output_dir_success_into_new_dir(tmp_path):
    out = tmp_path / "results"
    with staged_output_dir(out) as stage:
        assert stage.parent == tmp_path and stage.name.startswith(".results.partial-")
        assert not out.exists()
        (stage / "summary.json").write_text("{}")
        (stage / "figs").mkdir()
        (stage / "figs" / "a.png").write_bytes(b"png")
    assert _snapshot(out) == {"figs": None, "figs/a.png": b"png", "summary.json": b"{}"}
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results"]


def test_staged_output_dir_success_into_existing_dir(tmp_path):
    out = tmp_path / "results"
    (out / "figs").mkdir(parents=True)
    (out / "keep.txt").write_text("keep")
    (out / "summary.json").write_text("old")
    (out / "figs" / "old.png").write_bytes(b"old")
    with staged_output_dir(out) as stage:
        (stage / "summary.json").write_text("new")
        (stage / "figs").mkdir()
        (stage / "figs" / "a.png").write_bytes(b"png")
    assert _snapshot(out) == {
        "figs": None,
        "figs/a.png": b"png",
        "figs/old.png": b"old",
        "keep.txt": b"keep",
        "summary.json": b"new",
    }
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results"]


def test_staged_output_dir_error_leaves_existing_dir_unchanged(tmp_path):
    out = tmp_path / "results"
    out.mkdir()
    (out / "summary.json").write_text("old")
    before = _snapshot(out)
    with pytest.raises(RuntimeError, match="boom"):
        with staged_output_dir(out) as stage:
            (stage / "summary.json").write_text("half")
            (stage / "new.txt").write_text("x")
            raise RuntimeError("boom")
    assert _snapshot(out) == before
    assert not stage.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results"]


def test_staged_output_dir_error_creates_nothing(tmp_path):
    out = tmp_path / "a" / "b" / "results"
    with pytest.raises(KeyError):
        with staged_output_dir(out) as stage:
            (stage / "x.txt").write_text("x")
            raise KeyError("fail")
    assert list(tmp_path.iterdir()) == []


def test_staged_output_dir_refuses_a_file_as_target(tmp_path):
    target = tmp_path / "file"
    target.write_text("x")
    with pytest.raises(InputError) as ei:
        with staged_output_dir(target):
            pass
    one_line(ei, "is not a directory", "choose a directory")
    assert target.read_text() == "x"
