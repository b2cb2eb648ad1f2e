"""The fault catalogue: what a user meets when things go wrong, one case per line of the table.

Each case stands for one line of the reliability issue's table (D1 .. D13, signals, cosmetic
items) or a case added beside it. The expected behaviour is the project's rule for bad input
and failures (one ``dic: error:`` line, exit code 2, no traceback; the results file never
claims a frame that is not whole on disk), so most checks compare against that rule and
against an uninterrupted run of the same analysis, number for number.

The catalogue (issue line -> cases below):

=========================================== ===============================================
D1 a full disk marks wrong numbers complete test_d1_* (writer hook at each point, workers,
                                            strain, creation; a real tmpfs when root)
D2 a repaired image cannot be resumed       test_d2_repaired_image_resumes
D3 workers outlive their parent             test_d3_workers_exit_when_the_parent_is_killed
D4 a kill after a frame leaves no strain    test_d4_resume_fills_strain_missing_after_a_stop
D5 report/export ignore the stored window   test_d5_export_uses_the_stored_strain_window
D6 the strain window is checked too late    test_d6_* (before writing; option named)
D7 the tool reads its own outputs           test_d7_own_maps_in_the_image_folder_...
D9 analysis files that are not UTF-8        test_d9_* (byte-order mark; UTF-16, Latin-1)
D10 a too-large step advises a smaller      test_d10_* (no always-outside grid line; step
    subset; outermost grid lines outside    advice)
D11 read-only location                      test_d11_read_only_location_says_not_writable
D12 unquoted glob in the shell's order      test_d12_files_out_of_natural_order_warn
D13 dic noise reports motion as noise       test_d13_* (same image twice; moving images)
SIGTERM and SIGHUP end a run silently       test_sigterm_and_sighup_stop_like_ctrl_c
stray libpng line; path printed twice       test_damaged_png_prints_one_line_with_the_...
report/export of a foreign file say --out   test_foreign_file_names_the_input_not_out
"must be a int"                             test_type_errors_in_the_analysis_file_...
a folder with [ ] in a glob                 test_folder_name_with_brackets_hints_to_escape
=========================================== ===============================================

Signal and kill tests wait on conditions (a file's ``n_done``, a process's state) with
generous time limits, never on fixed sleeps, so that a slow, loaded machine does not fail them.
"""

from __future__ import annotations

import errno
import os
import shutil
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

import dic
from dic.cli import main
from dic.images import synth
from dic.sequence import Results, set_write_hook

ROOT = Path(__file__).resolve().parent.parent
SHAPE = (120, 200)
N_FRAMES = 8
STEP = 8
posix_only = pytest.mark.skipif(sys.platform == "win32", reason="needs POSIX signals")


def _write_sequence(folder, n=N_FRAMES, shape=SHAPE):
    """Uniform stretch growing 0.4 % per image (analytic speckle, exactly known motion)."""
    folder.mkdir(parents=True, exist_ok=True)
    pattern = synth.make_speckle(shape, radius=2.5, seed=5, contrast=600)
    for k in range(n):
        e = 0.004 * k
        field = synth.homogeneous([[1 + e, 0.0], [0.0, 1.0]],
                                  centre=(shape[1] / 2, shape[0] / 2)) if k else None
        img = synth.render(pattern, shape, field, noise=0.5, seed=k)
        dic.images.io.write_image(folder / f"img{k:02d}.tif", img * 16, bits=16)
    return folder


@pytest.fixture(scope="module")
def frames(tmp_path_factory):
    return _write_sequence(tmp_path_factory.mktemp("faults") / "frames")


def _cmd(frames, out, *more):
    return ["run", str(frames), "--out", str(out), "--step", str(STEP), "-q", *more]


@pytest.fixture(scope="module")
def reference_run(frames, tmp_path_factory):
    """An undisturbed run: the file that every disturbed and resumed run must equal."""
    out = tmp_path_factory.mktemp("ref") / "run.h5"
    assert main(_cmd(frames, out, "--strain-window", "5")) == 0
    return out


def _one_error_line(err):
    """stderr of a failed command: exactly one line 'dic: error: ...', no traceback."""
    assert "Traceback" not in err
    lines = [ln for ln in err.strip().splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("dic: error: "), err
    return lines[0]


def _n_done(path):
    with h5py.File(path, "r", locking=False) as f:
        return int(f["n_done"][()])


FRAME_DATA = ("u", "v", "grad", "zncc", "reason", "iterations", "std_u", "std_v",
              "reference", "reference_update")


def _assert_same_frames(a_path, b_path, n=None):
    """Frames 0..n-1 of two files equal number for number (NaN == NaN), strain included."""
    with h5py.File(a_path, "r", locking=False) as a, h5py.File(b_path, "r",
                                                                 locking=False) as b:
        n = int(a["n_done"][()]) if n is None else n
        assert int(b["n_done"][()]) >= n
        for name in FRAME_DATA:
            np.testing.assert_array_equal(a["frames"][name][:n], b["frames"][name][:n],
                                          err_msg=name)
        for key in a["strain"]:
            if key in b["strain"]:
                ga, gb = a["strain"][key], b["strain"][key]
                wa, wb = ga["written"][:n], gb["written"][:n]
                both = (wa == 1) & (wb == 1)
                for c in ("xx", "yy", "xy"):
                    np.testing.assert_array_equal(ga[c][:n][both], gb[c][:n][both],
                                                  err_msg=f"strain {key} {c}")


class _FullDiskAt:
    """A writer hook: OSError(ENOSPC) at one point of one frame (common practice, no source:
    errno ENOSPC is how POSIX write(2) reports a full disk)."""

    def __init__(self, point, frame):
        self.point, self.frame, self.hits = point, frame, 0

    def __call__(self, point, k):
        if point == self.point and (self.frame is None or k >= self.frame):
            self.hits += 1
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))


@pytest.fixture
def full_disk():
    installed = []

    def install(point, frame):
        hook = _FullDiskAt(point, frame)
        installed.append(set_write_hook(hook))
        return hook

    yield install
    set_write_hook(None)


# --------------------------------------------------------------------------------------------
# D1: a full disk
# --------------------------------------------------------------------------------------------
@pytest.mark.parametrize("point", ["reserve", "data", "commit"])
def test_d1_full_disk_mid_run_keeps_only_whole_frames_and_resumes(point, frames, reference_run,
                                                                 tmp_path, capsys, full_disk):
    out = tmp_path / "r.h5"
    hook = full_disk(point, 3)
    assert main(_cmd(frames, out, "--strain-window", "5")) == 2
    assert hook.hits == 1
    line = _one_error_line(capsys.readouterr().err)
    assert "No space left on device" in line and "r.h5" in line and "frame 3" in line
    assert _n_done(out) == 3                       # only the frames written and flushed
    _assert_same_frames(reference_run, out, n=3)
    set_write_hook(None)                           # space freed: the same command finishes
    assert main(_cmd(frames, out, "--strain-window", "5")) == 0
    assert _n_done(out) == N_FRAMES
    _assert_same_frames(reference_run, out)


def test_d1_full_disk_with_workers(frames, reference_run, tmp_path, capsys, full_disk):
    out = tmp_path / "r.h5"
    cmd = _cmd(frames, out, "--strain-window", "5", "--workers", "2")
    full_disk("reserve", 4)
    assert main(cmd) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "No space left on device" in line and "frames 0..3 are saved" in line
    assert _n_done(out) == 4
    _assert_same_frames(reference_run, out, n=4)
    set_write_hook(None)
    assert main(cmd) == 0
    _assert_same_frames(reference_run, out)


def test_d1_full_disk_at_creation_is_one_line(frames, tmp_path, capsys, full_disk):
    full_disk("create", None)
    out = tmp_path / "r.h5"
    assert main(_cmd(frames, out)) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "No space left on device" in line and "r.h5" in line
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == []    # no temporary left behind


def test_d1_full_disk_while_storing_strain_resumes_the_strain(frames, reference_run, tmp_path,
                                                             capsys, full_disk):
    out = tmp_path / "r.h5"
    full_disk("strain", 2)
    assert main(_cmd(frames, out, "--strain-window", "5")) == 2
    _one_error_line(capsys.readouterr().err)
    n = _n_done(out)
    assert n == 3                                  # frame 2 is whole, its strain is not
    with h5py.File(out, "r", locking=False) as f:
        assert list(f["strain/green-lagrange_w5/written"][:n]) == [1, 1, 0]
    set_write_hook(None)
    assert main(_cmd(frames, out, "--strain-window", "5")) == 0
    with h5py.File(out, "r", locking=False) as f:
        assert f["strain/green-lagrange_w5/written"][:].all()
    _assert_same_frames(reference_run, out)


def _can_mount_tmpfs(where):
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or shutil.which("mount") is None:
        return False
    where.mkdir(exist_ok=True)
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(where)],
                       capture_output=True)
    if r.returncode:
        return False
    subprocess.run(["umount", str(where)], capture_output=True)
    return True


def test_d1_real_full_tmpfs(frames, reference_run, tmp_path, capsys):
    """A real small disk (tmpfs) fills in the middle of a run (runs as root, e.g. in CI)."""
    disk = tmp_path / "disk"
    if not _can_mount_tmpfs(disk):
        pytest.skip("needs root and mount -t tmpfs")
    with h5py.File(reference_run, "r") as f:
        per_frame = sum(f["frames"][n][0].nbytes for n in f["frames"]) + \
            sum(f["strain"][k][c][0].nbytes for k in f["strain"] for c in ("xx", "yy", "xy"))
    size = 4 << 20
    subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs", str(disk)],
                   check=True)
    try:
        # a disk full from the start: the file cannot even be made (one line, no file left)
        with open(disk / "filler", "wb") as fh:
            try:
                fh.write(b"\1" * size)
            except OSError:
                pass
        out = disk / "r.h5"
        assert main(_cmd(frames, out, "--strain-window", "5")) == 2
        line = _one_error_line(capsys.readouterr().err)
        assert "No space left on device" in line and not out.exists()
        (disk / "filler").unlink()
        # leave room for the file's structure and about half of the frames
        free = 96 * 1024 + (N_FRAMES // 2) * per_frame
        with open(disk / "filler", "wb") as fh:
            fh.write(b"\1" * (size - free))
        assert main(_cmd(frames, out, "--strain-window", "5")) == 2
        line = _one_error_line(capsys.readouterr().err)
        assert "No space left on device" in line
        n = _n_done(out)
        assert main(["info", str(out)]) == 0      # info counts only the whole frames
        assert f"{n} of {N_FRAMES}" in capsys.readouterr().out
        assert n < N_FRAMES
        _assert_same_frames(reference_run, out, n=n)
        # the file moved to a disk with space: the same command finishes it
        moved = tmp_path / "moved.h5"
        shutil.copyfile(out, moved)
        assert main(_cmd(frames, moved, "--strain-window", "5")) == 0
        _assert_same_frames(reference_run, moved)
        # space freed where it was: the same command finishes there too
        (disk / "filler").unlink()
        assert main(_cmd(frames, out, "--strain-window", "5")) == 0
        _assert_same_frames(reference_run, out)
    finally:
        subprocess.run(["umount", "-l", str(disk)], capture_output=True)


# --------------------------------------------------------------------------------------------
# D4: a stop between a frame and its strain
# --------------------------------------------------------------------------------------------
def test_d4_resume_fills_strain_missing_after_a_stop(frames, reference_run, tmp_path, capsys,
                                                     monkeypatch):
    from dic.sequence import ResultsWriter

    out = tmp_path / "r.h5"
    real = ResultsWriter.write_strain_frame

    def killed_after_commit(self, k, strain):      # the run stops right after frame 4 commits
        if k == 4:
            raise KeyboardInterrupt
        return real(self, k, strain)

    monkeypatch.setattr(ResultsWriter, "write_strain_frame", killed_after_commit)
    assert main(_cmd(frames, out, "--strain-window", "5")) == 130
    capsys.readouterr()
    monkeypatch.setattr(ResultsWriter, "write_strain_frame", real)
    with h5py.File(out, "r", locking=False) as f:
        assert int(f["n_done"][()]) == 5 and f["strain/green-lagrange_w5/written"][4] == 0
    assert main(_cmd(frames, out, "--strain-window", "5")) == 0
    with h5py.File(out, "r", locking=False) as f:
        assert f["strain/green-lagrange_w5/written"][:].all()
    _assert_same_frames(reference_run, out)
    assert main(["info", str(out)]) == 0
    assert f"{N_FRAMES} of {N_FRAMES}" in capsys.readouterr().out


# --------------------------------------------------------------------------------------------
# D2: a damaged image copied again
# --------------------------------------------------------------------------------------------
def test_d2_repaired_image_resumes(frames, reference_run, tmp_path, capsys):
    own = tmp_path / "frames"
    shutil.copytree(frames, own)
    good = (own / "img05.tif").read_bytes()
    (own / "img05.tif").write_bytes(good[: len(good) // 2])      # a copy cut short
    out = tmp_path / "r.h5"
    assert main(_cmd(own, out, "--strain-window", "5")) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "img05.tif" in line
    n = _n_done(out)
    assert 0 < n <= 5
    (own / "img05.tif").write_bytes(good)                          # copied again, as advised
    assert main(_cmd(own, out, "--strain-window", "5")) == 0, capsys.readouterr().err
    _assert_same_frames(reference_run, out)
    # an image of a completed frame that changes is still refused, naming it
    (own / "img01.tif").write_bytes((own / "img02.tif").read_bytes())
    assert main(_cmd(own, out, "--strain-window", "5")) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "img01.tif" in line and "SHA-256" in line


# --------------------------------------------------------------------------------------------
# D6: settings checked against each other before anything is written
# --------------------------------------------------------------------------------------------
def test_d6_strain_window_larger_than_grid_is_refused_before_writing(frames, tmp_path,
                                                                     capsys):
    out = tmp_path / "r.h5"
    # step 40 on 120 x 200 px leaves a grid about 2 x 4 points: a 9 x 9 window cannot fit
    assert main(["run", str(frames), "--out", str(out), "--step", "40", "--strain-window", "9",
                 "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "--strain-window" in line and "grid" in line
    assert not out.exists()
    assert main(_cmd(frames, out, "--strain-window", "5")) == 0   # corrected: runs


# --------------------------------------------------------------------------------------------
# D5: report and export use the stored strain window
# --------------------------------------------------------------------------------------------
def test_d5_export_uses_the_stored_strain_window(reference_run, tmp_path, capsys):
    import json

    out = tmp_path / "exp"
    assert main(["export", str(reference_run), "--format", "npz", "--out", str(out)]) == 0
    capsys.readouterr()
    with np.load(out / "results.npz") as z:
        assert json.loads(str(z["strain_settings"]))["window"] == 5
        exx = z["strain_xx"]
    with h5py.File(reference_run, "r") as f:       # the strain stored by the run (window 5)
        stored = f["strain/green-lagrange_w5/xx"][:]
    np.testing.assert_allclose(exx, stored, rtol=0, atol=1e-12)
    # an explicit --window still wins
    assert main(["export", str(reference_run), "--format", "npz", "--out", str(tmp_path / "e3"),
                 "--window", "3"]) == 0
    with np.load(tmp_path / "e3" / "results.npz") as z:
        assert json.loads(str(z["strain_settings"]))["window"] == 3


@pytest.mark.parametrize("command", ["report", "export"])
def test_foreign_file_names_the_input_not_out(command, tmp_path, capsys):
    foreign = tmp_path / "other.h5"
    with h5py.File(foreign, "w") as f:
        f["x"] = np.arange(3)
    assert main([command, str(foreign), "--out", str(tmp_path / "o")]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "--out" not in line.split("other.h5")[0] and "other.h5" in line
    assert line.startswith("dic: error: RESULTS:")


# --------------------------------------------------------------------------------------------
# D3 and signals: real processes, stopped; every wait is on a condition, with generous limits
# --------------------------------------------------------------------------------------------
def _spawn(args):
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen([sys.executable, "-m", "dic", *args], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for(condition, what, timeout=180.0):
    import time

    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.01)
    pytest.fail(f"waited {timeout:.0f} s for {what}")


def _n_done_or_0(path):
    try:
        return _n_done(path)
    except (OSError, KeyError):
        return 0


def _alive(pid):
    """True while process ``pid`` exists and is not a zombie (Linux /proc)."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


def _children(pid):
    try:
        with open(f"/proc/{pid}/task/{pid}/children") as fh:
            return [int(c) for c in fh.read().split()]
    except OSError:
        return []


def _slow_command(frames, out, *more):
    # 2 px step, one image per block: frames take long enough to be caught half-way
    return ["run", str(frames), "--out", str(out), "--step", "2", "--block", "1", "-q", *more]


@posix_only
@pytest.mark.parametrize("sig", ["SIGTERM", "SIGHUP"])
def test_sigterm_and_sighup_stop_like_ctrl_c(sig, frames, tmp_path):
    import signal

    out = tmp_path / "r.h5"
    proc = _spawn(_slow_command(frames, out))
    try:
        _wait_for(lambda: _n_done_or_0(out) >= 1 or proc.poll() is not None,
                  "the first frame")
        if proc.poll() is not None:
            pytest.fail(f"the run ended early: {proc.communicate()}")
        proc.send_signal(getattr(signal, sig))
        _, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            proc.kill()
    # like Ctrl-C (common practice, no source: 130 = 128 + SIGINT is the shell's code for an
    # interrupted command, and this tool's documented exit code for a stopped run)
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith(f"dic: stopped by {sig}; "), err
    n = _n_done(out)
    assert f"{n} of {N_FRAMES} frames are saved" in lines[0]


@posix_only
@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_d3_workers_exit_when_the_parent_is_killed(frames, tmp_path):
    import signal

    out = tmp_path / "r.h5"
    # blocks of 4 images: the rest of each block goes to the workers
    proc = _spawn(["run", str(frames), "--out", str(out), "--step", "2", "--block", "4", "-q",
                   "--workers", "2"])
    try:
        # the pool is up: two workers (and the resource tracker) are children of the run
        _wait_for(lambda: len(_children(proc.pid)) >= 3 or proc.poll() is not None,
                  "the workers")
        if proc.poll() is not None:
            pytest.fail(f"the run ended early: {proc.communicate()}")
        family = _children(proc.pid)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        _wait_for(lambda: not any(_alive(p) for p in family), "the workers to exit",
                  timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
        for p in _children(proc.pid):
            try:
                os.kill(p, signal.SIGKILL)
            except OSError:
                pass


# --------------------------------------------------------------------------------------------
# D9: analysis files that are not plain UTF-8
# --------------------------------------------------------------------------------------------
_TOML = 'out = "r.h5"\n# réglages\n[matching]\nstep = 8\n'


def test_d9_byte_order_mark_is_accepted(tmp_path):
    from dic.workflow.config import load_analysis

    # TOML 1.0.0 specification: a TOML file is UTF-8; a byte-order mark is an editor's habit
    p = tmp_path / "a.toml"
    p.write_bytes(b"\xef\xbb\xbf" + _TOML.encode("utf-8"))
    assert load_analysis(p)["step"] == 8


@pytest.mark.parametrize("encoding, named", [("utf-16", "UTF-16"), ("latin-1", "Latin-1")])
def test_d9_other_encodings_name_the_file_and_the_encoding(encoding, named, frames, tmp_path,
                                                          capsys):
    p = tmp_path / "a.toml"
    p.write_bytes(_TOML.encode(encoding))
    assert main(["run", str(frames), "--config", str(p), "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "a.toml" in line and named in line and "save it as UTF-8" in line


# --------------------------------------------------------------------------------------------
# D11: a read-only location
# --------------------------------------------------------------------------------------------
def test_d11_read_only_location_says_not_writable(frames, tmp_path, capsys, monkeypatch):
    real = h5py.File

    def read_only(name, mode="r", *a, **kw):       # as HDF5 reports EROFS (h5py >= 3)
        if mode != "r":
            raise OSError(errno.EROFS, "Unable to synchronously create file: "
                          + os.strerror(errno.EROFS))
        return real(name, mode, *a, **kw)

    monkeypatch.setattr(h5py, "File", read_only)
    out = tmp_path / "r.h5"
    assert main(_cmd(frames, out)) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "not writable" in line and "r.h5" in line and "HDF5 results file" not in line


# --------------------------------------------------------------------------------------------
# D7, D12 and a folder name with [ ]: which images a run reads
# --------------------------------------------------------------------------------------------
def test_d7_own_maps_in_the_image_folder_are_not_read_as_images(frames, tmp_path, capsys):
    own = tmp_path / "frames"
    shutil.copytree(frames, own)
    for _ in range(2):                              # the second run must not trip over the maps
        assert main(["run", str(own), "--out", str(own), "--step", str(STEP), "-q",
                     "--frames", "0:4"]) == 0, capsys.readouterr().err
        assert list(own.glob("strain_*.png")) and list(own.glob("displacements_*.csv"))
    with Results.open(own / "results.h5") as r:
        assert not any(Path(n).name.startswith(("displacements_", "strain_"))
                       for n in r.image_names)


def test_d12_files_out_of_natural_order_warn(frames, tmp_path, capsys):
    files = sorted((str(p) for p in frames.glob("img*.tif")),
                   key=lambda s: s.replace("img0", "img"))  # img0, img1, img10-like shuffles
    shell_order = [files[0], files[5], files[1], files[2]]   # not natural order
    assert main(["run", *shell_order, "--out", str(tmp_path / "r.h5"), "--step",
                 str(STEP)]) == 0
    err = capsys.readouterr().err
    assert "not in natural order" in err and "quote" in err
    assert main(["run", *sorted(shell_order), "--out", str(tmp_path / "s.h5"), "--step",
                 str(STEP)]) == 0
    assert "natural order" not in capsys.readouterr().err


def test_folder_name_with_brackets_hints_to_escape(frames, tmp_path, capsys):
    odd = tmp_path / "run [3]"
    shutil.copytree(frames, odd)
    assert main(["run", str(odd / "*.tif"), "--out", str(tmp_path / "r.h5"), "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "escape" in line and "[[]3]" in line       # glob.escape (Python docs, glob module)


# --------------------------------------------------------------------------------------------
# D13: dic noise on moving images or the same image twice
# --------------------------------------------------------------------------------------------
def test_d13_noise_refuses_the_same_image_twice(frames, capsys):
    img = str(frames / "img00.tif")
    assert main(["noise", img, img]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "same image twice" in line


def test_d13_noise_warns_on_moving_images(frames, tmp_path, capsys):
    # static: one pattern, new camera noise per shot -> no warning
    pattern = synth.make_speckle(SHAPE, radius=2.5, seed=5, contrast=600)
    static = []
    for k in range(3):
        p = tmp_path / f"still{k}.tif"
        dic.images.io.write_image(p, synth.render(pattern, SHAPE, None, noise=0.5, seed=20 + k)
                                  * 16, bits=16)
        static.append(str(p))
    assert main(["noise", *static]) == 0
    out = capsys.readouterr()
    assert "warning" not in out.out + out.err
    # stretched by 2.8 % between the images: motion, not noise
    assert main(["noise", str(frames / "img00.tif"), str(frames / "img07.tif")]) == 0
    out = capsys.readouterr()
    assert "move or deform" in out.err and "times the predicted noise" in out.err


# --------------------------------------------------------------------------------------------
# cosmetic: what a damaged image and a wrong type in the analysis file print
# --------------------------------------------------------------------------------------------
def test_damaged_png_prints_one_line_with_the_path_once(frames, tmp_path, capfd):
    own = tmp_path / "png"
    own.mkdir()
    for k in range(4):
        img = dic.images.io.read_image(frames / f"img{k:02d}.tif")
        dic.images.io.write_image(own / f"img{k:02d}.png", img, bits=16)
    data = (own / "img02.png").read_bytes()
    (own / "img02.png").write_bytes(data[: len(data) // 2])
    assert main(["run", str(own), "--out", str(tmp_path / "r.h5"), "--step", str(STEP),
                 "-q"]) == 2
    err = capfd.readouterr().err                   # descriptor 2 too: no libpng line
    line = _one_error_line(err)
    assert "libpng" not in err
    assert line.count("img02.png") == 1


def test_type_errors_in_the_analysis_file_read_as_plain_words(frames, tmp_path, capsys):
    p = tmp_path / "a.toml"
    p.write_text('[matching]\nstep = "8"\n', encoding="utf-8")
    assert main(["run", str(frames), "--config", str(p), "--out", str(tmp_path / "r.h5"),
                 "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "must be a whole number" in line and "a int" not in line


# --------------------------------------------------------------------------------------------
# D10: the grid is laid out where subsets fit
# --------------------------------------------------------------------------------------------
def test_d10_no_grid_line_is_always_outside_the_image(frames):
    from dic.field import Reason
    from dic.images.io import read_image

    ref, cur = read_image(frames / "img00.tif"), read_image(frames / "img01.tif")
    f = dic.correlate(ref, cur, subset=21, step=20)
    # common practice, no source: a point is measurable only if its subset (plus the
    # interpolation margin) lies inside the image; on a static-edge stretch of 0.4 % none
    # of the laid-out points should be outside the image
    assert not np.any(f.reason == Reason.OUTSIDE_IMAGE)
    assert f.n_valid > 0.9 * f.n_points
    half = 21 // 2
    assert f.x.min() >= half and f.x.max() <= ref.shape[1] - 1 - half
    assert f.y.min() >= half and f.y.max() <= ref.shape[0] - 1 - half


def test_d10_too_large_step_advises_a_smaller_step(frames, tmp_path, capsys):
    assert main(["run", str(frames), "--out", str(tmp_path / "r.h5"), "--step", "115",
                 "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "smaller step" in line and "smaller subset" not in line
    assert not (tmp_path / "r.h5").exists()


def test_d6_other_strain_window_on_an_existing_file_names_the_option(reference_run, frames,
                                                                    tmp_path, capsys):
    out = tmp_path / "r.h5"
    shutil.copyfile(reference_run, out)
    assert main(_cmd(frames, out, "--strain-window", "7")) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "--strain-window" in line and "--overwrite" in line
