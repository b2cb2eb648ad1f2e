"""What ``dic run --config sample_images/analysis.toml --out X`` leaves in its folder, as a user
opens it: tables that other tools read as they are, the strain maps, an animation on request,
and a second run that costs only the outputs.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import dic
from dic.cli import main

ROOT = Path(__file__).resolve().parent.parent
ANALYSIS = ROOT / "sample_images" / "analysis.toml"
#: images of the sample (coupon_000.png is the reference image)
N_IMAGES = len(list((ROOT / "sample_images").glob("coupon_*.png")))
# text columns of tensile.csv (one row per result: its key, name, unit, standard, method, note)
TEXT_COLUMNS = {"key", "name", "unit", "standard", "range_unit", "method", "note"}

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    assert main(["run", "--config", str(ANALYSIS), "--out", str(out), "-q"]) == 0
    return out


def test_every_table_reads_into_numbers_with_pandas_defaults(demo, tmp_path):
    # pandas.read_csv with default options (pandas documentation): a first line of column
    # names, then numbers; what the numbers are lives in a sidecar JSON of the same name
    pd = pytest.importorskip("pandas")
    assert main(["export", str(demo / "results.h5"), "--out", str(tmp_path / "exp"), "--frames", "5"]) == 0
    tables = sorted(demo.glob("*.csv")) + sorted((tmp_path / "exp").glob("*.csv"))
    names = {p.name for p in tables}
    # one map per image but the reference: the axial strain (not the displacement magnitude)
    assert sorted(p.name for p in demo.glob("strain_coupon_*.png")) == [
        f"strain_coupon_{k:03d}.png" for k in range(1, N_IMAGES)]
    assert not list(demo.glob("displacements_*.png"))
    assert {"gauges.csv", "tensile.csv", "displacements_coupon_005.csv",
            "frame_0005.csv"} <= names
    for p in tables:
        frame = pd.read_csv(p)
        for c in frame.columns:
            if p.name == "tensile.csv" and c in TEXT_COLUMNS:
                continue
            assert pd.api.types.is_numeric_dtype(frame[c]), (p.name, c)
        assert p.with_suffix(".json").is_file(), p.name
        json.loads(p.with_suffix(".json").read_text())
    # the run's per-image table and the export's frame table: same columns, same numbers
    run_table = pd.read_csv(demo / "displacements_coupon_005.csv")
    exp_table = pd.read_csv(tmp_path / "exp" / "frame_0005.csv")
    assert list(run_table.columns) == list(exp_table.columns)
    assert "u_mm" in run_table.columns and "strain_xx" in run_table.columns
    # the export writes 9 significant digits: agreement to half a unit in the 9th digit
    np.testing.assert_allclose(exp_table["u_px"], run_table["u_px"], rtol=5e-9, atol=1e-12)


def test_second_run_matches_nothing_and_animates(demo, capsys, monkeypatch):
    import dic.sequence.tracker as tracker

    def no_matching(*args, **kwargs):
        raise AssertionError("a finished analysis was matched again")

    monkeypatch.setattr(tracker, "_stage_matcher", no_matching)
    monkeypatch.setattr(tracker, "_worker_matcher", no_matching)
    assert main(["run", "--config", str(ANALYSIS), "--out", str(demo), "--animate"]) == 0
    printed = capsys.readouterr().out
    assert f"nothing to track: all {N_IMAGES} of {N_IMAGES} frames" in printed
    assert "already up to date" in printed
    gif = demo / "strain_xx.gif"
    # GIF files start with GIF89a or GIF87a (GIF specification, 1989)
    assert gif.read_bytes()[:6] in (b"GIF89a", b"GIF87a")
    assert f"wrote {gif}" in printed
    from PIL import Image

    with Image.open(gif) as im:
        assert im.n_frames == N_IMAGES


def test_last_frame_counts_measurable_points(demo, capsys):
    assert main(["run", "--config", str(ANALYSIS), "--out", str(demo)]) == 0
    line = [ln for ln in capsys.readouterr().out.splitlines() if ln.startswith("last frame")][0]
    # the grid is laid out where subsets fit the image, so no grid point is unmeasurable from
    # the start; points that later leave the image are counted by their reason
    assert "measurable points measured" in line
    assert "too near the image edge" not in line and "outside image" in line
    with dic.load_results(demo / "results.h5") as r:
        ref = r.field(0)
        assert ref.n_valid == ref.n_points  # the reference frame: every grid point measured
