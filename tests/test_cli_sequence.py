"""``dic run`` and ``dic info`` on a whole image sequence, end to end.

The images are exact analytic speckle (dic.images.synth; Zhou & Goodson, Opt. Eng. 40 (2001) 1613)
rendered under the analytic field of a tensile test with a diffuse neck
(dic.images.synth.tensile_neck), written as 16-bit TIFF, so the true displacement of every reference
point is known in every frame: that is the oracle for the numbers. Crash safety is checked by
killing a real ``python -m dic run`` process (SIGKILL, SIGINT) and comparing the resumed file
with an uninterrupted run, number for number.
"""

from __future__ import annotations

import errno
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

import dic
from dic.images import synth
from dic.cli import main
from dic.sequence import Results

ROOT = Path(__file__).resolve().parent.parent
SHAPE = (160, 240)                     # rows, cols
CENTRE = (120.0, 80.0)                 # neck centre (x, y), px
N_FRAMES = 8
STRAINS = np.linspace(0.0, 0.12, N_FRAMES)   # engineering strain at the neck centre
SUBSET = 21
posix_only = pytest.mark.skipif(sys.platform == "win32",
                                reason="needs POSIX signals (SIGKILL, SIGINT to a child)")

# Accumulated displacement error allowed at every frame: 0.05 px is the project issue's bar for
# the last frame of a tracked sequence (60 % strain there; 12 % here). The quadratic shape
# function follows the neck's curvature; about 0.017 px is seen.
TOL_PX = 0.05


def _field(e):
    # uniform part 0.6 e plus a neck adding 0.4 e at its centre (width parameter 30 px)
    return synth.tensile_neck(0.6 * e, centre=CENTRE, neck_strain=0.4 * e, neck_width=30.0)


def _write_sequence(folder, shape=SHAPE, n=N_FRAMES):
    folder.mkdir(parents=True, exist_ok=True)
    pattern = synth.make_speckle(shape, radius=2.5, seed=11, contrast=600)
    for k in range(n):
        img = synth.render(pattern, shape, _field(STRAINS[k]) if k else None, noise=0.5, seed=k)
        # x 16: 16-bit grey levels well inside 0..65535 (about 600..11300)
        dic.images.io.write_image(folder / f"frame{k}.tif", img * 16, bits=16)
    return folder


@pytest.fixture(scope="module")
def frames(tmp_path_factory):
    return _write_sequence(tmp_path_factory.mktemp("seq") / "frames")


@pytest.fixture(scope="module")
def reference_run(frames, tmp_path_factory):
    """An uninterrupted run with the quadratic shape function: the file other runs must equal."""
    out = tmp_path_factory.mktemp("ref") / "run.h5"
    assert main(["run", str(frames), "--out", str(out), "--shape-function", "quadratic",
                 "-q"]) == 0
    return out


def _one_error_line(err):
    """stderr of a failed run: exactly one line 'dic: error: ...', no traceback."""
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("dic: error: ")
    return lines[0]


def _assert_same_frames(path_a, path_b, n=None):
    """Every completed frame of two results files equal, number for number (NaN == NaN)."""
    with Results.open(path_a) as a, Results.open(path_b) as b:
        n = len(a) if n is None else n
        assert len(a) >= n and len(b) >= n
        np.testing.assert_array_equal(a.reference_updates[a.reference_updates < n],
                                      b.reference_updates[b.reference_updates < n])
        for k in range(n):
            fa, fb = a.field(k), b.field(k)
            for name in ("u", "v", "grad", "zncc", "reason", "iterations"):
                np.testing.assert_array_equal(getattr(fa, name), getattr(fb, name),
                                              err_msg=f"frame {k}, {name}")


def _n_done(path):
    """Completed frames as a reader sees them while a writer may still run (plain h5py)."""
    try:
        with h5py.File(path, "r", locking=False) as f:
            return int(f["n_done"][()])
    except (OSError, KeyError):
        return 0


# --------------------------------------------------------------------------------------------
# the numbers
# --------------------------------------------------------------------------------------------
def test_run_tracks_the_analytic_field(reference_run):
    with Results.open(reference_run) as r:
        assert len(r) == r.n_frames == N_FRAMES
        assert r.settings["shape_function"] == "quadratic"
        half = SUBSET // 2
        for k in range(N_FRAMES):
            f = r.field(k)
            ut, vt = _field(STRAINS[k])(f.x, f.y)
            err = np.hypot(f.u - ut, f.v - vt)
            # the oracle: the analytic field of the rendered images (see TOL_PX)
            assert np.nanmax(err) <= TOL_PX, (k, np.nanmax(err))
            # Which points can be measured follows from geometry: those whose deformed subset
            # (its corners mapped with the analytic field) stays clear of a 6 px border. The
            # border is where a quintic B-spline interpolant is set by its mirror boundary
            # condition rather than by the image: the prefilter's pole, about 0.43 (Unser, IEEE
            # Signal Process. Mag. 16 (1999) 22, from memory), carries that error 0.43^6 = 0.6 %
            # of the way in after 6 px. At least 95 % of those points must be measured (the
            # project issue's bar for valid points), and no point is made up elsewhere.
            inside = np.ones(f.x.shape, bool)
            for sx in (-half, half):
                for sy in (-half, half):
                    cu, cv = _field(STRAINS[k])(f.x + sx, f.y + sy)
                    xs, ys = f.x + sx + cu, f.y + sy + cv
                    inside &= ((xs >= 6) & (xs <= SHAPE[1] - 7) & (ys >= 6)
                               & (ys <= SHAPE[0] - 7))
            assert np.count_nonzero(f.valid & inside) >= 0.95 * np.count_nonzero(inside), k
            assert np.all(np.isnan(f.u[~f.valid]))


def test_info_summarises_the_file(reference_run, capsys):
    assert main(["info", str(reference_run)]) == 0
    text = capsys.readouterr().out
    assert f"frames: {N_FRAMES} of {N_FRAMES} done" in text
    assert "measured points per frame" in text
    assert "shape_function='quadratic'" in text
    # how sure the last frame's points are, from the file's own standard deviations (the
    # larger of u and v per point; numpy's median and percentile, common practice)
    with Results.open(reference_run) as r:
        f = r.field(len(r) - 1)
    s = np.fmax(f.std_u, f.std_v)[f.valid]
    assert (f"how sure (last frame): standard deviation median {np.median(s):.3g} px, 95 % "
            f"within {np.percentile(s, 95):.3g} px, largest {s.max():.3g} px; "
            f"{np.count_nonzero(s > 0.2)} of {s.size} points less sure than 0.2 px") in text
    # a folder holding results.h5 works too; a bad path is exit 2 with one line
    assert main(["info", str(reference_run.parent)]) == 2  # no results.h5 in that folder
    assert "results.h5" in _one_error_line(capsys.readouterr().err)
    assert main(["info", str(reference_run.parent / "nope.h5")]) == 2
    assert "nope.h5" in _one_error_line(capsys.readouterr().err)


def test_info_into_a_closed_pipe_is_quiet(reference_run):
    # 'dic info run.h5 | head -1': the reader leaves early; the command stops quietly with
    # exit 0 instead of an error line (common practice of command-line tools, no source)
    import subprocess
    import sys

    p = subprocess.Popen([sys.executable, "-c", "from dic.cli import main; raise SystemExit("
                          f"main(['info', {str(reference_run)!r}]))"],
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    p.stdout.close()                      # gone before the command writes its first line
    err = p.stderr.read().decode()
    p.stderr.close()
    assert p.wait(timeout=60) == 0 and err == ""


def test_workers_give_the_same_numbers(frames, reference_run, tmp_path):
    # Results must not depend on where the frames ran (project issue): compared exactly. Both
    # runs are separate processes (see _spawn_run; reference_run has filled numba's cache).
    # Two blocks of 4 images: the first image of each block runs in the main process, the
    # other three in the worker processes.
    default = _spawn_run(["run", str(frames), "--out", str(tmp_path / "default.h5"),
                          "--block", "4", "-q"])
    workers = _spawn_run(["run", str(frames), "--out", str(tmp_path / "w2.h5"),
                          "--block", "4", "--workers", "2", "-q"])
    _assert_same_frames(default, workers)


# --------------------------------------------------------------------------------------------
# analysis file and options
# --------------------------------------------------------------------------------------------
def _toml(path, text):
    path.write_text(text)
    return path


def test_analysis_file_equals_options(frames, tmp_path):
    toml = _toml(tmp_path / "analysis.toml", f"""
images = "{frames.as_posix()}/frame*.tif"
out = "by_file.h5"
frames = {{ start = 0, stop = 6 }}
[matching]
subset = 25
step = 8
shape_function = "quadratic"
[roi]
rectangle = [20, 20, 219, 139]
[scale]
line = [0, 0, 300, 400]
length_mm = 10.0
[strain]
window = 5
measure = "hencky"
""")
    assert main(["run", "--config", str(toml), "-q"]) == 0
    by_options = tmp_path / "by_options.h5"
    assert main(["run", str(frames), "--out", str(by_options), "--frames", "0:6",
                 "--subset", "25", "--step", "8", "--shape-function", "quadratic",
                 "--roi", "20,20,219,139", "--scale-line", "0,0,300,400,10",
                 "--strain-window", "5", "--strain-measure", "log", "-q"]) == 0
    by_file = tmp_path / "by_file.h5"  # 'out' is relative to the analysis file's folder
    with Results.open(by_file) as a, Results.open(by_options) as b:
        assert len(a) == len(b) == 6
        assert a.settings == b.settings
        assert a.settings["strain"] == {"window": 5, "measure": "hencky"}
        assert a.image_names == b.image_names
        # a 3-4-5 triangle: 500 px for 10 mm (Pythagoras; common practice, no source)
        assert a.scale == b.scale == pytest.approx(10.0 / 500.0, rel=1e-12)
        np.testing.assert_array_equal(a.roi_mask, b.roi_mask)
        assert a.strain_keys() == b.strain_keys() == ["hencky_w5"]
        for k in range(6):
            np.testing.assert_array_equal(a.stored_strain(k, "hencky_w5")["xx"],
                                          b.stored_strain(k, "hencky_w5")["xx"])
    _assert_same_frames(by_file, by_options)


def test_options_override_the_file(frames, tmp_path, capsys):
    toml = _toml(tmp_path / "a.toml", f"""
images = "{frames.as_posix()}"
out = "from_file.h5"
frames = {{ start = 0, stop = 3 }}
[matching]
subset = 25
step = 12
""")
    out = tmp_path / "from_options.h5"
    assert main(["run", "--config", str(toml), "--out", str(out), "--step", "10", "-q"]) == 0
    assert not (tmp_path / "from_file.h5").exists()
    with Results.open(out) as r:
        assert (r.settings["step"], r.settings["subset"]) == (10, 25)   # option, file
        assert r.settings["frames"] == [0, 1, 2]                         # file
        # the grid spacing is the step given on the command line
        assert set(np.diff(r.grid_x[0])) == {10.0}
    # unknown keys in the file are errors that suggest the closest valid key
    bad = _toml(tmp_path / "bad.toml", f'images = "{frames.as_posix()}"\n[matching]\nsubsett = 21\n')
    assert main(["run", "--config", str(bad), "--out", str(tmp_path / "x.h5")]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "bad.toml" in line and "did you mean 'subset'" in line


def test_analysis_file_with_a_report_table_finishes_the_pipeline(frames, tmp_path,
                                                                  monkeypatch):
    # [tensile] and [report] in the analysis file: once the results file is complete, dic run
    # hands it to dic.workflow.run.finish with those tables (the report itself is tested there)
    import dic.workflow.run

    calls = []
    monkeypatch.setattr(dic.workflow.run, "finish",
                        lambda results, out, settings: calls.append((results, out, settings))
                        or {})
    toml = _toml(tmp_path / "r.toml", f"""
images = "{frames.as_posix()}"
frames = {{ start = 0, stop = 3 }}
[strain]
window = 5
[report]
title = "test"
""")
    out = tmp_path / "folder"
    assert main(["run", "--config", str(toml), "--out", str(out), "-q"]) == 0
    assert calls == [(out / "results.h5", out,
                      {"report": {"title": "test"},
                       "strain": {"window": 5, "measure": "green-lagrange"}})]
    # a results file as --out: no folder to write a report into, so no report
    assert main(["run", "--config", str(toml), "--out", str(tmp_path / "r.h5"), "-q"]) == 0
    assert len(calls) == 1


# --------------------------------------------------------------------------------------------
# output folder, progress bar
# --------------------------------------------------------------------------------------------
def test_output_folder_gets_results_file_tables_and_maps(frames, tmp_path, capsys, monkeypatch):
    import dic.cli.run

    monkeypatch.setattr(dic.cli.run, "_terminal", lambda: True)  # draw the bars as on a terminal
    out = tmp_path / "results"
    assert main(["run", str(frames), "--out", str(out), "--frames", "0:4"]) == 0
    captured = capsys.readouterr()
    # tqdm's bar with a rate and an ETA ("[00:01<00:02, 1.50frame/s]"), on stderr
    assert re.search(r"tracking: .*\d+/4 \[\d\d:\d\d<\d\d:\d\d, +[\d.]+(frame/s|s/frame)\]",
                     captured.err), captured.err
    assert "tracked 4 frame(s)" in captured.out
    assert (out / "results.h5").is_file()
    csvs = sorted(p.name for p in out.glob("*.csv"))
    # every frame but the reference image itself gets a table and a map
    assert csvs == [f"displacements_frame{k}.csv" for k in (1, 2, 3)]
    assert all((out / f"strain_frame{k}.png").is_file() for k in (1, 2, 3))
    table = np.genfromtxt(out / "displacements_frame3.csv", delimiter=",", names=True,
                          comments="#")
    with Results.open(out / "results.h5") as r:
        f = r.field(3)
        # the table holds the results file's numbers exactly (17 significant digits)
        np.testing.assert_array_equal(table["u_px"], f.u.ravel())
        np.testing.assert_array_equal(table["reason"], f.reason.ravel())
    # the same command again: nothing left to do, nothing rewritten
    stamp = (out / "strain_frame3.png").stat().st_mtime_ns
    assert main(["run", str(frames), "--out", str(out), "--frames", "0:4"]) == 0
    assert "already up to date" in capsys.readouterr().out
    assert (out / "strain_frame3.png").stat().st_mtime_ns == stamp


# --------------------------------------------------------------------------------------------
# interruption, failing resumes, bad input
# --------------------------------------------------------------------------------------------
def test_interrupted_run_survives_failing_resumes(frames, reference_run, tmp_path, capsys,
                                                  monkeypatch):
    from dic.sequence import ResultsWriter

    out = tmp_path / "part.h5"
    cmd = ["run", str(frames), "--out", str(out), "--shape-function", "quadratic", "-q"]
    real = ResultsWriter.write_frame
    calls = {"n": 0}

    def interrupted(self, k, field, **kw):  # Ctrl-C arrives after 3 written frames
        if calls["n"] == 3:
            raise KeyboardInterrupt
        calls["n"] += 1
        return real(self, k, field, **kw)

    monkeypatch.setattr(ResultsWriter, "write_frame", interrupted)
    assert main(cmd) == 130
    err = capsys.readouterr().err
    assert "interrupted" in err and f"3 of {N_FRAMES} frames" in err
    monkeypatch.setattr(ResultsWriter, "write_frame", real)
    assert _n_done(out) == 3

    # other settings: one line naming the file and the setting, the 3 frames untouched
    assert main(["run", str(frames), "--out", str(out), "--step", "12", "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "part.h5" in line and "step" in line
    assert _n_done(out) == 3

    # a full disk while resuming: the second frame's sync fails as a full disk reports it
    real_fsync = os.fsync
    syncs = {"n": 0}

    def full_disk(fd):
        syncs["n"] += 1
        if syncs["n"] >= 2:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_fsync(fd)

    monkeypatch.setattr(os, "fsync", full_disk)
    assert main(cmd) == 2
    monkeypatch.setattr(os, "fsync", real_fsync)
    line = _one_error_line(capsys.readouterr().err)
    assert "part.h5" in line and "No space left on device" in line and "free disk" in line
    assert _n_done(out) == 4                     # the frame that did sync is kept
    _assert_same_frames(reference_run, out, n=4)

    # disk space back: the same command finishes, equal to an uninterrupted run
    assert main(cmd) == 0
    assert _n_done(out) == N_FRAMES
    _assert_same_frames(reference_run, out)


def test_max_sigma_reaches_every_frame_and_old_files_resume(frames, reference_run, tmp_path,
                                                            capsys):
    """The limit on a point's standard deviation, from the analysis file or the option, holds
    in every frame and is recorded; a file written before the setting was recorded resumes
    under the default and refuses another value."""
    with Results.open(reference_run) as r:
        assert r.settings["max_sigma"] == 2.0           # the default, recorded
        f = r.field(N_FRAMES - 1)
        sig = np.fmax(f.std_u, f.std_v)[f.valid]
    # a limit at the 70th percentile of the last frame's standard deviations: about 30 % of
    # its points are less sure than it, so it changes which points are measured (and stays
    # below the share, one half, at which a run warns of a pattern without texture)
    limit = float(np.percentile(sig, 70))
    toml = _toml(tmp_path / "a.toml", f"""
images = "{frames.as_posix()}"
out = "strict.h5"
[matching]
shape_function = "quadratic"
max_sigma = {limit!r}
""")
    assert main(["run", "--config", str(toml), "-q"]) == 0
    by_option = tmp_path / "by_option.h5"
    assert main(["run", str(frames), "--out", str(by_option), "--shape-function", "quadratic",
                 "--max-sigma", repr(limit), "-q"]) == 0
    _assert_same_frames(tmp_path / "strict.h5", by_option)
    with Results.open(by_option) as r, Results.open(reference_run) as ref:
        assert r.settings["max_sigma"] == limit
        updates = np.asarray(r.reference_updates)
        for k in range(1, N_FRAMES):
            f, g = r.field(k), ref.field(k)
            # the option's definition: no point matched less sure than the limit is measured.
            # After n changes of reference a frame's displacement is the sum of n + 1 matches,
            # whose independent errors add in quadrature: at most sqrt(n + 1) x the limit (the
            # file holds standard deviations in float32: relative rounding 6e-8)
            n = np.count_nonzero(updates <= k)
            bound = limit * np.sqrt(n + 1) * (1 + 1e-6)
            assert np.all(np.fmax(f.std_u, f.std_v)[f.valid] <= bound), k
        # in the first frame (one match, same reference as the default run) the points left
        # out are the less sure ones (FLAT); a few more fail the neighbour test or are cut off
        # once neighbours are missing
        f, g = r.field(1), ref.field(1)
        why = f.reason[g.valid & ~f.valid]
        assert why.size >= 0.1 * np.count_nonzero(g.valid)
        assert np.count_nonzero(why == dic.Reason.FLAT) >= 0.9 * why.size
    # a file from before max_sigma was recorded: its settings lack the key
    old = tmp_path / "old.h5"
    assert main(["run", str(frames), "--out", str(old), "--frames", "0:3", "-q"]) == 0
    with h5py.File(old, "r+") as h:
        s = json.loads(h.attrs["settings"])
        del s["max_sigma"]
        h.attrs["settings"] = json.dumps(s)
    assert main(["run", str(frames), "--out", str(old), "--frames", "0:3", "-q"]) == 0
    assert main(["run", str(frames), "--out", str(old), "--frames", "0:3", "--max-sigma",
                 "0.5", "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "max_sigma (--max-sigma): 2.0 in file, 0.5 now" in line, line


@pytest.fixture(scope="module")
def bad_inputs(frames, tmp_path_factory):
    base = tmp_path_factory.mktemp("bad")
    img = dic.read_image(frames / "frame0.tif")
    cases = {}
    sizes = base / "sizes"
    sizes.mkdir()
    dic.images.io.write_image(sizes / "a1.tif", img, bits=16)
    dic.images.io.write_image(sizes / "a2.tif", img[:, :-8], bits=16)
    cases["frames of different sizes"] = ([str(sizes)], "a2.tif")
    depths = base / "depths"
    depths.mkdir()
    dic.images.io.write_image(depths / "a1.tif", img, bits=16)
    dic.images.io.write_image(depths / "a2.tif", img / 64, bits=8)
    cases["frames of different bit depths"] = ([str(depths)], "a2.tif")
    trunc = base / "trunc"
    trunc.mkdir()
    for k in range(3):
        (trunc / f"b{k}.tif").write_bytes((frames / f"frame{k}.tif").read_bytes())
    data = (frames / "frame3.tif").read_bytes()
    (trunc / "b3.tif").write_bytes(data[: len(data) // 2])  # header whole, pixels cut short
    cases["truncated file"] = ([str(trunc)], "b3.tif")
    garbage = base / "garbage"
    garbage.mkdir()
    (garbage / "b0.tif").write_bytes((frames / "frame0.tif").read_bytes())
    (garbage / "b1.tif").write_bytes(b"not an image at all" * 20)
    cases["unreadable file"] = ([str(garbage)], "b1.tif")
    (base / "empty").mkdir()
    cases["empty folder"] = ([str(base / "empty")], "empty")
    cases["missing analysis file"] = (["--config", str(base / "nope.toml")], "nope.toml")
    (base / "plain.txt").write_text("not a folder")
    cases["output is a plain file"] = ([str(frames), "--out", str(base / "plain.txt")],
                                       "plain.txt")
    return base, cases


BAD = ["frames of different sizes", "frames of different bit depths", "truncated file",
       "unreadable file", "empty folder", "missing analysis file", "output is a plain file"]


@pytest.mark.parametrize("case", BAD)
def test_bad_input_is_one_line_and_exit_2(case, bad_inputs, tmp_path, capsys):
    base, cases = bad_inputs
    args, name = cases[case]
    if "--out" not in args:
        args = [*args, "--out", str(tmp_path / "run.h5")]
    assert main(["run", *args, "-q"]) == 2
    captured = capsys.readouterr()
    line = _one_error_line(captured.err)
    assert name in line, line          # names the file ...
    assert ";" in line, line           # ... and, after the semicolon, the fix
    assert captured.out == ""


def test_truncated_file_keeps_the_frames_before_it(bad_inputs, tmp_path, capsys):
    base, cases = bad_inputs
    out = tmp_path / "t.h5"
    assert main(["run", str(base / "trunc"), "--out", str(out), "-q"]) == 2
    assert "b3.tif" in _one_error_line(capsys.readouterr().err)
    # frames 0..2 were complete before b3.tif failed to decode: they are written, and stay
    with Results.open(out) as r:
        assert len(r) == 3
        assert r.field(2).n_valid > 0.5 * r.field(2).n_points


def test_read_only_output_folder(frames, tmp_path, capsys, monkeypatch):
    folder = tmp_path / "locked"
    folder.mkdir()
    folder.chmod(0o555)
    try:
        probe = folder / "probe"
        try:
            probe.write_text("x")
            probe.unlink()
            writable = True
        except OSError:
            writable = False
        if writable:
            # running as root, which ignores permission bits: make HDF5 fail as it does on a
            # read-only folder (errno 13, "Permission denied")
            real = h5py.File

            def refuse(name, mode="r", *a, **kw):
                if mode != "r" and Path(name).parent == folder:
                    raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(name))
                return real(name, mode, *a, **kw)

            monkeypatch.setattr(h5py, "File", refuse)
        assert main(["run", str(frames), "--out", str(folder / "run.h5"), "-q"]) == 2
        line = _one_error_line(capsys.readouterr().err)
        assert "run.h5" in line and "permission denied" in line.lower()
        assert not list(folder.iterdir())
    finally:
        folder.chmod(0o755)


# --------------------------------------------------------------------------------------------
# a real process, killed
# --------------------------------------------------------------------------------------------
def _command(frames, out):
    # 2 px step and one image per block: frames take long enough, and are written in small
    # groups, so that the process can be caught half-way
    return ["run", str(frames), "--out", str(out), "--step", "2", "--block", "1", "-q"]


def _spawn(args):
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen([sys.executable, "-m", "dic", *args], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _spawn_run(args):
    """Run ``python -m dic ARGS`` to completion; returns the --out path.

    Exact comparisons between processes are made between processes that all load the compiled
    kernels from numba's cache: the process that compiled them (this one, on a cold cache) was
    seen to differ from those in the last bits (up to 6e-14 px).
    """
    proc = _spawn(args)
    stdout, stderr = proc.communicate(timeout=120)
    assert proc.returncode == 0, stderr
    return Path(args[args.index("--out") + 1])


def _stop_when_frames_written(proc, out, sig, at_least=2):
    """Send ``sig`` once ``at_least`` frames are complete (but not all); returns n_done then."""
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        n = _n_done(out)
        if n >= at_least:
            if n >= N_FRAMES or proc.poll() is not None:
                proc.kill()
                pytest.fail(f"the run finished ({n} frames) before it could be stopped")
            proc.send_signal(sig)
            return n
        if proc.poll() is not None:
            pytest.fail(f"the run ended early: {proc.communicate()}")
        time.sleep(0.002)
    proc.kill()
    pytest.fail("no frames written within 120 s")


@pytest.fixture(scope="module")
def fine_run(frames, tmp_path_factory, reference_run):
    """The uninterrupted run of the kill tests' command, in a process of its own.

    The command is first run in this process, so that the compiled kernels are in numba's
    cache before any process is compared with another (see _spawn_run).
    """
    folder = tmp_path_factory.mktemp("fine")
    assert main(_command(frames, folder / "warm.h5")) == 0
    return _spawn_run(_command(frames, folder / "run.h5"))


@posix_only
def test_sigkill_then_resume_equals_uninterrupted(frames, fine_run, tmp_path):
    out = tmp_path / "killed.h5"
    proc = _spawn(_command(frames, out))
    seen = _stop_when_frames_written(proc, out, signal.SIGKILL)
    proc.communicate(timeout=60)
    assert proc.returncode == -signal.SIGKILL
    # every frame completed before the kill is readable, and no more than were planned
    n = _n_done(out)
    assert seen <= n < N_FRAMES
    _assert_same_frames(fine_run, out, n=n)
    # the same command again carries on after the last completed frame
    again = _spawn(_command(frames, out))
    stdout, stderr = again.communicate(timeout=120)
    assert again.returncode == 0, stderr
    assert _n_done(out) == N_FRAMES
    _assert_same_frames(fine_run, out)


@posix_only
def test_ctrl_c_stops_cleanly(frames, fine_run, tmp_path):
    out = tmp_path / "stopped.h5"
    proc = _spawn(_command(frames, out))
    _stop_when_frames_written(proc, out, signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    n = _n_done(out)
    assert f"{n} of {N_FRAMES} frames are saved" in stderr
    assert 2 <= n < N_FRAMES
    # the writer closed the file: plain h5py opens it with its default locking
    with h5py.File(out, "r") as f:
        assert int(f["n_done"][()]) == n
    _assert_same_frames(fine_run, out, n=n)
