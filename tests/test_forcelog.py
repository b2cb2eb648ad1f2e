"""Force logs: reading machine CSV exports and putting images and force on one clock.

Oracles: numbers the tests write themselves (known exactly), numpy.loadtxt as an independent
reader of the shipped sample log, numpy.interp for linear interpolation, and exact unit
definitions (1 lbf = 4.4482216152605 N, NIST SP 811 -- from memory; 1 in = 25.4 mm).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

from dic.tensile.forcelog import read_force_log, read_table
from dic.tensile.forcesync import image_times_from_files, read_frame_times, synchronise

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_images"


def write(path, text):
    path.write_text(text, encoding="utf-8")
    return path


def one_line(exc):
    msg = str(exc.value)
    assert "\n" not in msg and msg
    return msg


def sample_log(**kw):
    return read_force_log(SAMPLES / "force_log.csv", time_column="time_s",
                          force_column="force_kN", force_unit="kN", **kw)


# --------------------------------------------------------------------------------------------
# reading
# --------------------------------------------------------------------------------------------
def test_sample_log_matches_numpy_loadtxt():
    log = sample_log(crosshead_column="crosshead_mm")
    # numpy.loadtxt as the independent reader (comment lines skipped, header skipped)
    ref = np.loadtxt(SAMPLES / "force_log.csv", delimiter=",", comments="#", skiprows=6)
    np.testing.assert_array_equal(log.time, ref[:, 0])
    np.testing.assert_allclose(log.force, ref[:, 1] * 1000.0, rtol=1e-15)  # kN -> N exactly
    np.testing.assert_array_equal(log.crosshead, ref[:, 2])
    assert log.delimiter == "," and log.decimal == "."
    assert log.columns == ["time_s", "force_kN", "crosshead_mm"]


@pytest.mark.parametrize("sep", [";", "\t"])
def test_decimal_comma_with_preamble_and_unit_row(tmp_path, sep):
    # a typical European export: preamble, header, a row of units, decimal commas
    t = np.arange(6) * 0.25
    f = 1.5 + 0.125 * np.arange(6)
    rows = [sep.join([f"{a:.2f}".replace(".", ","), f"{b:.3f}".replace(".", ","), "ok"])
            for a, b in zip(t, f)]
    text = "\n".join([f"Prüfung{sep}Zugversuch{sep}", f"Probe{sep}A1", "",
                      sep.join(["Zeit", "Kraft", "Status"]), sep.join(["s", "kN", "-"]),
                      *rows]) + "\n"
    p = write(tmp_path / "log.csv", text)
    log = read_force_log(p, time_column="zeit", force_column="Kraft", force_unit="kN")
    assert log.delimiter == sep and log.decimal == ","
    np.testing.assert_allclose(log.time, t, rtol=0, atol=1e-12)  # written values, exactly
    np.testing.assert_allclose(log.force, f * 1000.0, rtol=1e-14)
    assert any("unit row" in n for n in log.notes)


def test_units_and_columns_by_number(tmp_path):
    p = write(tmp_path / "log.txt", "ms|lbf|in\n0|0|0\n500|10|0.5\n1000|20|1\n")
    log = read_force_log(p, time_column=0, force_column="1", crosshead_column=2,
                         time_unit="ms", force_unit="lbf", crosshead_unit="in")
    # 1 lbf = 4.4482216152605 N and 1 in = 25.4 mm exactly (NIST SP 811, from memory)
    np.testing.assert_allclose(log.time, [0.0, 0.5, 1.0], rtol=1e-15)
    np.testing.assert_allclose(log.force, [0.0, 44.482216152605, 88.96443230521], rtol=1e-14)
    np.testing.assert_allclose(log.crosshead, [0.0, 12.7, 25.4], rtol=1e-15)


def test_blank_separated_columns(tmp_path):
    p = write(tmp_path / "log.dat", "time  force\n0.0   1.0\n1.0   2.0\n2.0   4.0\n")
    log = read_force_log(p, time_column="time", force_column="force")
    np.testing.assert_array_equal(log.force, [1.0, 2.0, 4.0])


# --------------------------------------------------------------------------------------------
# bad force logs: one-line errors that name the line and the fix
# --------------------------------------------------------------------------------------------
GOOD = "time_s,force_N\n0.0,0.0\n0.1,10.0\n0.2,20.0\n0.3,30.0\n"


@pytest.mark.parametrize("body,needle", [
    ("time_s,force_N\n0.0,0.0\n0.1,\n0.2,20.0\n", "line 3"),            # missing value
    ("time_s,force_N\n0.0,0.0\n0.1,abc\n0.2,20.0\n", "'abc' is not a number"),
    ("time_s,force_N\n0.0,0.0\n0.2,10.0\n0.1,20.0\n", "sort the log"),   # unsorted
    ("time_s,force_N\n0.0,0.0\n0.1,10.0\n0.1,20.0\n", "repeats the time"),  # duplicate
])
def test_bad_rows_are_one_line_errors(tmp_path, body, needle):
    p = write(tmp_path / "bad.csv", body)
    with pytest.raises(ValueError) as exc:
        read_force_log(p, time_column="time_s", force_column="force_N")
    assert needle in one_line(exc)


def test_skip_bad_rows_drops_and_reports_them(tmp_path):
    p = write(tmp_path / "bad.csv", GOOD + "0.4,n/a\n0.5,50.0\nend of test,\n")
    log = read_force_log(p, time_column="time_s", force_column="force_N", skip_bad_rows=True)
    np.testing.assert_array_equal(log.time, [0.0, 0.1, 0.2, 0.3, 0.5])
    assert any("skipped 2 rows" in n for n in log.notes)


def test_missing_column_lists_the_columns_found(tmp_path):
    p = write(tmp_path / "log.csv", GOOD)
    with pytest.raises(ValueError) as exc:
        read_force_log(p, time_column="time_s", force_column="Force")
    msg = one_line(exc)
    assert "'Force'" in msg and "'time_s'" in msg and "'force_N'" in msg


def test_unknown_unit_lists_the_known_ones(tmp_path):
    p = write(tmp_path / "log.csv", GOOD)
    with pytest.raises(ValueError) as exc:
        read_force_log(p, time_column="time_s", force_column="force_N", force_unit="kgf")
    msg = one_line(exc)
    assert "kgf" in msg and "N, kN, lbf" in msg
    with pytest.raises(ValueError):
        read_force_log(p, time_column="time_s", force_column="force_N", time_unit="h")


def test_missing_file_is_an_oserror(tmp_path):
    with pytest.raises(OSError) as exc:
        read_force_log(tmp_path / "nope.csv", time_column=0, force_column=1)
    assert "nope.csv" in one_line(exc)


def test_table_without_numbers(tmp_path):
    p = write(tmp_path / "x.csv", "# only a comment\na,b\nc,d\n")
    with pytest.raises(ValueError) as exc:
        read_table(p)
    assert "no rows of numbers" in one_line(exc)


# --------------------------------------------------------------------------------------------
# synchronisation
# --------------------------------------------------------------------------------------------
def linear_log(tmp_path, t_end=10.0, rate=10):
    t = np.arange(int(t_end * rate) + 1) / rate
    body = "\n".join(f"{a:.1f},{3.0 * a + 1.0:.3f},{0.05 * a:.4f}" for a in t)
    p = write(tmp_path / "lin.csv", "t,F,x\n" + body + "\n")
    return read_force_log(p, time_column="t", force_column="F", crosshead_column="x")


def test_force_at_frame_times_from_the_sample_csv():
    log = sample_log()
    names = [f"somewhere/coupon_{k:03d}.png" for k in range(38)]
    times = read_frame_times(SAMPLES / "frame_times.csv", names=names)
    np.testing.assert_array_equal(times, 1.0 * np.arange(38))  # README: frame k at k s
    sync = synchronise(log, 38, image_times=times)
    # frame k corresponds to the log row with time_s = k (sample_images/README.md)
    rows = np.searchsorted(log.time, 1.0 * np.arange(38))
    np.testing.assert_allclose(sync.force, log.force[rows], rtol=1e-12)
    assert sync.n_outside == 0 and not sync.notes


def test_frame_times_by_name_in_any_order(tmp_path):
    p = write(tmp_path / "ft.csv", "time;file\n2,5;b.tif\n0,5;a.tif\n")
    t = read_frame_times(p, names=["x/a.tif", "x/b.tif"])
    np.testing.assert_array_equal(t, [0.5, 2.5])
    with pytest.raises(ValueError) as exc:
        read_frame_times(p, names=["a.tif", "c.tif"])
    assert "c.tif" in one_line(exc)


def test_interval_and_trigger_offset_interpolate_linearly(tmp_path):
    log = linear_log(tmp_path)
    sync = synchronise(log, 5, frame_interval=0.75, trigger_offset=1.33)
    t = 1.33 + 0.75 * np.arange(5)
    np.testing.assert_allclose(sync.time, t, rtol=0, atol=1e-12)
    # force = 3 t + 1 is linear, so linear interpolation is exact; numpy.interp as reference
    np.testing.assert_allclose(sync.force, 3.0 * t + 1.0, rtol=1e-12)
    np.testing.assert_allclose(sync.force, np.interp(t, log.time, log.force), rtol=1e-14)
    np.testing.assert_allclose(sync.crosshead, 0.05 * t, rtol=1e-10)


def test_by_index_needs_one_row_per_image(tmp_path):
    log = linear_log(tmp_path, t_end=0.4)  # 5 rows
    sync = synchronise(log, 5, by_index=True)
    np.testing.assert_array_equal(sync.force, log.force)
    with pytest.raises(ValueError) as exc:
        synchronise(log, 6, by_index=True)
    assert "5 rows" in one_line(exc) and "6 images" in one_line(exc)


def test_partial_overlap_gives_nan_and_a_note(tmp_path):
    log = linear_log(tmp_path, t_end=10.0)
    sync = synchronise(log, 8, frame_interval=2.0, trigger_offset=-1.0)  # -1 .. 13 s
    assert np.isnan(sync.force[0]) and np.isnan(sync.force[-2:]).all()
    assert np.isfinite(sync.force[1:6]).all()
    assert sync.n_outside == 3
    assert any("before the log starts" in n for n in sync.notes)
    assert any("after the log ends" in n for n in sync.notes)


def test_no_overlap_reports_both_spans(tmp_path):
    log = linear_log(tmp_path, t_end=10.0)
    with pytest.raises(ValueError) as exc:
        synchronise(log, 4, frame_interval=1.0, trigger_offset=50.0)
    msg = one_line(exc)
    assert "0 .. 10 s" in msg and "50 .. 53 s" in msg and "do not overlap" in msg


def test_bad_image_times(tmp_path):
    log = linear_log(tmp_path)
    with pytest.raises(ValueError):
        synchronise(log, 3, image_times=[0.0, 1.0])            # wrong count
    with pytest.raises(ValueError):
        synchronise(log, 3, image_times=[0.0, 2.0, 1.0])       # not increasing
    with pytest.raises(ValueError):
        synchronise(log, 3, image_times=[0.0, 1.0, 2.0], frame_interval=1.0)  # two ways


def test_image_times_from_file_metadata(tmp_path):
    from PIL import Image

    # EXIF capture time with sub-seconds (Pillow writes the tags, our reader reads them back)
    paths = []
    for k, (stamp, sub) in enumerate([("2024:05:01 10:00:00", "25"),
                                      ("2024:05:01 10:00:01", "75"),
                                      ("2024:05:01 10:00:03", "0")]):
        exif = Image.Exif()
        ifd = exif.get_ifd(0x8769)
        ifd[36867] = stamp
        ifd[37521] = sub
        p = tmp_path / f"img{k}.jpg"
        Image.new("L", (16, 16), 128).save(p, exif=exif)
        paths.append(p)
    t, used = image_times_from_files(paths)
    assert used == "capture time"
    np.testing.assert_allclose(t, [0.0, 1.5, 2.75], rtol=0, atol=1e-9)
    # modification times: set with os.utime (nanoseconds), read back relative to the first
    for k, p in enumerate(paths):
        os.utime(p, ns=(1_700_000_000_000_000_000 + k * 400_000_000,) * 2)
    t, used = image_times_from_files(paths, source="mtime")
    assert used == "file modification time"
    np.testing.assert_allclose(t, [0.0, 0.4, 0.8], rtol=0, atol=1e-6)
    with pytest.raises(OSError):
        image_times_from_files([tmp_path / "missing.png"])
