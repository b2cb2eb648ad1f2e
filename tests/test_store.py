"""Tests of the results file (dic.sequence layout, writer, reader): resume checks, crash safety.

Oracles: the deterministic frame generator in tests/_store_writer.py (what every stored frame
must hold), plain h5py as an independent reader of the layout, an uninterrupted run for the
interrupted-and-resumed one, and the kernel's behaviour for killed processes (SIGKILL leaves
written data in the page cache; POSIX write() semantics, as HDF5's SWMR documentation also
assumes). The writer runs as a separate process for the kill and Ctrl-C tests.
"""

from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import h5py
import numpy as np
import pytest

import _store_writer as sw
from dic.field import DisplacementField
import dic.sequence.layout as layout
from dic.errors import ResultsMismatch
from dic.sequence import (FORMAT, FORMAT_VERSION, Results, ResultsWriter, open_for_writing,
                          results_info)

HELPER = Path(__file__).with_name("_store_writer.py")
N = 40  # frames in the subprocess runs
NY, NX = 120, 160  # about 1 MB of numbers per frame: writes take measurable time
posix_only = pytest.mark.skipif(sys.platform == "win32",
                                reason="needs POSIX signals (SIGKILL, SIGINT to a child)")


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------
def _new(path, n=N, ny=NY, nx=NX, **kw):
    x, y = sw.grid(ny, nx)
    names, digests = sw.images(n)
    kw.setdefault("fsync", False)
    return ResultsWriter.create(path, grid_x=x, grid_y=y, n_frames=n, settings=sw.SETTINGS,
                                image_names=names, image_sha256=digests,
                                image_times=np.arange(n) * 0.5, scale_mm_per_px=0.02, **kw)


def _reference_file(path, n=N, ny=NY, nx=NX):
    """An uninterrupted run, written in this process."""
    with sw.open_writer(path, n, ny, nx, fsync=False) as w:
        sw.write_frames(w, ny, nx)
    return path


def _assert_frames_are_the_generated_ones(f, n_done, ny=NY, nx=NX, refs=True):
    """Frames 0..n_done-1 read with plain h5py hold exactly what the generator made.

    ``refs``: also check the reference indices and updates of sw.write_frames.
    """
    fr = f["frames"]
    for k in range(n_done):
        g = sw.frame(k, ny, nx)
        # HDF5 stores IEEE doubles bit for bit, NaN included (common practice, no source)
        np.testing.assert_array_equal(fr["u"][k], g.u)
        np.testing.assert_array_equal(fr["v"][k], g.v)
        np.testing.assert_array_equal(fr["grad"][k], g.grad)
        np.testing.assert_array_equal(fr["zncc"][k], g.zncc.astype(np.float32))
        np.testing.assert_array_equal(fr["reason"][k], g.reason)
        np.testing.assert_array_equal(fr["iterations"][k], g.iterations)
        if not refs:
            continue
        assert fr["reference"][k] == sw.reference_of(k)
        assert bool(fr["reference_update"][k]) == (k in sw.REFERENCE_UPDATES)


def _assert_same_results(path_a, path_b):
    """Two results files hold the same arrays and attributes (times of writing aside)."""
    skip = {"frames/finished"}  # wall-clock times of completion differ between runs
    with h5py.File(path_a, "r") as a, h5py.File(path_b, "r") as b:
        names_a, names_b = [], []
        a.visit(names_a.append)
        b.visit(names_b.append)
        assert sorted(names_a) == sorted(names_b)
        for name in names_a:
            if isinstance(a[name], h5py.Dataset) and name not in skip:
                da, db = a[name][()], b[name][()]
                assert da.dtype == db.dtype and np.shape(da) == np.shape(db), name
                if da.dtype.kind == "f":
                    np.testing.assert_array_equal(da, db, err_msg=name)
                else:
                    assert np.array_equal(da, db), name
        attrs_a = {k: v for k, v in a.attrs.items() if k != "created"}
        attrs_b = {k: v for k, v in b.attrs.items() if k != "created"}
        assert attrs_a.keys() == attrs_b.keys()
        for k in attrs_a:
            assert attrs_a[k] == attrs_b[k] or (
                isinstance(attrs_a[k], float) and np.isnan(attrs_a[k]) and np.isnan(attrs_b[k]))


def _spawn(path, *extra, n=N, ny=NY, nx=NX):
    cmd = [sys.executable, str(HELPER), str(path), "--n", str(n), "--ny", str(ny), "--nx",
           str(nx), *map(str, extra)]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _parse(out):
    """(n_done at start, frames reported completed, finished?) from the helper's stdout."""
    start, done, finished = None, [], False
    for line in out.splitlines():
        if line.startswith("ready "):
            start = int(line.split()[1])
        elif line.startswith("done "):
            done.append(int(line.split()[1]))
        elif line == "finished":
            finished = True
    return start, done, finished


def _n_done_plain(path):
    """n_done read with plain h5py, no locking options (the bar: a plain reader copes)."""
    with h5py.File(path, "r") as f:
        return int(f["n_done"][()])


def _check_after_stop(path, out):
    """The checks after every kill or interrupt; returns n_done."""
    start, done, _ = _parse(out)
    with h5py.File(path, "r") as f:  # plain h5py, as a user would open it
        n_done = int(f["n_done"][()])
        reported = (done[-1] + 1) if done else (start or 0)
        # no reported frame is lost; at most the frame in flight committed without being
        # reported (the kill fell between the commit and the print) -- common practice, no
        # source
        assert reported <= n_done <= reported + 1, (reported, n_done)
        _assert_frames_are_the_generated_ones(f, n_done)
    return n_done


# --------------------------------------------------------------------------------------------
# layout and round trip
# --------------------------------------------------------------------------------------------
def test_layout_read_with_plain_h5py(tmp_path):
    path = tmp_path / "run.h5"
    mask = np.zeros((300, 400), bool)
    mask[20:280, 30:370] = True
    with _new(path, n=5, ny=6, nx=8, roi_mask=mask) as w:
        for k in range(3):
            if k == 0:
                w.add_reference_update(0)
            w.write_frame(k, sw.frame(k, 6, 8), reference_index=0)
    with h5py.File(path, "r") as f:
        a = f.attrs
        assert a["format"] == FORMAT and a["format_version"] == FORMAT_VERSION
        assert a["units"] == "px" and a["scale_mm_per_px"] == 0.02 and a["n_frames"] == 5
        assert json.loads(a["settings"]) == sw.SETTINGS
        # ISO 8601 UTC with a Z suffix (ISO 8601; common practice)
        assert time.strptime(a["created"], "%Y-%m-%dT%H:%M:%SZ")
        assert f["n_done"][()] == 3
        x, y = sw.grid(6, 8)
        np.testing.assert_array_equal(f["grid/x"][()], x)
        np.testing.assert_array_equal(f["grid/y"][()], y)
        np.testing.assert_array_equal(f["roi/mask"][()], mask)
        assert f["roi/mask"].compression == "gzip"
        names, digests = sw.images(5)
        assert list(f["images/name"].asstr()[()]) == names
        assert list(f["images/sha256"].asstr()[()]) == digests
        np.testing.assert_array_equal(f["images/time"][()], np.arange(5) * 0.5)
        shapes = {"u": ((5, 6, 8), "f8"), "v": ((5, 6, 8), "f8"),
                  "grad": ((5, 6, 8, 2, 2), "f8"), "zncc": ((5, 6, 8), "f4"),
                  "reason": ((5, 6, 8), "i1"), "iterations": ((5, 6, 8), "i2"),
                  "reference": ((5,), "i4"), "reference_update": ((5,), "u1")}
        for name, (shape, dt) in shapes.items():
            assert f["frames"][name].shape == shape and f["frames"][name].dtype == np.dtype(dt)
        _assert_frames_are_the_generated_ones(f, 3, 6, 8)
        for k in range(3):
            assert time.strptime(f["frames/finished"][k].decode(), "%Y-%m-%dT%H:%M:%S.%fZ")


def test_every_stored_name_is_documented(tmp_path):
    """The module docstring (copied into the README) names every dataset and attribute."""
    path = tmp_path / "run.h5"
    mask = np.ones((10, 10), bool)
    with _new(path, n=2, ny=4, nx=5, roi_mask=mask, second_derivatives=True) as w:
        f = sw.frame(0, 4, 5)
        f.grad2 = np.zeros((4, 5, 2, 3))
        w.write_frame(0, f, reference_index=0)
        w.write_strain("green_lagrange", 5, {c: np.zeros((4, 5)) for c in ("xx", "yy", "xy")},
                       attrs={"vsg": 61})
    doc = layout.__doc__
    names = []
    with h5py.File(path, "r") as h:
        h.visit(names.append)
        attrs = list(h.attrs)
    for name in names:
        leaf = name.rsplit("/", 1)[-1]
        if name.startswith("strain/") and name.count("/") >= 1 and leaf.startswith("green"):
            continue  # the group name is documented as <measure>_w<window>
        assert leaf in doc, f"/{name} is not described in the module docstring"
    for a in attrs:
        assert f"``{a}``" in doc, f"root attribute {a} is not described"


def test_results_reader_round_trip(tmp_path):
    path = tmp_path / "run.h5"
    with _new(path, n=6, ny=7, nx=9) as w:
        for k in range(4):
            if k in (0, 2):
                w.add_reference_update(k)
            w.write_frame(k, sw.frame(k, 7, 9), reference_index=0 if k < 2 else 1)
    with Results.open(path) as r:
        assert len(r) == 4 and r.n_frames == 6 and not r.complete
        assert r.settings == sw.SETTINGS and r.scale == 0.02 and r.units == "px"
        assert r.image_names == sw.images(6)[0]
        np.testing.assert_array_equal(r.reference_updates, [0, 2])
        np.testing.assert_array_equal(r.reference_indices, [0, 0, 1, 1])
        for k, got in enumerate(r):
            want = sw.frame(k, 7, 9)
            assert isinstance(got, DisplacementField)
            np.testing.assert_array_equal(got.u, want.u)  # bit-exact storage, no source needed
            np.testing.assert_array_equal(got.grad, want.grad)
            np.testing.assert_array_equal(got.reason, want.reason)
            np.testing.assert_array_equal(got.x, want.x)
            assert got.n_valid == want.n_valid and got.settings == sw.SETTINGS
        np.testing.assert_array_equal(r.field(-1).v, sw.frame(3, 7, 9).v)
        with pytest.raises(IndexError, match="frame 4 is not completed"):
            r.field(4)


def test_second_derivatives_round_trip(tmp_path):
    path = tmp_path / "run.h5"
    g2 = np.random.default_rng(5).normal(size=(4, 5, 2, 3))
    f = sw.frame(0, 4, 5)
    f.grad2 = g2
    with _new(path, n=2, ny=4, nx=5, second_derivatives=True) as w:
        w.write_frame(0, f, reference_index=0)
        w.write_frame(1, sw.frame(1, 4, 5), reference_index=0)  # a frame without grad2
    with Results.open(path) as r:
        np.testing.assert_array_equal(r.field(0).grad2, g2)
        assert np.isnan(r.field(1).grad2).all()  # not measured: NaN (project convention)
    # a file made without room gets it when frame 0 brings grad2 ...
    with _new(tmp_path / "b.h5", n=2, ny=4, nx=5) as w:
        w.write_frame(0, f, reference_index=0)
    with Results.open(tmp_path / "b.h5") as r:
        np.testing.assert_array_equal(r.field(0).grad2, g2)
    # ... and later, with NaN for the frames stored before without it
    with _new(tmp_path / "c.h5", n=3, ny=4, nx=5) as w:
        w.write_frame(0, sw.frame(0, 4, 5), reference_index=0)
        w.write_frame(1, f, reference_index=0)
    with Results.open(tmp_path / "c.h5") as r:
        assert np.isnan(r.field(0).grad2).all()
        np.testing.assert_array_equal(r.field(1).grad2, g2)
        np.testing.assert_array_equal(r.field(0).u, sw.frame(0, 4, 5).u)  # kept by the copy


def test_settings_with_numpy_values_are_stored_as_json(tmp_path):
    settings = {"subset": np.int64(21), "threshold": np.float32(0.5), "path": Path("a/b"),
                "pair": (1, 2), "table": np.arange(3)}
    x, y = sw.grid(2, 2)
    with ResultsWriter.create(tmp_path / "a.h5", grid_x=x, grid_y=y, n_frames=1,
                              settings=settings, image_names=["a"], image_sha256=["0"]):
        pass
    with Results.open(tmp_path / "a.h5") as r:
        # JSON has no tuples and no numpy types: plain equivalents (RFC 8259 data model)
        assert r.settings == {"subset": 21, "threshold": 0.5, "path": "a/b", "pair": [1, 2],
                              "table": [0, 1, 2]}
    with pytest.raises(ValueError, match="'bad' cannot be stored as JSON"):
        ResultsWriter.create(tmp_path / "b.h5", grid_x=x, grid_y=y, n_frames=1,
                             settings={"bad": object()}, image_names=["a"], image_sha256=["0"])


def test_write_order_and_argument_checks(tmp_path):
    with _new(tmp_path / "run.h5", n=3, ny=4, nx=5) as w:
        f0 = sw.frame(0, 4, 5)
        with pytest.raises(ValueError, match="next frame is 0, got 1"):
            w.write_frame(1, f0, reference_index=0)
        with pytest.raises(ValueError, match="reference_index"):
            w.write_frame(0, f0, reference_index=3)
        with pytest.raises(ValueError, match="just before write_frame"):
            w.add_reference_update(1)
        other = sw.frame(0, 5, 4)
        with pytest.raises(ValueError, match="field.u: shape"):
            w.write_frame(0, other, reference_index=0)
        moved = sw.frame(0, 4, 5)
        moved.x = moved.x + 1.0
        with pytest.raises(ValueError, match="point positions differ"):
            w.write_frame(0, moved, reference_index=0)
        for k in range(3):
            w.write_frame(k, sw.frame(k, 4, 5), reference_index=0)
        with pytest.raises(ValueError, match="all 3 frames"):
            w.write_frame(3, f0, reference_index=0)
    with pytest.raises(ValueError, match="closed"):
        w.write_frame(3, f0, reference_index=0)
    x, y = sw.grid(2, 2)
    bad = dict(grid_x=x, grid_y=y, n_frames=2, settings={}, image_names=["a", "b"],
               image_sha256=["0", "1"])
    for key, value, msg in [("n_frames", 0, "n_frames"), ("image_names", ["a"], "image_names"),
                            ("grid_y", y[:1], "grid_x, grid_y"),
                            ("image_times", [1.0], "image_times"),
                            ("scale_mm_per_px", -1.0, "scale_mm_per_px"),
                            ("roi_mask", np.ones((3, 3)), "roi_mask")]:
        with pytest.raises(ValueError, match=msg) as e:
            ResultsWriter.create(tmp_path / "x.h5", **{**bad, key: value})
        assert "\n" not in str(e.value)
    assert not (tmp_path / "x.h5").exists()


# --------------------------------------------------------------------------------------------
# the design's premise: after creation, writing frames touches raw numbers only
# --------------------------------------------------------------------------------------------
def _raw_ranges(path):
    """(offset, size) of the storage of every contiguous dataset (H5Dget_offset)."""
    out = []
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset) and obj.id.get_offset() is not None \
                    and obj.chunks is None and obj.dtype.kind != "O":
                out.append((obj.id.get_offset(), obj.id.get_storage_size()))
        f.visititems(visit)
    return out


def _metadata_digest(path, ranges):
    data = bytearray(Path(path).read_bytes())
    for off, size in ranges:
        data[off:off + size] = bytes(size)
    return hashlib.sha256(bytes(data)).hexdigest(), len(data)


def test_writing_frames_changes_no_hdf5_metadata(tmp_path):
    path = tmp_path / "run.h5"
    _new(path, n=10, ny=20, nx=30).close()
    per_frame = _raw_ranges(path)
    before = _metadata_digest(path, per_frame)
    with ResultsWriter.resume(path, settings=sw.SETTINGS, image_names=sw.images(10)[0],
                              image_sha256=sw.images(10)[1]) as w:
        sw.write_frames(w, 20, 30)
    # every byte outside the datasets' raw storage is unchanged: a kill at any moment cannot
    # leave HDF5's own structures half-written (HDF5 file format: contiguous raw data lives
    # at the dataset's storage address; h5py DatasetID.get_offset)
    assert _metadata_digest(path, per_frame) == before
    with h5py.File(path, "r") as f:
        off = f["n_done"].id.get_offset()
    # the 8-byte commit counter never straddles a 4096-byte page, so one write() cannot be
    # torn by a kill (Linux writes page by page; common practice, no source)
    assert off % 8 == 0 and off // 4096 == (off + 7) // 4096


def test_writing_frame_k_reads_no_earlier_frame_and_memory_stays_flat(tmp_path, monkeypatch):
    ny, nx = 100, 100
    reads = []
    orig_get = h5py.Dataset.__getitem__

    def spy(self, key):
        reads.append(self.name)
        return orig_get(self, key)

    frames = [sw.frame(k % 3, ny, nx) for k in range(3)]
    peaks, rss = [], []
    with _new(tmp_path / "run.h5", n=150, ny=ny, nx=nx) as w:
        monkeypatch.setattr(h5py.Dataset, "__getitem__", spy)
        for k in range(150):
            if k in (5, 145):
                tracemalloc.start()
            w.write_frame(k, frames[k % 3], reference_index=0)
            if k in (5, 145):
                peaks.append(tracemalloc.get_traced_memory()[1])
                tracemalloc.stop()
            if k in (10, 149) and Path("/proc/self/statm").exists():
                rss.append(int(Path("/proc/self/statm").read_text().split()[1])
                           * os.sysconf("SC_PAGE_SIZE"))
    monkeypatch.undo()
    assert not [r for r in reads if r.startswith("/frames")]  # nothing read back
    # Python-side peak of one frame write does not grow with the frame index (same frame
    # size; 64 kB slack for interpreter noise, a frame is 630 kB; common practice, no source)
    assert abs(peaks[1] - peaks[0]) < 64_000, peaks
    # resident memory after 149 frames vs after 10: 88 MB were written in between; allow
    # 16 MB of allocator noise (common practice, no source)
    if rss:
        assert rss[1] - rss[0] < 16e6, rss


# --------------------------------------------------------------------------------------------
# crash safety: kill the writer process for real
# --------------------------------------------------------------------------------------------
@posix_only
def test_sigkill_at_random_moments_then_resume_equals_uninterrupted(tmp_path):
    reference = _reference_file(tmp_path / "reference.h5")
    path = tmp_path / "run.h5"
    rng = random.Random(20240611)
    kills = completed = 0
    landed_mid_frame = 0
    while kills < 16:
        p = _spawn(path)
        ready = p.stdout.readline()  # wait until the file is open
        assert ready.startswith("ready"), p.stderr.read()
        # up to ~12 frame times after the file opened: kills fall inside frame writes, fsyncs,
        # commits and between frames
        time.sleep(rng.uniform(0.0, 0.12))
        p.send_signal(signal.SIGKILL)
        out, err = p.communicate(timeout=60)
        assert p.returncode in (-signal.SIGKILL, 0), err  # killed, or finished first
        out = ready + out
        kills += p.returncode == -signal.SIGKILL
        n_done = _check_after_stop(path, out)
        with h5py.File(path, "r") as f:  # did the kill land inside a frame's data writes?
            if n_done < N and np.any(f["frames/u"][n_done] != 0):
                landed_mid_frame += 1
        if n_done == N:  # finished before the kill: compare and start a new file
            _assert_same_results(path, reference)
            path.unlink()
            completed += 1
    # finish the last file without kills: it must equal the uninterrupted run
    p = _spawn(path)
    out, err = p.communicate(timeout=60)
    assert p.returncode == 0, err
    _assert_same_results(path, reference)
    # plain-h5py view of a resumed file is the same as through Results (same numbers)
    with Results.open(path) as r:
        assert len(r) == N and r.complete
        np.testing.assert_array_equal(r.reference_updates, sw.REFERENCE_UPDATES)
    print(f"{kills} kills, {landed_mid_frame} inside a frame, {completed} runs completed")


@posix_only
def test_sigkill_before_every_file_operation_of_a_frame(tmp_path):
    """Deterministic: kill just before each write/flush/fsync of one frame, in turn."""
    ny, nx = 20, 30
    # count the file operations of one frame in this process (same code path)
    counter = {"ops": 0}
    with _new(tmp_path / "count.h5", n=3, ny=ny, nx=nx, fsync=True) as w:
        _, undo = sw.install_kill_hook(None, counter)
        try:
            sw.write_frames(w, ny, nx)
        finally:
            undo()
    ops_per_frame = counter["ops"] // 3
    assert ops_per_frame * 3 == counter["ops"] and ops_per_frame >= 10
    reference = _reference_file(tmp_path / "reference.h5", n=N, ny=ny, nx=nx)
    path = tmp_path / "run.h5"
    for die_at in range(1, ops_per_frame + 2):  # +1: between one frame's commit and the next
        p = _spawn(path, "--die-at", die_at, ny=ny, nx=nx)
        out, err = p.communicate(timeout=60)
        assert p.returncode == -signal.SIGKILL, err
        start, done, _ = _parse(out)
        n_done = _n_done_plain(path)
        # n_done moves only after all of the frame's numbers were flushed: never before the
        # last operation (the counter write + flush) of the frame (common practice, no source)
        assert n_done == start + (1 if die_at > ops_per_frame else 0) or (
            die_at == ops_per_frame and n_done == start + 1), (die_at, start, n_done)
        with h5py.File(path, "r") as f:
            _assert_frames_are_the_generated_ones(f, n_done, ny, nx)
    p = _spawn(path, ny=ny, nx=nx)
    _, err = p.communicate(timeout=60)
    assert p.returncode == 0, err
    _assert_same_results(path, reference)


@posix_only
def test_sigkill_while_creating_leaves_no_file_or_a_whole_one(tmp_path):
    """A kill during create() leaves nothing or a whole empty file, never a torn one."""
    counter = {"ops": 0}  # file operations of create() (same code path, in this process)
    _, undo = sw.install_kill_hook(None, counter)
    try:
        sw.open_writer(tmp_path / "count.h5", 5, 4, 5).close()
    finally:
        undo()
    (tmp_path / "count.h5").unlink()
    assert counter["ops"] >= 2
    path = tmp_path / "run.h5"
    absent = 0
    for die_at in range(1, counter["ops"] + 1):
        code = ("import sys; sys.path.insert(0, %r); import _store_writer as sw; "
                "sw.install_kill_hook(%d); sw.open_writer(%r, 5, 4, 5)"
                % (str(HELPER.parent), die_at, str(path)))
        p = subprocess.run([sys.executable, "-c", code], capture_output=True, timeout=60)
        assert p.returncode == -signal.SIGKILL, p.stderr
        if path.exists():  # killed after the atomic rename: the file is whole, with no frame
            assert _n_done_plain(path) == 0
            path.unlink()
        else:
            absent += 1
    assert absent >= 1  # kills before the rename leave no file at all (os.replace is atomic)
    debris = [q.name for q in tmp_path.iterdir()]
    assert all(q.startswith(".partial-") for q in debris)
    with sw.open_writer(path, 5, 4, 5, fsync=False) as w:  # a new create clears the debris
        sw.write_frames(w, 4, 5)
    assert sorted(q.name for q in tmp_path.iterdir()) == ["run.h5"]


@posix_only
def test_ctrl_c_leaves_a_clean_file(tmp_path):
    reference = _reference_file(tmp_path / "reference.h5")
    path = tmp_path / "run.h5"
    rng = random.Random(7)
    interrupts = 0
    while interrupts < 4:
        p = _spawn(path)
        ready = p.stdout.readline()
        assert ready.startswith("ready"), p.stderr.read()
        time.sleep(rng.uniform(0.0, 0.08))
        p.send_signal(signal.SIGINT)
        out, err = p.communicate(timeout=60)
        if p.returncode == 0:
            break  # finished before the signal arrived
        interrupts += 1
        assert "KeyboardInterrupt" in err
        _check_after_stop(path, ready + out)
        # clean: the writer closed the file (no lock left, opens for writing at once) and
        # left no temporary file (common practice, no source)
        with h5py.File(path, "r+") as f:
            assert f["n_done"][()] <= N
        assert sorted(q.name for q in tmp_path.iterdir()) == ["reference.h5", "run.h5"]
    p = _spawn(path)
    _, err = p.communicate(timeout=60)
    assert p.returncode == 0, err
    _assert_same_results(path, reference)


# --------------------------------------------------------------------------------------------
# resume compatibility
# --------------------------------------------------------------------------------------------
def _resume(path, settings=None, names=None, digests=None, n=6):
    n_names, n_digests = sw.images(n)
    return ResultsWriter.resume(path, settings=sw.SETTINGS if settings is None else settings,
                                image_names=n_names if names is None else names,
                                image_sha256=n_digests if digests is None else digests)


def test_resume_refuses_other_settings_or_images(tmp_path):
    path = tmp_path / "run.h5"
    with _new(path, n=6, ny=4, nx=5) as w:
        for k in range(2):
            w.write_frame(k, sw.frame(k, 4, 5), reference_index=0)
    before = path.read_bytes()
    other = {**sw.SETTINGS, "subset": 31, "seed": {"x": 41.0, "y": 30.0}, "new_key": 1}
    del other["threshold"]
    with pytest.raises(ValueError) as e:
        _resume(path, settings=other)
    msg = str(e.value)
    assert "\n" not in msg and "use a new --out file or the same settings" in msg
    for name in ("subset", "seed.x", "new_key", "threshold"):
        assert name in msg
    assert "seed.y" not in msg and "step" not in msg  # only the differing ones
    names, digests = sw.images(6)
    with pytest.raises(ValueError, match=r"image 3: 'specimen_0003.tif' in file, 'z.tif' now"):
        _resume(path, names=names[:3] + ["z.tif"] + names[4:])
    # a completed frame's image that changed is refused (frames 0 and 1 are done) ...
    with pytest.raises(ValueError, match="image 1 .* has changed"):
        _resume(path, digests=digests[:1] + ["f" * 64] + digests[2:])
    with pytest.raises(ValueError, match="made from 6 images, 7 given"):
        _resume(path, names=names + ["x.tif"], digests=digests + ["0"])
    assert path.read_bytes() == before  # refused resumes change nothing
    with _resume(path) as w:
        assert w.n_done == 2
        w.write_frame(2, sw.frame(2, 4, 5), reference_index=0)
    assert _n_done_plain(path) == 3
    # ... one not yet used (a damaged image copied again) is taken, and recorded
    renewed = digests[:4] + ["e" * 64] + digests[5:]
    with _resume(path, digests=renewed) as w:
        assert w.n_done == 3
    with h5py.File(path, "r") as f:
        assert list(f["images/sha256"].asstr()[()]) == renewed


def test_create_over_existing_file(tmp_path):
    path = tmp_path / "run.h5"
    with _new(path, n=3, ny=4, nx=5) as w:
        w.write_frame(0, sw.frame(0, 4, 5), reference_index=0)
    before = path.read_bytes()
    with pytest.raises(FileExistsError, match="already exists.*overwrite=True"):
        _new(path, n=3, ny=4, nx=5)
    assert path.read_bytes() == before
    with _new(path, n=3, ny=4, nx=5, overwrite=True) as w:
        assert w.n_done == 0
    assert _n_done_plain(path) == 0


def test_second_writer_is_kept_out(tmp_path):
    path = tmp_path / "run.h5"
    with _new(path, n=3, ny=4, nx=5) as w:
        w.write_frame(0, sw.frame(0, 4, 5), reference_index=0)
        code = ("import sys; sys.path.insert(0, %r); import _store_writer as sw; "
                "sw.open_writer(%r, 3, 4, 5)" % (str(HELPER.parent), str(path)))
        p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           timeout=60)
        assert p.returncode != 0
        assert "another process has it open; wait" in p.stderr.strip().splitlines()[-1]
        # a reader gets in while the writer is open and sees the completed frame
        with Results.open(path) as r:
            assert len(r) == 1
        w.write_frame(1, sw.frame(1, 4, 5), reference_index=0)
        with Results.open(path) as r:
            assert len(r) == 2


# --------------------------------------------------------------------------------------------
# bad output paths and full disks
# --------------------------------------------------------------------------------------------
def test_missing_folder(tmp_path):
    with pytest.raises(FileNotFoundError) as e:
        _new(tmp_path / "nope" / "run.h5", n=2, ny=2, nx=2)
    msg = str(e.value)
    assert "\n" not in msg and "run.h5" in msg and "does not exist; create it" in msg
    with pytest.raises(FileNotFoundError, match="no such file"):
        Results.open(tmp_path / "missing.h5")
    with pytest.raises(FileNotFoundError, match="no such file"):
        _resume(tmp_path / "missing.h5")


def test_read_only_folder(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    existing = folder / "run.h5"
    with _new(existing, n=3, ny=4, nx=5) as w:
        w.write_frame(0, sw.frame(0, 4, 5), reference_index=0)
    before = existing.read_bytes()
    folder.chmod(0o555)
    try:
        probe = folder / "probe"
        try:
            probe.touch()
            probe.unlink()
            writable = True  # root ignores folder permissions
        except PermissionError:
            writable = False
        if not writable:
            with pytest.raises(PermissionError) as e:
                _new(existing, n=3, ny=4, nx=5, overwrite=True)
            assert "\n" not in str(e.value) and str(existing) in str(e.value)
            assert "writable" in str(e.value)
            assert existing.read_bytes() == before
    finally:
        folder.chmod(0o755)
    # a folder that even root cannot write: sysfs refuses new files (Linux sysfs)
    sys_folder = Path("/sys/kernel")
    if sys.platform.startswith("linux") and sys_folder.is_dir() and writable:
        with pytest.raises(PermissionError) as e:
            _new(sys_folder / "dic_results.h5", n=3, ny=4, nx=5)
        msg = str(e.value)
        assert "\n" not in msg and "/sys/kernel/dic_results.h5" in msg and "writable" in msg
        assert ".partial" not in msg


def test_disk_full_while_writing_a_frame_keeps_earlier_frames(tmp_path, monkeypatch):
    path = tmp_path / "run.h5"
    w = _new(path, n=5, ny=6, nx=8)
    for k in range(2):
        w.write_frame(k, sw.frame(k, 6, 8), reference_index=0)
    calls = {"n": 0}
    orig = h5py.Dataset.__setitem__

    def full_disk(self, key, value):
        calls["n"] += 1
        if calls["n"] == 3:  # the third dataset write of the frame (grad) fails
            raise OSError(28, "No space left on device")
        return orig(self, key, value)

    monkeypatch.setattr(h5py.Dataset, "__setitem__", full_disk)
    with pytest.raises(OSError) as e:
        w.write_frame(2, sw.frame(2, 6, 8), reference_index=0)
    msg = str(e.value)
    assert "\n" not in msg and str(path) in msg and "frame 2" in msg
    assert "free disk space" in msg and "No space left" in msg
    monkeypatch.undo()
    assert w.n_done == 2
    with h5py.File(path, "r", locking=False) as f:
        assert f["n_done"][()] == 2
        _assert_frames_are_the_generated_ones(f, 2, 6, 8, refs=False)
    w.write_frame(2, sw.frame(2, 6, 8), reference_index=0)  # after the fix, carry on
    w.close()
    with h5py.File(path, "r") as f:
        _assert_frames_are_the_generated_ones(f, 3, 6, 8, refs=False)


@posix_only
def test_real_write_failures_keep_the_existing_file(tmp_path):
    """A real failing write() (file size limit, EFBIG) in create() and in adding strain."""
    resource = pytest.importorskip("resource")
    path = tmp_path / "run.h5"
    with _new(path, n=40, ny=60, nx=80) as w:  # 12 MB of frame space
        sw.write_frames(w, 60, 80)
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    limit = 4_000_000
    code = f"""
import resource, signal, sys
sys.path.insert(0, {str(HELPER.parent)!r})
import numpy as np, _store_writer as sw
from dic.sequence import ResultsWriter
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)   # make write() fail with EFBIG instead
resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, {limit}))
x, y = sw.grid(60, 80); names, digests = sw.images(40)
try:
    ResultsWriter.create({str(path)!r}, grid_x=x, grid_y=y, n_frames=40, settings={{}},
                         image_names=names, image_sha256=digests, overwrite=True)
except OSError as e:
    print("create:", e)
w = ResultsWriter.reopen({str(path)!r})
try:
    w.write_strain("green_lagrange", 5, {{c: np.zeros((60, 80)) for c in ("xx", "yy", "xy")}})
except OSError as e:
    print("strain:", e)
print("n_done", w.n_done)
w.close()
"""
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert p.returncode == 0, p.stderr
    lines = p.stdout.splitlines()
    assert lines[0].startswith("create: cannot create results file") and str(path) in lines[0]
    assert "free disk space" in lines[0]
    assert lines[1].startswith("strain: cannot add strain green_lagrange_w5") and \
        "free disk space" in lines[1]
    assert lines[2] == "n_done 40"
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before  # untouched
    assert sorted(q.name for q in tmp_path.iterdir()) == ["run.h5"]


# --------------------------------------------------------------------------------------------
# strain
# --------------------------------------------------------------------------------------------
def test_strain_groups(tmp_path):
    path = tmp_path / "run.h5"
    ny, nx = 6, 8
    rng = np.random.default_rng(3)
    data = {c: rng.normal(size=(4, ny, nx)) for c in ("xx", "yy", "xy")}
    with _new(path, n=5, ny=ny, nx=nx) as w:
        for k in range(4):
            w.write_frame(k, sw.frame(k, ny, nx), reference_index=0)
        with pytest.raises(ValueError, match="only frames 0..3 have displacements"):
            w.write_strain("green_lagrange", 15, {c: a[:1] for c, a in data.items()}, start=4)
        # one frame at a time, as a streaming strain stage would
        w.write_strain("green_lagrange", 15, {c: a[0] for c, a in data.items()},
                       attrs={"vsg": 161, "fit": "plane"})
        w.write_strain("green_lagrange", 15, {c: a[2:4] for c, a in data.items()}, start=2)
        with pytest.raises(ValueError, match="other vsg"):
            w.write_strain("green_lagrange", 15, {c: a[1] for c, a in data.items()}, start=1,
                           attrs={"vsg": 99})
        w.write_strain("hencky", 9, {c: a for c, a in data.items()})
        w.write_frame(4, sw.frame(4, ny, nx), reference_index=0)  # frames go on after strain
    with h5py.File(path, "r") as f:
        g = f["strain/green_lagrange_w15"]
        assert g.attrs["measure"] == "green_lagrange" and g.attrs["window"] == 15
        assert g.attrs["vsg"] == 161 and g.attrs["fit"] == "plane"
        np.testing.assert_array_equal(g["written"][()], [1, 0, 1, 1, 0])
        _assert_frames_are_the_generated_ones(f, 5, ny, nx, refs=False)  # the copy kept all
    with Results.open(path) as r:
        assert r.strain_keys() == ["green_lagrange_w15", "hencky_w9"]
        for k in (0, 2, 3):
            got = r.stored_strain(k, "green_lagrange_w15")
            for c in ("xx", "yy", "xy"):
                np.testing.assert_array_equal(got[c], data[c][k])
        with pytest.raises(IndexError, match="not stored yet"):
            r.stored_strain(1, ("green_lagrange", 15))
        with pytest.raises(KeyError, match="stored: green_lagrange_w15, hencky_w9"):
            r.stored_strain(0, "almansi_w3")
        np.testing.assert_array_equal(r.stored_strain(3, ("hencky", 9))["xy"], data["xy"][3])
    info = results_info(path)
    assert "strain green_lagrange_w15: green_lagrange, window 15" in info
    assert "3 of 5 frames" in info


def test_strain_groups_named_at_creation_need_no_copy(tmp_path):
    path = tmp_path / "run.h5"
    ny, nx = 6, 8
    with _new(path, n=3, ny=ny, nx=nx, strain=[("green_lagrange", 15, {"vsg": 161}),
                                               ("hencky", 9)]) as w:
        for k in range(3):
            w.write_frame(k, sw.frame(k, ny, nx), reference_index=0)
        inode = path.stat().st_ino
        w.write_strain("green_lagrange", 15, {c: np.full((3, ny, nx), 0.5) for c in "xx yy xy"
                                              .split()})
        # the same file, changed in place (a copy would be a new inode; POSIX rename)
        assert path.stat().st_ino == inode
        zeros = {c: np.zeros((ny, nx)) for c in ("xx", "yy", "xy")}
        with pytest.raises(ValueError, match=r"other vsg \(vsg=161\)"):
            w.write_strain("green_lagrange", 15, zeros, start=1, attrs={"vsg": 99})
        # an attribute the group lacks is added, on a copy that replaces the file
        w.write_strain("hencky", 9, zeros, start=1, attrs={"fit": "plane"})
        assert path.stat().st_ino != inode
        # a group first named now is added on a copy too
        w.write_strain("almansi", 3, zeros, attrs={"vsg": float("nan")})
        inode = path.stat().st_ino
        # an unknown VSG (NaN) stored and given again is the same value: no error, no copy
        w.write_strain("almansi", 3, zeros, start=1, attrs={"vsg": float("nan")})
        assert path.stat().st_ino == inode
    with Results.open(path) as r:
        assert r.strain_keys() == ["almansi_w3", "green_lagrange_w15", "hencky_w9"]
        assert r.strain_attrs("green_lagrange_w15") == {"measure": "green_lagrange",
                                                        "window": 15, "vsg": 161}
        np.testing.assert_array_equal(r.strain_written("hencky_w9"), [False, True, False])
        assert r.strain_attrs("hencky_w9") == {"measure": "hencky", "window": 9, "fit": "plane"}
        np.testing.assert_array_equal(r.stored_strain(2, "green_lagrange_w15")["xy"], 0.5)
    with pytest.raises(ValueError, match="measure"):
        _new(tmp_path / "b.h5", n=3, ny=ny, nx=nx, strain=[("bad name", 3)])


def test_open_for_writing_creates_resumes_and_checks(tmp_path):
    path = tmp_path / "run.h5"
    x, y = sw.grid(4, 5)
    names, digests = sw.images(4)
    mask = np.ones((60, 70), bool)
    kw = dict(settings=sw.SETTINGS, grid_x=x, grid_y=y, n_frames=4, image_names=names,
              image_sha256=digests, roi_mask=mask, scale_mm_per_px=0.02, fsync=False)
    with open_for_writing(path, **kw) as w:
        assert w.n_done == 0
        for k in range(2):
            if k == 1:
                w.add_reference_update(1)
            w.write_frame(k, sw.frame(k, 4, 5), reference_index=0)
    with open_for_writing(path, **kw) as w:  # the same analysis: resumed
        assert w.n_done == 2
        np.testing.assert_array_equal(w.reference_updates, [1])
        np.testing.assert_array_equal(w.read_field(1).u, sw.frame(1, 4, 5).u)
        with pytest.raises(IndexError, match="not completed"):
            w.read_field(2)
    before = path.read_bytes()
    other_mask = mask.copy()
    other_mask[0, 0] = False
    for change, msg in [({"grid_x": x + 1}, "point grid differs"),
                        ({"roi_mask": other_mask}, "region of interest differs"),
                        ({"roi_mask": None}, "region of interest differs"),
                        ({"scale_mm_per_px": 0.03}, "scale_mm_per_px: 0.02 in file, 0.03 now"),
                        ({"settings": {**sw.SETTINGS, "step": 5}}, "step: 10 in file, 5 now")]:
        with pytest.raises(ValueError, match=msg) as e:
            open_for_writing(path, **{**kw, **change})
        assert "use a new --out file or the same settings" in str(e.value)
        # a typed error carrying its advice, so that callers never match message text
        assert isinstance(e.value, ResultsMismatch)
        assert e.value.fix == "use a new --out file or the same settings"
    assert path.read_bytes() == before
    with open_for_writing(path, **{**kw, "overwrite": True}) as w:
        assert w.n_done == 0  # a new file replaced the old one


def test_strain_field_per_frame(tmp_path):
    from dic.strain import strain_field

    path = tmp_path / "run.h5"
    with _new(path, n=3, ny=12, nx=14) as w:
        fields = []
        for k in range(3):
            f = sw.frame(k, 12, 14)
            f.u, f.v = 0.01 * (k + 1) * f.x, -0.003 * f.y  # uniform stretch
            fields.append(f)
            w.write_frame(k, f, reference_index=0)
        strains = [strain_field(f, window=5, measure="green-lagrange") for f in fields]
        for k in (0, 2):
            w.write_strain_frame(k, strains[k])
    with Results.open(path) as r:
        key = "green-lagrange_w5"
        assert r.strain_keys() == [key]
        a = r.strain_attrs(key)
        s0 = strains[0]
        assert a == {"measure": "green-lagrange", "window": 5, "fit": s0.fit, "vsg": s0.vsg,
                     "step": s0.step, "subset": s0.subset, "min_points": s0.min_points}
        for k in (0, 2):
            got = r.stored_strain(k, key)
            for c in ("xx", "yy", "xy"):
                np.testing.assert_array_equal(got[c], getattr(strains[k], c))
        np.testing.assert_array_equal(r.strain_written(key), [True, False, True])


def test_adding_a_group_copies_only_the_used_part(tmp_path):
    path = tmp_path / "run.h5"
    w = _new(path, n=400, ny=100, nx=100)  # 220 MB of frame space, none used yet
    if path.stat().st_blocks * 512 > path.stat().st_size / 10:
        w.close()
        pytest.skip("this file system does not keep unwritten space as holes")
    w.write_frame(0, sw.frame(0, 100, 100), reference_index=0)
    t = time.perf_counter()
    w.write_strain("hencky", 5, {c: np.zeros((100, 100)) for c in ("xx", "yy", "xy")})
    seconds = time.perf_counter() - t
    w.close()
    # the copy kept the holes: on disk the file is far smaller than its length (sparse files,
    # lseek SEEK_DATA/SEEK_HOLE; common practice, no source)
    assert path.stat().st_blocks * 512 < path.stat().st_size / 10
    with h5py.File(path, "r") as f:
        _assert_frames_are_the_generated_ones(f, 1, 100, 100, refs=False)
    print(f"strain group added to a 220 MB sparse file in {seconds * 1e3:.0f} ms")


def test_results_info(tmp_path):
    path = tmp_path / "run.h5"
    with _new(path, n=6, ny=7, nx=9) as w:
        for k in range(4):
            if k in (0, 2):
                w.add_reference_update(k)
            w.write_frame(k, sw.frame(k, 7, 9), reference_index=0 if k < 2 else 1)
    info = results_info(path)
    lines = info.splitlines()
    assert len(lines) >= 8 and not info.endswith("\n")
    assert "frames: 4 of 6 done (incomplete: resume" in info
    assert "grid: 7 x 9 points" in info and "step 10 px" in info
    assert "scale: 0.02 mm/px" in info
    assert "updates at frames 0, 2" in info
    last = sw.frame(3, 7, 9)
    assert f"{last.n_valid} of 63 points measured" in info  # counted independently here
    assert "specimen_0000.tif .. specimen_0005.tif" in info


def test_not_a_results_file(tmp_path):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f["a"] = 1
    with pytest.raises(ValueError, match="not a results file"):
        Results.open(path)
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not hdf5 at all")
    with pytest.raises(OSError, match="junk.h5"):
        Results.open(junk)
