"""After tracking: the noise floor from static images and the self-check go into the report."""

import json

import numpy as np

import dic
from dic.workflow import run as pipeline
from dic.images import synth


def _refuse(constant):
    raise ValueError(f"{constant} is not strict JSON")


def _strict_json(path):
    """The file parsed by the standard library, refusing NaN and Infinity (RFC 8259 has
    neither; json.loads accepts them unless told not to)."""
    return json.loads(path.read_text(encoding="utf-8"), parse_constant=_refuse)


def _images(tmp_path, n_frames):
    shape = (120, 200)
    pat = synth.make_speckle(shape, radius=2.5, seed=9, contrast=600)
    frames = tmp_path / "frames"
    static = tmp_path / "static"
    frames.mkdir()
    static.mkdir()
    for k in range(n_frames):
        disp = synth.homogeneous(np.diag([1 + 0.002 * k, 1.0]), centre=(100, 60)) if k else None
        dic.images.io.write_image(frames / f"f{k}.tif", synth.render(pat, shape, disp, noise=1.0,
                                                              seed=k) * 16, bits=16)
    for k in range(3):
        dic.images.io.write_image(static / f"s{k}.tif", synth.render(pat, shape, noise=1.0,
                                                              seed=100 + k) * 16, bits=16)
    return shape, frames, static


def test_noise_floor_and_self_check_reach_the_report(tmp_path):
    _, frames, static = _images(tmp_path, 3)
    out = tmp_path / "out"
    out.mkdir()
    res = dic.track(frames, out / "results.h5", step=8)
    assert len(res) == 3
    settings = {"strain": {"window": 5}, "noise": {"images": str(static / "*.tif")},
                "report": {"title": "pipeline test"}}
    written = pipeline.finish(out / "results.h5", out, settings)
    floor = _strict_json(out / "noise_floor.json")
    # zero strain between static images: the floor is small and finite (iDICs 2018 noise
    # floor; with sigma = 1 * 16 grey levels of a ~600 * 16 contrast, tens of microstrain)
    assert 0 < floor["spatial"]["xx"] < 1e-3
    assert written["self_check"] is not None
    html = written["report_html"].read_text(encoding="utf-8")
    # both appear as tables of plain quantities with their meaning (captions from the results)
    assert "Self-check of the settings" in html and "Noise floor" in html
    assert "Displacement noise floor" in html and "What it means" in html


def test_a_noise_floor_that_has_no_strain_is_written_as_strict_json(tmp_path):
    # a region of two bands, each only two points high: no strain window of 5 x 5 points fits,
    # so the strain noise floor is not known (NaN), while the displacement one is
    shape, frames, static = _images(tmp_path, 2)
    roi = np.zeros(shape, bool)
    roi[10:45, 10:190] = True
    roi[75:110, 10:190] = True
    out = tmp_path / "out"
    out.mkdir()
    dic.track(frames, out / "results.h5", step=8, roi=roi)
    settings = {"strain": {"window": 5}, "noise": {"images": str(static / "*.tif")},
                "report": {"title": "no strain"}}
    written = pipeline.finish(out / "results.h5", out, settings)
    assert written["noise_floor"] == out / "noise_floor.json"
    # strict JSON (RFC 8259): what could not be measured is null, never a bare NaN
    floor = _strict_json(written["noise_floor"])
    assert floor["spatial"]["xx"] is None and floor["temporal_rms"]["yy"] is None
    assert 0 < floor["spatial"]["u"] < 0.05  # common practice, no source: noise of hundredths
    assert floor["n_images"] == 3 and floor["settings"]["window"] == 5
    # the report states it as not known (the self-check also has too few points for its
    # spatial resolution here)
    html = written["report_html"].read_text(encoding="utf-8")
    assert "Noise floor" in html and "not known" in html
