"""The review page (dic.view, ``dic view``): its server's safety rules, and the page itself
driven in headless Chromium (Debian package ``chromium``) through Playwright, as a user would.

Every number the page shows is compared with the library computed independently here:
``dic.load_results(...).strain(k)`` for the map and the clicked point,
``dic.tensile.gauge_histories`` for a gauge drawn by two clicks, and ``dic run --config`` for
the analysis file the set-up page writes.
"""

from __future__ import annotations

import base64
import http.client
import json
import shutil
import socket
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import dic
from dic.images import synth
from dic.view import start_server
from dic.view.results_data import REASONS, TOO_FEW_NEIGHBOURS
from dic.view.server import CSP

ROOT = Path(__file__).resolve().parent.parent
SAMPLE = ROOT / "sample_images"
SHAPE = (96, 176)
SCALE = 0.05
STEP = 6
SUBSET = 15
N = 5
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
# the system's browser, never a downloaded one; no network traffic of its own
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """A small results file: a tensile neck rendered exactly by dic.synth, tracked by dic.track."""
    folder = tmp_path_factory.mktemp("view")
    pat = synth.make_speckle(SHAPE, radius=2.5, seed=8, contrast=600)
    paths = []
    for k, e in enumerate(np.linspace(0.0, 0.05, N)):
        d = synth.tensile_neck(0.6 * e, centre=(88.0, 48.0), neck_strain=0.4 * e,
                               neck_width=30.0) if k else None
        img = synth.render(pat, SHAPE, d, noise=0.5, seed=k)
        paths.append(dic.images.io.write_image(folder / f"c{k}.png", img * 16, bits=16))
    mask = np.zeros(SHAPE, bool)
    mask[14:82, 8:168] = True
    dic.track(paths, folder / "results.h5", subset=SUBSET, step=STEP, roi=mask, scale=SCALE)
    return folder / "results.h5"


@pytest.fixture(scope="module")
def server(run):
    s = start_server(run)
    yield s
    s.stop()


def _get(server, path, headers=None, host=None):
    c = http.client.HTTPConnection(host or "127.0.0.1", server.port, timeout=30)
    try:
        c.putrequest("GET", path, skip_host=True, skip_accept_encoding=True)
        c.putheader("Host", (headers or {}).pop("Host", f"127.0.0.1:{server.port}"))
        for k, v in (headers or {}).items():
            c.putheader(k, v)
        c.endheaders()
        r = c.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        c.close()


# --------------------------------------------------------------------------------------------
# the server's rules (checked without a browser)
# --------------------------------------------------------------------------------------------
def test_every_request_needs_the_token(server):
    t = server.token
    assert _get(server, "/api/info")[0] == 403
    assert _get(server, "/?t=wrong")[0] == 403
    assert _get(server, "/view.js")[0] == 403
    assert _get(server, f"/api/image?k=0&t={t[:-1]}")[0] == 403
    assert _get(server, f"/api/info?t={t}")[0] == 200
    assert _get(server, "/api/info", {"X-View-Token": t})[0] == 200
    # a token of 24 random bytes (Python docs, secrets: 32 bytes "should be sufficient";
    # common practice, no source, for a short-lived local server)
    assert len(base64.urlsafe_b64decode(t + "=" * (-len(t) % 4))) >= 24


def test_dot_dot_and_files_outside_the_analysis_are_refused(server, run):
    t = server.token
    for path in ["/../results.h5", "/%2e%2e/%2e%2e/etc/passwd", "/static/../view.js",
                 "/api/..%2f..%2fetc%2fpasswd", "/..\\results.h5"]:
        status, _, body = _get(server, f"{path}?t={t}")
        assert status == 400, path
        assert b"results" not in body.lower() or b"error" in body
    # no address names a file: the results file, the sources, the images by name
    for path in ["/results.h5", f"/{run.name}", "/etc/passwd", "/static/view.js",
                 "/dic/view/server.py", "/c0.png", "/api/image/c0.png"]:
        assert _get(server, f"{path}?t={t}")[0] == 404, path
    # images are named by number, and only the analysis's own
    assert _get(server, f"/api/image?k=0&t={t}")[0] == 200
    assert _get(server, f"/api/image?k={N}&t={t}")[0] == 400
    assert _get(server, f"/api/image?k=-1&t={t}")[0] == 400


def test_bound_to_loopback_only(server):
    assert server.httpd.server_address[0] == "127.0.0.1"
    # a request naming another host (DNS rebinding) is refused even with the token
    assert _get(server, f"/api/info?t={server.token}", {"Host": "example.com"})[0] == 403
    # the port is closed on every other address of this machine
    s = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    try:
        s.connect(("192.0.2.1", 9))  # TEST-NET-1 (RFC 5737): picks the outgoing address only
        own = s.getsockname()[0]
    except OSError:
        own = None
    finally:
        s.close()
    if own and not own.startswith("127."):
        with pytest.raises(OSError):
            socket.create_connection((own, server.port), timeout=2).close()


def test_every_answer_forbids_outside_loads(server):
    t = server.token
    for path in ["/", "/view.js", "/view.css", "/api/info", "/api/image?k=0", "/nothing"]:
        status, headers, _ = _get(server, path + ("&" if "?" in path else "?") + f"t={t}")
        assert headers["Content-Security-Policy"] == CSP
    # W3C Content Security Policy Level 3: default-src 'none' and no inline or remote scripts
    assert "default-src 'none'" in CSP and "unsafe" not in CSP and "http" not in CSP
    assert "script-src 'self'" in CSP and "connect-src 'self'" in CSP


def test_results_file_is_opened_read_only(server, run):
    before = run.read_bytes()
    assert server.source.results._f.mode == "r"  # h5py File.mode
    _get(server, f"/api/map?k=2&t={server.token}")
    assert run.read_bytes() == before


def test_point_and_map_answers_equal_the_library(server, run):
    res = dic.load_results(run)
    status, _, body = _get(server, f"/api/point?x=88&y=48&component=yy&t={server.token}")
    d = json.loads(body)
    for k in range(len(res)):
        want = res.strain(k).component("yy")[d["i"], d["j"]]
        assert (d["values"][k] == want) if np.isfinite(want) else d["values"][k] is None


def _post(server, path, body):
    c = http.client.HTTPConnection("127.0.0.1", server.port, timeout=300)
    try:
        c.request("POST", f"{path}?t={server.token}", json.dumps(body),
                  {"Content-Type": "application/json", "Host": f"127.0.0.1:{server.port}"})
        r = c.getresponse()
        return r.status, json.loads(r.read())
    finally:
        c.close()


def test_area_gauge_answer_equals_the_library(server, run):
    from dic.tensile import AreaGauge, gauge_histories

    corners = [[50.0, 30.0], [120.0, 34.0], [110.0, 66.0], [55.0, 60.0]]
    status, d = _post(server, "/api/gauge", {"gauge": {"kind": "area", "points": corners,
                                                       "name": "patch"}, "component": "yy"})
    assert status == 200
    want = gauge_histories(dic.load_results(run), AreaGauge(corners, name="patch"),
                           components=("yy",))
    for col in ("patch.yy.mean", "patch.yy.std", "patch.yy.min", "patch.yy.max", "patch.n"):
        np.testing.assert_allclose(d["columns"][col], want[col], rtol=0, atol=1e-12)
    # a gauge off the measured region is refused with the library's message
    status, d = _post(server, "/api/gauge", {"gauge": {"kind": "line", "name": "off",
                                                       "points": [[1, 1], [5, 2]]}})
    assert status == 400 and "outside the region of interest" in d["error"]


def test_force_and_time_come_from_the_gauge_table_beside_the_results(run, tmp_path):
    from dic.tensile import GaugeLine, gauge_histories

    folder = tmp_path / "out"
    folder.mkdir()
    shutil.copy(run, folder / "results.h5")
    res = dic.load_results(folder / "results.h5")
    force = np.linspace(0.0, 4000.0, len(res))
    times = 2.0 * np.arange(len(res))
    h = gauge_histories(res, GaugeLine((40, 48), (140, 48))).with_force(force).with_time(times)
    h.to_csv(folder / "gauges.csv")
    s = start_server(folder)
    try:
        info = json.loads(_get(s, f"/api/info?t={s.token}")[2])
    finally:
        s.stop()
    assert info["has_force"] and info["has_time"]
    np.testing.assert_allclose(info["force"], force, rtol=1e-12)
    np.testing.assert_allclose(info["time"], times, rtol=1e-12)


def test_follow_and_reference_positions_use_the_library_displacements(server, run):
    from dic.tensile import displacement_at

    res = dic.load_results(run)
    k = N - 1
    f = res.field(k)
    pts = [[60.3, 40.7], [101.0, 55.2]]
    status, d = _post(server, "/api/follow", {"k": k, "points": pts})
    u, v = displacement_at(f, [p[0] for p in pts], [p[1] for p in pts])
    np.testing.assert_allclose(d["points"], np.column_stack([np.array(pts)[:, 0] + u,
                                                             np.array(pts)[:, 1] + v]),
                               rtol=0, atol=1e-12)
    # and back: the reference position of what lies there (fixed point of X + u(X) = x)
    x, y = d["points"][1]
    back = json.loads(_get(server, f"/api/reference?k={k}&x={x!r}&y={y!r}"
                                   f"&t={server.token}")[2])
    assert abs(back["x"] - pts[1][0]) < 1e-5 and abs(back["y"] - pts[1][1]) < 1e-5
    # a point off the specimen is refused in plain words
    code, _, body = _get(server, f"/api/reference?k={k}&x=2&y=2&t={server.token}")
    assert code == 400 and b"not over the measured part" in body


@pytest.mark.slow
def test_set_up_answers_equal_the_library_and_holes_become_a_mask(tmp_path):
    from dic.images.io import list_images, read_image
    from dic.images.roi import make_roi
    from dic.metrology import advise, pattern_quality
    from dic.workflow.config import load_analysis

    folder = tmp_path / "frames"
    folder.mkdir()
    for f in sorted(SAMPLE.glob("coupon_*.png"))[:2]:
        shutil.copy(f, folder)
    s = start_server(folder)
    roi = {"outer": {"kind": "polygon", "points": [[10, 50], [630, 52], [620, 190], [12, 188]]},
           "holes": [{"kind": "rectangle", "points": [[300, 100], [340, 140]]}]}
    try:
        assert json.loads(_get(s, f"/api/info?t={s.token}")[2])["exists"] is False
        status, check = _post(s, "/api/check", {"roi": roi, "subset": 21})
        status2, adv = _post(s, "/api/advise", {"roi": roi, "target": 200})
        status3, saved = _post(s, "/api/save", {"roi": roi, "scale_line": [69.5, 200, 569.5, 200],
                                                "length_mm": 40})
        status4, again = _post(s, "/api/save", {"roi": roi})
    finally:
        s.stop()
    assert status == status2 == status3 == 200
    ref = read_image(folder / "coupon_000.png")
    want = make_roi([(10, 50), (630, 52), (620, 190), (12, 188)], ref.shape) \
        & ~make_roi((300, 100, 340, 140), ref.shape)
    q = pattern_quality(ref, subset=21, roi=want)
    assert check["verdict"] == q.verdict and check["speckle_size"] == q.speckle_size
    assert check["pixels"] == int(want.sum())
    a = advise(ref, target_strain_noise=200, roi=want, max_size=256)
    assert adv["chosen"] == a.chosen and adv["met"] == a.met
    # a region with holes is saved as a mask image beside the analysis file
    cfg = load_analysis(folder / "analysis.toml")
    assert [p.name for p in list_images(cfg["images"])] == ["coupon_000.png", "coupon_001.png"]
    assert np.array_equal(read_image(cfg["roi"]) > 0, want)
    assert cfg["scale"] == pytest.approx(40 / 500, rel=1e-12)
    assert cfg["subset"] == 21 and cfg["step"] == 8 and cfg["strain"]["window"] == 9
    # a second save without confirmation does not replace the file
    assert status4 == 400 and "exists" in again["error"]


# --------------------------------------------------------------------------------------------
# the page in a real browser
# --------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def browser():
    if CHROMIUM is None:
        pytest.skip("headless Chromium is not installed (Debian: apt-get install -y chromium)")
    sync_api = pytest.importorskip("playwright.sync_api")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        yield b
        b.close()


def _open(browser, server, ready):
    page = browser.new_page(viewport={"width": 1300, "height": 900})
    problems = []
    page.on("console", lambda m: problems.append(f"{m.type}: {m.text}")
            if m.type in ("error", "warning") else None)
    page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
    page.on("requestfailed", lambda r: problems.append(f"failed: {r.url}"))
    page.on("request", lambda r: problems.append(f"outside load: {r.url}")
            if not r.url.startswith((f"http://127.0.0.1:{server.port}/", "data:", "blob:"))
            else None)
    page.goto(server.url)
    page.wait_for_selector(ready)
    page.wait_for_selector('#photo[data-loaded="1"]')
    return page, problems


def _screen(page, x, y):
    """Screen position of the image point (x, y) px (origin at the top-left pixel's centre)."""
    box = page.locator("#picture").bounding_box()
    z = page.evaluate("window.dicView.zoom")
    return box["x"] + (x + 0.5) * z, box["y"] + (y + 0.5) * z


def _png(data_url):
    import cv2

    raw = base64.b64decode(data_url.split(",", 1)[1])
    bgra = cv2.imdecode(np.frombuffer(raw, np.uint8), cv2.IMREAD_UNCHANGED)
    return bgra[..., [2, 1, 0, 3]]


def test_page_loads_cleanly_and_the_map_matches_the_library(browser, server, run):
    from matplotlib import colormaps

    res = dic.load_results(run)
    page, problems = _open(browser, server, f'#overlay[data-frame="{N - 1}"]')
    page.select_option("#component", "xx")
    for k in (2, 0, N - 1):
        page.locator("#frame").fill(str(k))
        page.wait_for_selector(f'#overlay[data-frame="{k}"]')
        m = page.evaluate("window.dicView.map")
        assert m["frame"] == k and m["component"] == "xx"
        want = res.strain(k).component("xx")
        rgba = _png(page.get_attribute("#overlay", "src"))
        assert rgba.shape[:2] == want.shape
        # unmeasured points are blank, measured ones coloured
        assert np.array_equal(rgba[..., 3] == 0, ~np.isfinite(want))
        # colour of probed points: matplotlib's RdBu_r at the library's value
        lo, hi = m["lo"], m["hi"]
        ok = np.argwhere(np.isfinite(want))
        for i, j in ok[:: max(1, len(ok) // 7)]:
            t = np.clip((want[i, j] - lo) / (hi - lo), 0, 1)
            expected = np.asarray(colormaps["RdBu_r"](t, bytes=True))[:3]
            assert np.abs(rgba[i, j, :3].astype(int) - expected).max() <= 1
            # a click on the point reads its value (the exact number the library gives)
            page.mouse.click(*_screen(page, res.grid_x[i, j], res.grid_y[i, j]))
            page.wait_for_selector(f'#hover[data-value]')
            page.wait_for_selector(f'#charttitle:has-text("x {res.grid_x[i, j]:g}, y '
                                   f'{res.grid_y[i, j]:g} px")')
            got = float(page.get_attribute("#hover", "data-value"))
            assert got == want[i, j]
        # the read-out under the pointer names the reason of a blank point
        bi, bj = np.argwhere(~np.isfinite(want))[0]
        page.mouse.move(*_screen(page, res.grid_x[bi, bj], res.grid_y[bi, bj]))
        text = page.inner_text("#hover")
        code = int(res.field(k).reason[bi, bj])
        # a measured point without a strain value has too few measured neighbours
        reason = dic.field.Reason.describe(code) if code else REASONS[TOO_FEW_NEIGHBOURS]
        assert f"blank ({reason})" in text

    # over the image of the last frame the map moves with the material: a click where a grid
    # point has moved to (X + u) reads that grid point, and the map there has its colour
    k = N - 1
    page.select_option("#under", "cur")
    page.wait_for_selector(f'#overlay[data-under="cur"][data-frame="{k}"]')
    f, want = res.field(k), res.strain(k).component("xx")
    m = page.evaluate("window.dicView.map")
    g = m["geom"]
    rgba = _png(page.get_attribute("#overlay", "src"))
    ny, nx = want.shape
    for i, j in [(ny // 2, nx // 2), (ny // 3, nx // 4), (2 * ny // 3, 3 * nx // 4)]:
        x, y = res.grid_x[i, j] + f.u[i, j], res.grid_y[i, j] + f.v[i, j]
        r, c = round((y - g["y0"]) / g["step"]), round((x - g["x0"]) / g["step"])
        t = np.clip((want[i, j] - m["lo"]) / (m["hi"] - m["lo"]), 0, 1)
        expected = np.asarray(colormaps["RdBu_r"](t, bytes=True))[:3]
        assert np.abs(rgba[r, c, :3].astype(int) - expected).max() <= 1
        page.mouse.click(*_screen(page, x, y))
        page.wait_for_selector(f'#charttitle:has-text("x {res.grid_x[i, j]:g}, y '
                               f'{res.grid_y[i, j]:g} px")')
        assert float(page.get_attribute("#hover", "data-value")) == want[i, j]
    page.select_option("#under", "ref")
    assert problems == []
    page.close()


def test_gauge_line_by_two_clicks_equals_the_library_gauge(browser, server, run, tmp_path):
    from dic.tensile import GaugeLine, gauge_histories

    res = dic.load_results(run)
    page, problems = _open(browser, server, f'#overlay[data-frame="{N - 1}"]')
    page.check('input[name="tool"][value="line"]')
    page.fill("#gname", "across")
    a, b = (40.3, 47.6), (139.8, 49.1)
    page.mouse.click(*_screen(page, *a))
    page.mouse.click(*_screen(page, *b))
    page.wait_for_selector("#charttitle:has-text('Gauge across')")
    g = page.evaluate("window.dicView.gauge")
    (xa, ya), (xb, yb) = g["points"]
    # the page puts the ends where the clicks were (within a screen pixel)
    z = page.evaluate("window.dicView.zoom")
    assert max(abs(xa - a[0]), abs(ya - a[1]), abs(xb - b[0]), abs(yb - b[1])) <= 1 / z
    want = gauge_histories(res, GaugeLine((xa, ya), (xb, yb), name="across"))
    for col in ("across.engineering", "across.hencky", "across.green-lagrange",
                "across.length"):
        got = np.array([np.nan if v is None else v for v in g["columns"][col]])
        np.testing.assert_allclose(got, want[col], rtol=0, atol=1e-9)
    assert want["across.engineering"][-1] > 0.01  # the neck was pulled (6 % imposed)

    # keep it, keep a rectangle area too, delete it, then save the kept gauges as CSV
    page.click("#keep")
    page.check('input[name="tool"][value="rect"]')
    page.fill("#gname", "box")
    page.mouse.click(*_screen(page, 60, 30))
    page.mouse.click(*_screen(page, 110, 66))
    page.wait_for_selector("#charttitle:has-text('Gauge box')")
    page.click("#keep")
    assert page.locator("#gauges li").count() == 2
    page.locator("#gauges li", has_text="box").get_by_role("button", name="delete").click()
    assert page.locator("#gauges li").count() == 1
    page.once("dialog", lambda d: d.accept("middle"))
    page.locator("#gauges li", has_text="across").get_by_role("button", name="rename").click()
    page.wait_for_selector("#gauges li:has-text('middle')")
    with page.expect_download() as dl:
        page.click("#exportcsv")
    path = tmp_path / "gauges.csv"
    dl.value.save_as(path)
    rows = [r.split(",") for r in path.read_text().splitlines() if not r.startswith("#")]
    col = rows[0].index("middle.engineering [mm/mm]")
    assert "box" not in ",".join(rows[0])  # the deleted gauge is not saved
    np.testing.assert_allclose([float(r[col]) for r in rows[1:]], want["across.engineering"],
                               rtol=1e-9, atol=1e-12)
    with page.expect_download() as dl:
        page.click("#exporttoml")
    snippet = Path(dl.value.path()).read_text()
    import tomllib

    length = tomllib.loads(snippet)["tensile"]["gauge_length_mm"]
    assert length == pytest.approx(np.hypot(xb - xa, yb - ya) * SCALE, abs=1e-4)
    assert problems == []
    page.close()


@pytest.mark.slow
def test_set_up_page_writes_an_analysis_file_that_dic_run_takes(browser, tmp_path):
    from dic.images.roi import make_roi
    from dic.workflow.config import load_analysis

    folder = tmp_path / "frames"
    folder.mkdir()
    for f in sorted(SAMPLE.glob("coupon_*.png"))[:6]:
        shutil.copy(f, folder)
    for name in ("analysis.toml", "force_log.csv", "frame_times.csv"):
        shutil.copy(SAMPLE / name, folder)
    s = start_server(folder)
    try:
        page, problems = _open(browser, s, "body.setup")
        page.on("dialog", lambda d: d.accept())  # replace the analysis file that is there
        # drag a rectangle, draw the scale line over a known 40 mm
        page.mouse.move(*_screen(page, 10, 50))
        page.mouse.down()
        page.mouse.move(*_screen(page, 300, 120))
        page.mouse.move(*_screen(page, 630, 190))
        page.mouse.up()
        page.check('input[name="stool"][value="scale"]')
        page.mouse.click(*_screen(page, 69.5, 215))
        page.mouse.click(*_screen(page, 569.5, 215))
        page.fill("#lengthmm", "40")
        page.click("#check")
        page.wait_for_selector("#checkout[data-verdict]", timeout=120_000)
        assert page.get_attribute("#checkout", "data-verdict") in ("good", "fair", "poor")
        page.click("#save")
        page.wait_for_selector("#saved:not(:empty)")
        assert problems == []
        page.close()
    finally:
        s.stop()
    written = load_analysis(folder / "analysis.toml")
    sample = load_analysis(SAMPLE / "analysis.toml")
    # everything but the drawn values is the sample analysis's
    drawn = {"roi", "scale", "images", "tensile"}
    assert {k: v for k, v in written.items() if k not in drawn} == \
           {k: v for k, v in sample.items() if k not in drawn}
    assert {k: v for k, v in written["tensile"].items() if k not in ("force_log", "frame_times")} \
        == {k: v for k, v in sample["tensile"].items() if k not in ("force_log", "frame_times")}
    x0, y0, x1, y1 = written["roi"]
    assert abs(x0 - 10) <= 1 and abs(y0 - 50) <= 1 and abs(x1 - 630) <= 1 and abs(y1 - 190) <= 1
    assert written["scale"] == pytest.approx(0.08, rel=2e-3)  # 40 mm over 500 px
    out = tmp_path / "out"
    done = subprocess.run([sys.executable, "-m", "dic", "run", "--config",
                           str(folder / "analysis.toml"), "--out", str(out), "--quiet"],
                          capture_output=True, text=True, timeout=900)
    assert done.returncode == 0, done.stderr
    res = dic.load_results(out / "results.h5")
    assert len(res) == 6 and res.settings["subset"] == 21 and res.settings["step"] == 8
    assert res.scale == pytest.approx(written["scale"], rel=1e-12)
    assert np.array_equal(res.roi_mask, make_roi(written["roi"], res.roi_mask.shape))


# --------------------------------------------------------------------------------------------
# the command
# --------------------------------------------------------------------------------------------
def test_dic_view_prints_the_address_and_stops_on_ctrl_c(run):
    import os
    import signal
    import urllib.request

    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with subprocess.Popen([sys.executable, "-m", "dic", "view", str(run.parent),
                           "--no-browser"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                          text=True, env=env) as proc:
        try:
            line = proc.stdout.readline()
            assert line.startswith("dic view: http://127.0.0.1:") and "?t=" in line
            url = line.split(": ", 1)[1].strip()
            with urllib.request.urlopen(url.replace("/?", "/api/info?"), timeout=30) as r:
                assert json.loads(r.read())["frames"] == N
            proc.send_signal(signal.SIGINT)
            out, err = proc.communicate(timeout=30)
            assert proc.returncode == 0
            assert "stopped" in err
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.communicate()


def test_dic_view_of_a_missing_path_is_one_line_and_exit_2(tmp_path):
    done = subprocess.run([sys.executable, "-m", "dic", "view", str(tmp_path / "nothing.h5"),
                           "--no-browser"], capture_output=True, text=True, timeout=120,
                          env={**__import__("os").environ, "PYTHONPATH": str(ROOT)})
    assert done.returncode == 2
    assert done.stderr.startswith("dic: error: ") and done.stderr.count("\n") == 1
    assert "Traceback" not in done.stderr
    # one image instead of a folder: the message says what to give
    done = subprocess.run([sys.executable, "-m", "dic", "view",
                           str(SAMPLE / "coupon_000.png"), "--no-browser"],
                          capture_output=True, text=True, timeout=120,
                          env={**__import__("os").environ, "PYTHONPATH": str(ROOT)})
    assert done.returncode == 2 and "give the folder of images" in done.stderr


def test_polygon_area_and_polygon_hole_drawn_by_clicks(browser, server, run, tmp_path):
    from dic.images.io import read_image
    from dic.images.roi import make_roi
    from dic.tensile import AreaGauge, gauge_histories
    from dic.workflow.config import load_analysis

    # results page: an area of four corners, ended by a double click
    page, problems = _open(browser, server, f'#overlay[data-frame="{N - 1}"]')
    page.check('input[name="tool"][value="poly"]')
    page.fill("#gname", "quad")
    for x, y in [(50, 30), (120, 34), (110, 66)]:
        page.mouse.click(*_screen(page, x, y))
    page.mouse.dblclick(*_screen(page, 55, 60))
    page.wait_for_selector("#charttitle:has-text('Gauge quad')")
    g = page.evaluate("window.dicView.gauge")
    assert len(g["points"]) == 4
    want = gauge_histories(dic.load_results(run), AreaGauge(g["points"], name="quad"),
                           components=("xx",))
    got = np.array([np.nan if v is None else v for v in g["columns"]["quad.xx.mean"]])
    np.testing.assert_allclose(got, want["quad.xx.mean"], rtol=0, atol=1e-12)
    assert problems == []
    page.close()

    # set-up page: a polygon region with a polygon hole becomes a mask image
    folder = tmp_path / "frames"
    folder.mkdir()
    for f in sorted(SAMPLE.glob("coupon_*.png"))[:2]:
        shutil.copy(f, folder)
    s = start_server(folder)
    try:
        page, problems = _open(browser, s, "body.setup")
        page.check('input[name="stool"][value="poly"]')
        for x, y in [(20, 60), (600, 55), (620, 180)]:
            page.mouse.click(*_screen(page, x, y))
        page.mouse.dblclick(*_screen(page, 30, 185))
        page.check('input[name="stool"][value="holepoly"]')
        for x, y in [(200, 90), (260, 90)]:
            page.mouse.click(*_screen(page, x, y))
        page.mouse.dblclick(*_screen(page, 230, 140))
        roi = page.evaluate("window.dicView.roi")
        assert len(roi["outer"]["points"]) == 4 and len(roi["holes"]) == 1
        page.click("#save")
        page.wait_for_selector("#saved:not(:empty)")
        assert problems == []
        page.close()
    finally:
        s.stop()
    cfg = load_analysis(folder / "analysis.toml")
    shape = read_image(folder / "coupon_000.png").shape
    outer = [(round(x, 1), round(y, 1)) for x, y in roi["outer"]["points"]]
    hole = [(round(x, 1), round(y, 1)) for x, y in roi["holes"][0]["points"]]
    assert np.array_equal(read_image(cfg["roi"]) > 0,
                          make_roi(outer, shape) & ~make_roi(hole, shape))
