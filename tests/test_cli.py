"""The ``dic`` command line, run in-process through ``main([...])``.

The oracle for the numbers is the exactly known motion of synthetic images: a speckle pattern
rendered analytically (dic.images.synth, no interpolation) and a copy translated by (1.5, -0.75) px,
both quantised to 8-bit PNG.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import dic
from dic.cli import main
from dic.images.io import image_info, read_image, write_image
from dic.sequence import Results

SHIFT = (1.5, -0.75)
SIZE = (200, 200)
# Tolerance on the measured translation. 8-bit rounding is uniform noise of 1/sqrt(12) = 0.29
# grey levels; by Pan et al., Opt. Express 16 (2008) 7037 (SSSIG, from memory) that gives about
# 1e-3 px random error for a 21 px subset of this high-contrast pattern, and quintic B-spline
# interpolation bias is a few 1e-3 px at most (Schreier, Braasch & Sutton, Opt. Eng. 39 (2000)
# 2915, from memory). 0.02 px bounds the largest of some 300 points with a wide margin (about
# 0.01 px seen).
TOL_PX = 0.02
# A pure translation has zero displacement gradient. Over a 21 px subset an error of 0.02 px at the
# edge (10 px out) is a gradient of 0.002; 0.005 leaves margin (about 0.0012 seen).
TOL_GRAD = 0.005


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """A folder with ``img_9.png`` (reference) and ``img_10.png`` (translated by SHIFT)."""
    from dic.images import synth

    folder = tmp_path_factory.mktemp("pair")
    pattern = synth.make_speckle(SIZE, radius=2.5, seed=7)
    ref = synth.render(pattern, SIZE, bits=8)
    moved = synth.render(pattern, SIZE, synth.translation(*SHIFT), bits=8)
    # names whose natural order (9 before 10) differs from their plain text order
    write_image(folder / "img_9.png", ref)
    write_image(folder / "img_10.png", moved)
    return folder


def _read_csv(path):
    # the tables hold a header and numbers only: default options read them
    return np.genfromtxt(path, delimiter=",", names=True)


#: the columns of a run's per-image table without a scale: those of dic export's frame tables
RUN_COLUMNS = ("x_px", "y_px", "u_px", "v_px", "dudx", "dudy", "dvdx", "dvdy", "strain_xx",
               "strain_yy", "strain_xy", "zncc", "reason")


def _one_error_line(err):
    """The stderr of a failed run: exactly one line 'dic: error: ...', no traceback."""
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("dic: error: ")
    return lines[0]


# --------------------------------------------------------------------------------------------
# successful runs
# --------------------------------------------------------------------------------------------
def test_run_folder_measures_known_translation(pair, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["run", str(pair), "--out", str(out)]) == 0
    captured = capsys.readouterr()

    table = _read_csv(out / "displacements_img_10.csv")
    assert table.dtype.names == RUN_COLUMNS
    ok = table["reason"] == 0
    # 200 px image, 21 px subsets on a 10 px grid: all but the outer ring of points fit inside
    # (common practice, no source); demand a clear majority measured
    assert ok.mean() > 0.7
    # the oracle: the exactly known translation of the synthetic image
    np.testing.assert_allclose(table["u_px"][ok], SHIFT[0], rtol=0, atol=TOL_PX)
    np.testing.assert_allclose(table["v_px"][ok], SHIFT[1], rtol=0, atol=TOL_PX)
    for name in ("dudx", "dudy", "dvdx", "dvdy"):
        np.testing.assert_allclose(table[name][ok], 0.0, rtol=0, atol=TOL_GRAD)
    assert np.all((table["zncc"][ok] > 0.9) & (table["zncc"][ok] <= 1.0))
    # unmeasured points carry NaN, never a number
    for name in RUN_COLUMNS[2:]:
        if name == "reason":
            continue
        assert np.all(np.isnan(table[name][~ok]))
    # grid in reference pixels at the requested step (10 px default)
    assert set(np.diff(np.unique(table["x_px"]))) == {10.0}

    png = out / "strain_img_10.png"
    assert image_info(png)["format"] == "png"
    img = read_image(png)
    assert img.ndim == 2 and min(img.shape) > 100 and np.ptp(img) > 0

    # how many frames were tracked and where, the last frame's summary, where the exports are
    lines = captured.out.strip().splitlines()
    assert len(lines) == 4, lines
    assert lines[0].startswith("tracked 2 frame(s)") and str(out / "results.h5") in lines[0]
    # the kernels' compile (or cache load) time is reported apart from the frame rate
    assert re.match(r"numerical kernels compiled or loaded in [\d.]+ s", lines[1])
    assert "img_10.png" in lines[2] and "measurable points measured" in lines[2]
    assert str(out) in lines[3]
    # the results file holds both frames, the reference image first (natural order)
    with Results.open(out / "results.h5") as r:
        assert len(r) == 2 and Path(r.image_names[0]).name == "img_9.png"
        np.testing.assert_array_equal(r.field(1).u.ravel(), table["u_px"])
    # no table or map of the reference image against itself
    assert not (out / "displacements_img_9.csv").exists()


def test_glob_pattern_is_sorted_naturally(pair, tmp_path, capsys):
    # by plain text order img_10 would come first and become the reference, giving -SHIFT
    out = tmp_path / "out"
    assert main(["run", str(pair / "img_*.png"), "--out", str(out), "--quiet"]) == 0
    assert capsys.readouterr().out == ""  # --quiet prints nothing on success
    table = _read_csv(out / "displacements_img_10.csv")
    ok = table["reason"] == 0
    np.testing.assert_allclose(table["u_px"][ok], SHIFT[0], rtol=0, atol=TOL_PX)


def test_reference_option_reverses_the_motion(pair, tmp_path):
    # with the moved image as reference, the other one is displaced by exactly -SHIFT
    out = tmp_path / "out"
    files = [str(pair / "img_9.png"), str(pair / "img_10.png")]
    assert main(["run", *files, "--out", str(out), "--reference", "1", "-q"]) == 0
    table = _read_csv(out / "displacements_img_9.csv")
    ok = table["reason"] == 0
    assert ok.mean() > 0.7
    np.testing.assert_allclose(table["u_px"][ok], -SHIFT[0], rtol=0, atol=TOL_PX)
    np.testing.assert_allclose(table["v_px"][ok], -SHIFT[1], rtol=0, atol=TOL_PX)


def test_roi_and_options_reach_the_analysis(pair, tmp_path):
    out = tmp_path / "out"
    rc = main(["run", str(pair), "--out", str(out), "--roi", "40,40,159,159", "--subset", "25",
               "--step", "5", "--shape-function", "quadratic", "--interpolation", "cubic",
               "--min-zncc", "0.95", "--scale", "0.05", "-q"])
    assert rc == 0
    table = _read_csv(out / "displacements_img_10.csv")
    ok = table["reason"] == 0
    # every measured point's 25 px subset lies inside the rectangle 40..159 (inclusive)
    assert table["x_px"][ok].min() >= 40 + 12 and table["x_px"][ok].max() <= 159 - 12
    assert table["y_px"][ok].min() >= 40 + 12 and table["y_px"][ok].max() <= 159 - 12
    assert set(np.diff(np.unique(table["x_px"]))) == {5.0}
    np.testing.assert_allclose(table["u_px"][ok], SHIFT[0], rtol=0, atol=TOL_PX)
    about = json.loads((out / "displacements_img_10.json").read_text())
    st = about["settings"]
    assert (st["subset"], st["step"], st["shape_function"], st["interpolation"],
            st["min_zncc"]) == (25, 5, "quadratic", "cubic", 0.95)
    assert about["reference_image"] == "img_9.png" and about["scale_mm_per_px"] == 0.05
    with Results.open(out / "results.h5") as r:
        assert r.scale == 0.05


def test_help_and_version_exit_zero(capsys):
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"dic {dic.__version__}"
    assert main(["--help"]) == 0
    assert "run" in capsys.readouterr().out
    assert main(["run", "--help"]) == 0
    text = capsys.readouterr().out
    for option in ("--out", "--config", "--reference", "--frames", "--subset", "--step",
                   "--roi", "--roi-mask", "--shape-function", "--interpolation", "--min-zncc",
                   "--max-sigma", "--search", "--block", "--scale", "--scale-line",
                   "--strain-window", "--strain-measure", "--workers", "--cluster", "--overwrite", "--quiet",
                   "--verbose"):
        assert option in text
    assert main(["info", "--help"]) == 0
    assert "RESULTS" in capsys.readouterr().out


def test_python_dash_m_version():
    root = Path(__file__).resolve().parent.parent
    env = dict(os.environ, PYTHONPATH=str(root) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    done = subprocess.run([sys.executable, "-m", "dic", "--version"], capture_output=True,
                          text=True, cwd=root, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == f"dic {dic.__version__}"


# --------------------------------------------------------------------------------------------
# bad input: exit code 2, one line, no traceback
# --------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def bad_files(tmp_path_factory, pair):
    folder = tmp_path_factory.mktemp("bad")
    write_image(folder / "small.png", np.full((120, 100), 128.0))
    (folder / "garbage.png").write_bytes(b"this is not an image at all" * 10)
    (folder / "empty").mkdir()
    return folder


def _bad_cases(pair, bad):
    ref, moved = str(pair / "img_9.png"), str(pair / "img_10.png")
    return {
        "missing file": [ref, str(bad / "no_such_image.png")],
        "size mismatch": [ref, str(bad / "small.png")],
        "even subset": [ref, moved, "--subset", "20"],
        "subset 5": [ref, moved, "--subset", "5"],
        "step 0": [ref, moved, "--step", "0"],
        "empty folder": [str(bad / "empty")],
        "garbage file": [ref, str(bad / "garbage.png")],
        "garbage reference": [str(bad / "garbage.png"), ref],
        "bad roi syntax": [ref, moved, "--roi", "1,2,3"],
        "roi not numbers": [ref, moved, "--roi", "a,b,c,d"],
        "roi outside image": [ref, moved, "--roi", "0,0,500,500"],
        "missing roi mask": [ref, moved, "--roi-mask", str(bad / "no_mask.png")],
        "one image only": [ref],
        "reference out of range": [ref, moved, "--reference", "2"],
        "subset not a number": [ref, moved, "--subset", "big"],
        "min zncc out of range": [ref, moved, "--min-zncc", "1.5"],
        "max sigma not positive": [ref, moved, "--max-sigma", "0"],
        "unknown option": [ref, moved, "--no-such-option"],
    }


CASES = ["missing file", "size mismatch", "even subset", "subset 5", "step 0", "empty folder",
         "garbage file", "garbage reference", "bad roi syntax", "roi not numbers",
         "roi outside image", "missing roi mask", "one image only", "reference out of range",
         "subset not a number", "min zncc out of range", "max sigma not positive",
         "unknown option"]


@pytest.mark.parametrize("case", CASES)
def test_bad_input_exits_2_with_one_line(case, pair, bad_files, tmp_path, capsys):
    args = _bad_cases(pair, bad_files)[case]
    out = tmp_path / "out"
    assert main(["run", *args, "--out", str(out)]) == 2
    captured = capsys.readouterr()
    _one_error_line(captured.err)
    assert captured.out == ""


def test_error_messages_name_the_problem(pair, bad_files, tmp_path, capsys):
    cases = _bad_cases(pair, bad_files)
    expect = {"missing file": "no_such_image.png", "size mismatch": "100 x 120",
              "even subset": "odd", "subset 5": "subset", "step 0": "step",
              "empty folder": "no image files", "garbage file": "garbage.png",
              "bad roi syntax": "X0,Y0,X1,Y1"}
    for case, word in expect.items():
        assert main(["run", *cases[case], "--out", str(tmp_path / "o")]) == 2
        line = _one_error_line(capsys.readouterr().err)
        assert word in line, (case, line)


def test_no_command_is_a_usage_error(capsys):
    assert main([]) == 2
    _one_error_line(capsys.readouterr().err)


def test_frames_before_an_error_are_kept(pair, tmp_path, capsys):
    # a PNG cut short: its header reads (the run starts) but its pixels do not decode
    folder = tmp_path / "seq"
    folder.mkdir()
    for name in ("a_1.png", "a_2.png"):
        (folder / name).write_bytes((pair / ("img_9.png" if name == "a_1.png"
                                             else "img_10.png")).read_bytes())
    data = (pair / "img_10.png").read_bytes()
    (folder / "a_3.png").write_bytes(data[: len(data) // 3])
    out = tmp_path / "out"
    assert main(["run", str(folder), "--out", str(out)]) == 2
    captured = capsys.readouterr()
    line = _one_error_line(captured.err)
    assert "a_3.png" in line
    assert captured.out == ""
    # the frames matched before a_3.png are in the results file, readable
    with Results.open(out / "results.h5") as r:
        assert len(r) == 2
        f = r.field(1)
        ok = f.valid
        np.testing.assert_allclose(f.u[ok], SHIFT[0], rtol=0, atol=TOL_PX)
    assert not (out / "displacements_a_3.csv").exists()


def test_other_settings_need_overwrite(pair, tmp_path, capsys):
    # the same output folder with another step: refused (one line naming the file, the setting
    # and the fix); with --overwrite the results file and every table are made again
    out = tmp_path / "out"
    assert main(["run", str(pair), "--out", str(out), "-q"]) == 0
    assert main(["run", str(pair), "--out", str(out), "--step", "20", "-q"]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "results.h5" in line and "step" in line and "--overwrite" in line
    assert main(["run", str(pair), "--out", str(out), "--step", "20", "--overwrite",
                 "-q"]) == 0
    table = _read_csv(out / "displacements_img_10.csv")
    assert set(np.diff(np.unique(table["x_px"]))) == {20.0}
