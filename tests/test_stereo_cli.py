"""``dic calibrate`` and ``dic.calibrate`` on rendered chessboard photographs written to files.

Oracle: the cameras the targets were rendered with (tests/stereo_rig.py; the renderer itself is
checked against OpenCV's calibration in test_stereo_calibration.py).
"""

from __future__ import annotations

import re

import numpy as np
import pytest

cv2 = pytest.importorskip("cv2")

import dic  # noqa: E402
from dic.cli import main  # noqa: E402
from dic.stereo import load_calibration  # noqa: E402
from stereo_rig import BASELINE, KL, KR, target_views  # noqa: E402


@pytest.fixture(scope="module")
def target_files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("targets")
    _, L, R = target_views(10, seed=3)
    left, right = [], []
    for i, (a, b) in enumerate(zip(L, R)):
        for img, side, out in ((a, "left", left), (b, "right", right)):
            p = folder / f"{side}_{i:02d}.png"
            cv2.imwrite(str(p), np.clip(np.rint(img), 0, 255).astype(np.uint8))
            out.append(p)
    # one photograph where the target is cut off: it must be listed, not silently dropped
    blank = folder / "left_99.png"
    cv2.imwrite(str(blank), np.full((300, 400), 128, np.uint8))
    cv2.imwrite(str(folder / "right_99.png"), np.full((300, 400), 128, np.uint8))
    left.append(blank)
    right.append(folder / "right_99.png")
    return folder, left, right


def test_dic_calibrate_is_the_stereo_calibration():
    from dic.stereo import calibrate

    assert dic.calibrate is calibrate


def test_calibrate_command_two_cameras(target_files, tmp_path, capsys):
    folder, left, right = target_files
    out = tmp_path / "cams.toml"
    code = main(["calibrate", *map(str, left), "--right-images", *map(str, right),
                 "--inner-corners", "9x6", "--square", "10", "--out", str(out)])
    text = capsys.readouterr().out
    print(text)
    assert code == 0
    cal = load_calibration(out)
    # bars of the issue against the rendered cameras: focal within 0.2 %, baseline within 0.2 %
    for fit, K in zip(cal.cameras, (KL, KR)):
        assert abs(fit.matrix[0, 0] / K[0, 0] - 1) < 2e-3
        assert abs(fit.matrix[1, 1] / K[1, 1] - 1) < 2e-3
    assert abs(cal.baseline / BASELINE - 1) < 2e-3
    assert cal.rms <= 0.1
    # the verdict names the overall and per-photograph error, the baseline and the angle, and
    # lists the photograph without a target with the reason
    assert "reprojection error: 0.0" in text and "px RMS: good" in text
    assert re.search(r"baseline: (99\.9|100\.0)\d mm", text)
    assert "angle between the cameras" in text
    assert "left_99.png + right_99.png: left out (target not found" in text
    assert "left_00.png + right_00.png:" in text
    # angle of the rig: right camera turned by atan(100/300) (tests/stereo_rig.py)
    assert abs(cal.angle_deg - np.degrees(np.arctan2(100, 300))) < 0.1


def test_calibrate_command_one_camera_from_a_glob(target_files, tmp_path, capsys):
    folder, _, _ = target_files
    out = tmp_path / "cam.toml"
    code = main(["calibrate", str(folder / "left_*.png"), "--inner-corners", "9,6",
                 "--square", "10", "--out", str(out)])
    text = capsys.readouterr().out
    assert code == 0
    cal = load_calibration(out)
    assert not cal.stereo and cal.rms <= 0.1
    assert abs(cal.cameras[0].matrix[0, 0] / KL[0, 0] - 1) < 2e-3
    assert "one camera" in text and "baseline" not in text
    assert [r.name for r in cal.rejected] == ["left_99.png"]


@pytest.mark.parametrize("argv, words", [
    (["--inner-corners", "9", "--square", "10"], "COLSxROWS"),
    (["--inner-corners", "9x6", "--square", "-1"], "positive"),
    (["--inner-corners", "9x6", "--square", "10", "--right-images", "nothing_here_*.png"],
     "nothing_here"),
])
def test_calibrate_command_bad_input(target_files, tmp_path, capsys, argv, words):
    folder, left, _ = target_files
    code = main(["calibrate", str(left[0]), *argv, "--out", str(tmp_path / "c.toml")])
    err = capsys.readouterr().err
    # bad input: one line naming the problem, exit code 2 (the project's CLI rule)
    assert code == 2
    assert err.startswith("dic: error:") and err.count("\n") == 1 and words in err


def test_calibrate_command_too_few_views(target_files, tmp_path, capsys):
    _, left, _ = target_files
    code = main(["calibrate", *map(str, left[:2]), "--inner-corners", "9x6", "--square", "10",
                 "--out", str(tmp_path / "c.toml")])
    err = capsys.readouterr().err
    assert code == 2 and "usable calibration views" in err and err.count("\n") == 1
    code = main(["calibrate", *map(str, left[:4]), "--inner-corners", "9x6", "--square", "10",
                 "--out", str(tmp_path / "c.json")])
    assert code == 2 and ".toml" in capsys.readouterr().err


def test_calibrate_command_locates_the_specimen_plane(target_files, tmp_path, capsys):
    # any target photograph can stand for the specimen plane: its pose is known from the rig
    # (tests/stereo_rig.py), so the plane's distance along the camera axis is checked
    folder, left, _ = target_files
    poses, _, _ = target_views(10, seed=3)
    out = tmp_path / "cam.toml"
    code = main(["calibrate", *map(str, left[:10]), "--inner-corners", "9x6", "--square", "10",
                 "--plane-image", str(left[4]), "--out", str(out)])
    text = capsys.readouterr().out
    assert code == 0 and "specimen plane:" in text and "mm/px" in text
    cal = load_calibration(out)
    R, t = cal.plane
    Rt, tt = poses[4]
    # the target's pose by cv2.solvePnP against the rendered pose (common practice)
    assert np.degrees(np.arccos(np.clip(abs(R[:, 2] @ Rt[:, 2]), -1, 1))) < 0.2
    assert np.linalg.norm(t - tt) < 1.0
    code = main(["calibrate", *map(str, left[:10]), "--inner-corners", "9x6", "--square", "10",
                 "--plane-image", str(left[-1]), "--out", str(tmp_path / "c2.toml")])
    err = capsys.readouterr().err
    assert code == 2 and "plane image" in err and err.count("\n") == 1


@pytest.mark.parametrize("argv, words", [
    (["--max-view-angle", "100", "--right-images", "R", "--calibration", "c.toml"],
     "between 0 and 90"),
    (["--max-view-angle", "50"], "two cameras"),
])
def test_run_max_view_angle_bad_input(target_files, tmp_path, capsys, argv, words):
    folder, left, _ = target_files
    code = main(["run", str(left[0]), str(left[1]), *argv, "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    # bad input: one line naming the option and the fix, exit code 2 (the project's CLI rule)
    assert code == 2
    assert err.startswith("dic: error:") and err.count("\n") == 1 and words in err
    assert "--max-view-angle" in err


def test_analysis_file_max_view_angle(target_files, tmp_path, capsys):
    # the [stereo] table's max_view_angle is read, checked and named in its one-line error
    folder, left, _ = target_files
    conf = tmp_path / "a.toml"
    conf.write_text(f'images = ["{left[0].as_posix()}", "{left[1].as_posix()}"]\n'
                    f'[stereo]\nmax_view_angle = 120\n')
    code = main(["run", "--config", str(conf), "--out", str(tmp_path / "o")])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1
    assert "[stereo] max_view_angle" in err and "two cameras" in err
