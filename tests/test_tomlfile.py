"""dic.tomlfile: the TOML text the package writes is read back unchanged by the standard
library's parser (``tomllib``, TOML v1.0.0), which is the oracle of every check here."""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

from dic.errors import InputError
from dic.tomlfile import toml_key, toml_text, toml_value
from dic.view.setup_data import toml_text as analysis_text


def test_values_of_every_kind_read_back_as_written():
    data = {
        "count": 3, "big": -(2 ** 62), "np_int": np.int64(-7), "np_uint": np.uint16(65535),
        "yes": True, "no": np.bool_(False),
        "tenth": 0.1, "small": 1e-05, "large": 1e16, "tiny": 5e-324, "minus_zero": -0.0,
        "np_float": np.float64(2.5), "f32": np.float32(0.1),
        "text": "plain", "empty": "", "unicode": "Prüfung µm ² — 応力 😀",
        "quotes": 'say "x" \\ back\\slash',
        "list": [1, 2, 3], "nested": [[1.0, 2.0], [3.0, 4.0]], "none_in": [],
        "matrix": np.arange(6, dtype=float).reshape(2, 3), "mixed": ["a", 1, 2.5, True],
        "point": {"x": 1, "y": -2.5, "name": "seed"},
        "section": {"window": 9, "measure": "green-lagrange", "frames": {"start": 0}},
        "camera": [{"size": [400, 300], "rms_px": 0.03}, {"size": [640, 480], "rms_px": 0.04}],
    }
    text = toml_text(data, "first line\nsecond line", inline=("point",))
    assert text.startswith("# first line\n# second line\n") and text.endswith("\n")
    got = tomllib.loads(text)
    want = {
        "count": 3, "big": -(2 ** 62), "np_int": -7, "np_uint": 65535, "yes": True, "no": False,
        "tenth": 0.1, "small": 1e-05, "large": 1e16, "tiny": 5e-324, "minus_zero": -0.0,
        "np_float": 2.5, "f32": float(np.float32(0.1)),
        "text": "plain", "empty": "", "unicode": "Prüfung µm ² — 応力 😀",
        "quotes": 'say "x" \\ back\\slash',
        "list": [1, 2, 3], "nested": [[1.0, 2.0], [3.0, 4.0]], "none_in": [],
        "matrix": [[0.0, 1.0, 2.0], [3.0, 4.0, 5.0]], "mixed": ["a", 1, 2.5, True],
        "point": {"x": 1, "y": -2.5, "name": "seed"},
        "section": {"window": 9, "measure": "green-lagrange", "frames": {"start": 0}},
        "camera": [{"size": [400, 300], "rms_px": 0.03}, {"size": [640, 480], "rms_px": 0.04}],
    }
    assert got == want
    # floats stay floats and integers integers (TOML v1.0.0 keeps the two types apart)
    assert type(got["tenth"]) is float and type(got["count"]) is int
    assert type(got["np_float"]) is float and type(got["no"]) is bool
    assert math.copysign(1.0, got["minus_zero"]) == -1.0
    # the layout: top-level values, then [section], then one [[camera]] per item
    assert "point = { x = 1, y = -2.5, name = \"seed\" }" in text
    assert text.index("[section]") < text.index("[[camera]]")
    assert text.count("[[camera]]") == 2


def test_every_character_of_a_string_survives():
    # control characters and DEL must be escaped in a basic string (TOML v1.0.0, "String")
    every = "".join(chr(c) for c in range(0x80)) + "\u0085\u00a0\u2028\ufeff\U0001f600"
    text = toml_text({"s": every})
    assert tomllib.loads(text)["s"] == every
    assert "\x7f" not in text and text.count("\n") == 1


def test_keys_that_are_not_bare_are_quoted():
    keys = ["plain_key-1", "two words", "dotted.key", "ä", "", 'q"uote', "7"]
    assert [toml_key(k) for k in keys[:1]] == ["plain_key-1"]
    data = {k: i for i, k in enumerate(keys)}
    data["table with space"] = {"inner key": 1, "x.y": {"deep key": 2}}
    data["rows"] = [{"a b": 1}]
    got = tomllib.loads(toml_text(data))
    assert got == {**{k: i for i, k in enumerate(keys)},
                   "table with space": {"inner key": 1, "x.y": {"deep key": 2}},
                   "rows": [{"a b": 1}]}


def test_nan_and_infinity_are_toml_floats_unless_refused():
    text = toml_text({"a": float("nan"), "b": np.inf, "c": [-np.inf, 1.0]})
    got = tomllib.loads(text)
    assert math.isnan(got["a"]) and got["b"] == math.inf and got["c"] == [-math.inf, 1.0]
    with pytest.raises(InputError) as e:
        toml_text({"scale": {"length_mm": float("nan")}}, finite=True, what="analysis file")
    assert str(e.value) == "analysis file: nan cannot be written; give a finite number"


@pytest.mark.parametrize("value", [None, object(), b"bytes", {1, 2}])
def test_values_toml_cannot_hold_are_refused_with_one_line(value):
    with pytest.raises(InputError) as e:
        toml_value(value, what="calibration file")
    msg = str(e.value)
    assert msg.startswith("calibration file: cannot write a ") and "\n" not in msg


def test_the_analysis_file_keeps_its_layout_and_refuses_nan():
    data = {"images": "frames/*.png", "frames": {"start": 0, "stop": 10, "every": 2},
            "roi": {"polygon": [[1.5, 2.0], [100.0, 2.0], [50.0, 80.0]]},
            "scale": {"line": [1.5, 2.0, 100.25, 2.0], "length_mm": 10.0},
            "strain": {"window": 9, "measure": "green-lagrange"}}
    text = analysis_text(data, "written by a test\nsecond line")
    # frames stays an inline table at the top, the other dicts become [sections]
    assert text.splitlines()[:4] == ["# written by a test", "# second line",
                                     'images = "frames/*.png"',
                                     "frames = { start = 0, stop = 10, every = 2 }"]
    assert tomllib.loads(text) == data
    with pytest.raises(InputError, match="^analysis file: inf cannot be written"):
        analysis_text({"scale": {"length_mm": math.inf}})
    with pytest.raises(InputError, match="^analysis file: cannot write a NoneType"):
        analysis_text({"strain": {"window": None}})
