"""The TOML analysis file: values, relative paths, unknown keys and wrong types."""

import math

import pytest

from dic.workflow.config import load_analysis, scale_from_line


def _write(tmp_path, text):
    p = tmp_path / "analysis.toml"
    p.write_text(text)
    return p


def test_full_file(tmp_path):
    p = _write(tmp_path, """
images = "frames/*.png"
out = "run.h5"
reference = 1
frames = { start = 1, stop = 9, stride = 2 }
[matching]
subset = 25
step = 8
shape_function = "quadratic"
[roi]
rectangle = [10, 20, 300, 200]
[scale]
line = [0, 0, 300, 400]
length_mm = 10.0
[strain]
window = 7
measure = "hencky"
[run]
workers = 2
block = 4
""")
    a = load_analysis(p)
    assert a["images"] == str(tmp_path / "frames/*.png")
    assert a["out"] == str(tmp_path / "run.h5")
    assert a["frames"] == slice(1, 9, 2)
    assert (a["subset"], a["step"], a["shape_function"]) == (25, 8, "quadratic")
    assert a["roi"] == (10, 20, 300, 200)
    # 3-4-5 triangle: 500 px for 10 mm (common practice, no source)
    assert math.isclose(a["scale"], 10.0 / 500.0)
    assert a["strain"] == {"window": 7, "measure": "hencky"}
    assert (a["workers"], a["block"]) == (2, 4)


@pytest.mark.parametrize("text, match", [
    ('subsett = 21', "did you mean"),
    ('[matching]\nsubsett = 21', "matching.subsett.*did you mean 'subset'"),
    ('[matching]\nsubset = "21"', "subset must be a whole number"),
    ('[roi]\nrectangle = [1, 2, 3, 4]\nmask = "m.png"', "one of rectangle"),
    ('[scale]\nmm_per_px = -1', "positive"),
    ('[scale]\nline = [0, 0, 1, 1]', "length_mm"),
    ('images = ', "not a valid TOML"),
    ('[mathcing]\nsubset = 21', "did you mean"),
    ('[animation]\nformat = "avi"', "format = 'avi' is not known; use \"gif\" or \"mp4\""),
    ('[animation]\nfsp = 4', "animation.fsp.*did you mean 'fps'"),
])
def test_bad_files(tmp_path, text, match):
    with pytest.raises(ValueError, match=match):
        load_analysis(_write(tmp_path, text))


def test_missing_file(tmp_path):
    with pytest.raises(OSError, match="analysis file"):
        load_analysis(tmp_path / "nope.toml")


def test_scale_line_errors():
    with pytest.raises(ValueError):
        scale_from_line([1, 1, 1, 1], 5.0)
    with pytest.raises(ValueError):
        scale_from_line([1, 2, 3], 5.0)


def test_animation_and_map_scale_keys(tmp_path):
    a = load_analysis(_write(tmp_path, '[animation]\ncomponent = "yy"\nformat = "mp4"\nfps = 2\n'
                                       '[report]\nlimits = "per-frame"'))
    assert a["animation"] == {"component": "yy", "format": "mp4", "fps": 2}
    assert a["report"] == {"limits": "per-frame"}
