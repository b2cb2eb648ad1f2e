"""Exports of whole results files (dic.export): CSV per frame, one NumPy archive, VTK series;
and the ``dic export`` command (dic.cli.report).

The VTK files are read back with a minimal reader written here from the file-format
specification (Kitware, "VTK File Formats", XML StructuredGrid and Collection), not with the
writer's own code.
"""

from __future__ import annotations

import argparse
import base64
import csv
import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

import dic
from dic import export
from dic.images import synth
from dic.cli.report import register
from dic.sequence import open_for_writing

SHAPE = (80, 128)
SCALE = 0.04
STEP = 8


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("exports")
    pat = synth.make_speckle(SHAPE, radius=2.5, seed=4, contrast=600)
    paths = []
    for k, e in enumerate((0.0, 0.02, 0.04)):
        d = synth.tensile_neck(e, centre=(64.0, 40.0), neck_strain=0.5 * e,
                               neck_width=25.0) if k else None
        img = synth.render(pat, SHAPE, d, noise=0.5, seed=k)
        img[22:48, 88:114] = 300.0   # a blank patch: its points are FLAT, not measured
        paths.append(dic.images.io.write_image(folder / f"g{k}.png", img * 16, bits=16))
    mask = np.zeros(SHAPE, bool)
    mask[12:68, 8:120] = True
    with_scale = dic.track(paths, folder / "scaled.h5", subset=15, step=STEP, roi=mask,
                           scale=SCALE)
    no_scale = dic.track(paths, folder / "plain.h5", subset=15, step=STEP, roi=mask)
    return with_scale, no_scale, folder


@pytest.fixture(scope="module")
def empty(tmp_path_factory):
    p = tmp_path_factory.mktemp("empty") / "empty.h5"
    x, y = np.meshgrid(np.arange(10.0, 50.0, 10.0), np.arange(10.0, 40.0, 10.0))
    w = open_for_writing(p, settings={"subset": 15, "step": 10}, grid_x=x, grid_y=y,
                         n_frames=2, image_names=["a.png", "b.png"],
                         image_sha256=["0" * 64, "1" * 64])
    w.close()
    return p


def _csv(path):
    return np.genfromtxt(path, delimiter=",", names=True)


# --------------------------------------------------------------------------------------------
# CSV
# --------------------------------------------------------------------------------------------
def test_csv_per_frame_holds_positions_displacements_and_strain(run, tmp_path):
    res, _, _ = run
    files = export.export_results(res, tmp_path / "csv", format="csv", window=5)
    assert [f.name for f in files] == ["frame_0000.csv", "frame_0001.csv", "frame_0002.csv"]
    k = 2
    t = _csv(files[k])
    f = res.field(k)
    s = dic.strain_field(f, window=5)
    assert t.dtype.names == ("x_px", "y_px", "x_mm", "y_mm", "u_px", "v_px", "u_mm", "v_mm",
                             "dudx", "dudy", "dvdx", "dvdy", "strain_xx", "strain_yy",
                             "strain_xy", "zncc", "reason")
    # rows run over the grid row by row (y outer, x inner); 9 significant digits are written,
    # so values agree to a relative 5e-9 (half a unit in the 9th digit)
    np.testing.assert_allclose(t["x_px"], f.x.ravel(), rtol=5e-9)
    np.testing.assert_allclose(t["x_mm"], f.x.ravel() * SCALE, rtol=5e-9)
    np.testing.assert_allclose(t["u_px"], f.u.ravel(), rtol=5e-9, atol=1e-12)
    np.testing.assert_allclose(t["v_mm"], f.v.ravel() * SCALE, rtol=5e-9, atol=1e-12)
    np.testing.assert_allclose(t["strain_xy"], s.xy.ravel(), rtol=5e-9, atol=1e-15)
    np.testing.assert_array_equal(t["reason"], f.reason.ravel())
    # not measured: nan in every number column, never a made-up value
    bad = t["reason"] != 0
    assert bad.any()
    assert np.isnan(t["u_px"][bad]).all() and np.isnan(t["strain_xx"][bad]).all()
    # the sidecar JSON names the measure and says that xy is tensor shear
    about = json.loads(files[k].with_suffix(".json").read_text())
    assert "tensor shear" in about["strain"] and about["frame"] == k
    with open(files[k], newline="") as fh:
        rows = list(csv.reader(fh))  # the standard csv module reads it too
    assert len(rows) == 1 + f.n_points
    # pandas with default options: every column numeric (pandas documentation, read_csv)
    pd = pytest.importorskip("pandas")
    frame = pd.read_csv(files[k])
    assert list(frame.columns) == list(t.dtype.names)
    assert all(pd.api.types.is_numeric_dtype(frame[c]) for c in frame.columns)


def test_csv_without_a_scale_has_no_mm_columns(run, tmp_path):
    _, plain, _ = run
    (p,) = export.export_results(plain, tmp_path, format="csv", frames=[-1], window=5,
                                 components="equivalent,rotation")
    t = _csv(p)
    assert t.dtype.names == ("x_px", "y_px", "u_px", "v_px", "dudx", "dudy", "dvdx", "dvdy",
                             "strain_equivalent", "rotation_deg", "zncc", "reason")
    assert p.name == "frame_0002.csv"


# --------------------------------------------------------------------------------------------
# NPZ
# --------------------------------------------------------------------------------------------
def test_npz_stacks_every_frame(run, tmp_path):
    res, _, _ = run
    (p,) = export.export_results(res, tmp_path, format="npz", window=5,
                                 components=["xx", "major"])
    with np.load(p, allow_pickle=False) as z:
        F, (ny, nx) = len(res), res.shape
        assert z["u_px"].shape == (F, ny, nx) and z["strain_major"].shape == (F, ny, nx)
        np.testing.assert_array_equal(z["frames"], np.arange(F))
        for k in range(F):
            f = res.field(k)
            np.testing.assert_array_equal(z["u_px"][k], f.u)  # bit for bit (binary)
            np.testing.assert_array_equal(z["reason"][k], f.reason)
            np.testing.assert_array_equal(z["strain_xx"][k], dic.strain_field(f, window=5).xx)
        assert float(z["scale_mm_per_px"]) == SCALE
        info = json.loads(str(z["strain_settings"]))
        assert info["measure"] == "green-lagrange" and info["window"] == 5
        # VSG = (window - 1) * step + subset (iDICs Good Practices Guide 2018)
        assert info["vsg_px"] == (5 - 1) * STEP + 15
        assert json.loads(str(z["settings"]))["subset"] == 15
    assert not [q for q in tmp_path.iterdir() if "partial" in q.name]  # temporaries removed


# --------------------------------------------------------------------------------------------
# VTK
# --------------------------------------------------------------------------------------------
_NUMPY = {"Float64": "<f8", "Float32": "<f4", "Int8": "i1", "UInt8": "u1", "Int32": "<i4"}


def _read_array(el):
    """A DataArray per the VTK XML spec: format="binary" is base64 of a UInt32 byte count
    followed by the raw little-endian values (no compressor named in the file)."""
    assert el.get("format") == "binary"
    raw = base64.b64decode("".join(el.text.split()))
    count = int(np.frombuffer(raw[:4], "<u4")[0])
    assert count == len(raw) - 4
    values = np.frombuffer(raw[4:], _NUMPY[el.get("type")])
    ncomp = int(el.get("NumberOfComponents", "1"))
    return values.reshape(-1, ncomp) if ncomp > 1 else values


def test_vtk_series_reads_back_per_the_specification(run, tmp_path):
    res, _, _ = run
    files = export.export_results(res, tmp_path / "vtk", format="vtk", window=5,
                                  components="xx,yy,xy")
    pvd = files[-1]
    root = ET.parse(pvd).getroot()  # well-formed XML
    assert root.tag == "VTKFile" and root.get("type") == "Collection"
    sets = root.findall("./Collection/DataSet")
    assert len(sets) == len(res)
    # no image times stored: time steps are the frame numbers
    assert [float(d.get("timestep")) for d in sets] == list(range(len(res)))
    ny, nx = res.shape
    for k, d in enumerate(sets):
        vts = pvd.parent / d.get("file")
        r = ET.parse(vts).getroot()
        assert r.get("type") == "StructuredGrid" and r.get("byte_order") == "LittleEndian"
        grid = r.find("StructuredGrid")
        # extents are inclusive index ranges i0 i1 j0 j1 k0 k1 (VTK File Formats)
        assert grid.get("WholeExtent").split() == ["0", str(nx - 1), "0", str(ny - 1), "0",
                                                   "0"]
        piece = grid.find("Piece")
        pts = _read_array(piece.find("Points/DataArray"))
        assert pts.shape == (nx * ny, 3)
        # point order: i (x) fastest, then j (y) (VTK File Formats, structured data)
        np.testing.assert_array_equal(pts[:, 0], (res.grid_x * SCALE).ravel())
        np.testing.assert_array_equal(pts[:, 1], (res.grid_y * SCALE).ravel())
        arrays = {a.get("Name"): _read_array(a) for a in piece.findall("PointData/DataArray")}
        assert set(arrays) == {"displacement_mm", "strain_xx", "strain_yy", "strain_xy", "zncc",
                               "reason"}
        f = res.field(k)
        np.testing.assert_array_equal(arrays["displacement_mm"][:, 0], (f.u * SCALE).ravel())
        np.testing.assert_array_equal(arrays["displacement_mm"][:, 2], 0.0)
        np.testing.assert_array_equal(arrays["strain_xx"], dic.strain_field(f, window=5).xx.ravel())
        np.testing.assert_array_equal(arrays["reason"], f.reason.ravel())
        assert piece.find("PointData").get("Vectors") == "displacement_mm"


def test_vtk_without_scale_is_in_pixels(run, tmp_path):
    _, plain, _ = run
    pvd = export.results_to_vtk(plain, tmp_path, frames=[1], window=5)
    (d,) = ET.parse(pvd).getroot().findall("./Collection/DataSet")
    piece = ET.parse(tmp_path / d.get("file")).getroot().find("StructuredGrid/Piece")
    names = [a.get("Name") for a in piece.findall("PointData/DataArray")]
    assert "displacement_px" in names
    pts = _read_array(piece.find("Points/DataArray"))
    np.testing.assert_array_equal(pts[:, 0], plain.grid_x.ravel())


# --------------------------------------------------------------------------------------------
# bad input
# --------------------------------------------------------------------------------------------
def test_export_errors(run, empty, tmp_path):
    res, _, folder = run
    with pytest.raises(ValueError, match="use some of: xx, yy, xy"):
        export.export_results(res, tmp_path, components="xx,exy")
    with pytest.raises(ValueError, match="use one of: csv, npz, vtk"):
        export.export_results(res, tmp_path, format="xlsx")
    with pytest.raises(ValueError, match="frame 7 does not exist; .* frames 0 to 2"):
        export.export_results(res, tmp_path, frames=[7])
    with pytest.raises(ValueError, match="measure 'lagrangian' is not known; use one of"):
        export.export_results(res, tmp_path, measure="lagrangian")
    with pytest.raises(ValueError, match="no completed frames"):
        export.export_results(empty, tmp_path)
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    with pytest.raises(OSError, match="out_dir"):
        export.export_results(res, blocker / "sub", format="csv")
    with pytest.raises(OSError):
        export.export_results(folder / "missing.h5", tmp_path)


# --------------------------------------------------------------------------------------------
# the command
# --------------------------------------------------------------------------------------------
def _main(argv):
    parser = argparse.ArgumentParser(prog="dic")
    register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    return args.func(args)


def test_export_command(run, tmp_path, capsys):
    res, _, _ = run
    out = tmp_path / "vtk"
    assert _main(["export", str(res.path), "--format", "vtk", "--out", str(out),
                  "--frames", "0:3:2", "--strain-window", "5"]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["results.pvd", "results_0000.vts",
                                                     "results_0002.vts"]
    assert "ParaView" in capsys.readouterr().out
    # default output folder: 'export' beside the results file
    assert _main(["export", str(res.path), "--format", "npz", "--components", "xx",
                  "--window", "3"]) == 0
    assert (res.path.parent / "export" / "results.npz").is_file()


@pytest.mark.parametrize("extra, words", [
    (["--components", "xx,shear"], "--components: unknown 'shear'; use some of"),
    (["--format", "xls"], "--format: unknown 'xls'; use one of: csv, npz, vtk"),
    (["--frames", "1,9"], "--frames: frame 9 does not exist"),
    (["--frames", "x"], "--frames: 'x' is not a frame number"),
    (["--measure", "strainy"], "use one of: green-lagrange"),
    (["--window", "4"], "--strain-window: 4 is not an odd whole number"),
])
def test_export_command_errors_are_one_line(run, tmp_path, extra, words):
    res, _, _ = run
    with pytest.raises(ValueError, match=words) as info:
        _main(["export", str(res.path), "--out", str(tmp_path), "--window", "5", *extra])
    assert "\n" not in str(info.value)


def test_export_command_file_errors(run, empty, tmp_path):
    res, _, folder = run
    with pytest.raises(FileNotFoundError, match="RESULTS: no such file"):
        _main(["export", str(folder / "nothing.h5")])
    with pytest.raises(FileNotFoundError, match="holds no results.h5"):
        _main(["export", str(tmp_path)])
    with pytest.raises(ValueError, match="RESULTS: .* no completed frames"):
        _main(["export", str(empty), "--out", str(tmp_path)])
    (tmp_path / "f").write_text("x")
    with pytest.raises(OSError, match="--out"):
        _main(["export", str(res.path), "--window", "5", "--out", str(tmp_path / "f" / "sub")])
