"""After tracking: the noise floor from static images and the self-check go into the report."""

import json

import numpy as np

import dic
from dic.workflow import run as pipeline
from dic.images import synth


def test_noise_floor_and_self_check_reach_the_report(tmp_path):
    shape = (120, 200)
    pat = synth.make_speckle(shape, radius=2.5, seed=9, contrast=600)
    frames = tmp_path / "frames"
    static = tmp_path / "static"
    frames.mkdir()
    static.mkdir()
    for k in range(3):
        disp = synth.homogeneous(np.diag([1 + 0.002 * k, 1.0]), centre=(100, 60)) if k else None
        dic.images.io.write_image(frames / f"f{k}.tif", synth.render(pat, shape, disp, noise=1.0,
                                                              seed=k) * 16, bits=16)
    for k in range(3):
        dic.images.io.write_image(static / f"s{k}.tif", synth.render(pat, shape, noise=1.0,
                                                              seed=100 + k) * 16, bits=16)
    out = tmp_path / "out"
    out.mkdir()
    res = dic.track(frames, out / "results.h5", step=8)
    assert len(res) == 3
    settings = {"strain": {"window": 5}, "noise": {"images": str(static / "*.tif")},
                "report": {"title": "pipeline test"}}
    written = pipeline.finish(out / "results.h5", out, settings)
    floor = json.loads((out / "noise_floor.json").read_text())
    # zero strain between static images: the floor is small and finite (iDICs 2018 noise
    # floor; with sigma = 1 * 16 grey levels of a ~600 * 16 contrast, tens of microstrain)
    assert 0 < floor["spatial"]["xx"] < 1e-3
    assert written["self_check"] is not None
    html = written["report_html"].read_text(encoding="utf-8")
    # both appear as tables of plain quantities with their meaning (captions from the results)
    assert "Self-check of the settings" in html and "Noise floor" in html
    assert "Displacement noise floor" in html and "What it means" in html
