"""The HTML and PDF report (dic.report) and the ``dic report`` command (dic.cli.report).

The HTML file is opened in headless Chromium (Debian package ``chromium``), which must render
it with every figure decoded and nothing on its console; a control page with a broken image
and a script error shows that the check catches both.
"""

from __future__ import annotations

import argparse
import base64
import re
import shutil
import subprocess
from html.parser import HTMLParser
from types import SimpleNamespace

import numpy as np
import pytest

import dic
from dic.images import synth
from dic.cli.report import register
from dic.report import CAUTIONS, write_report
from dic.sequence import open_for_writing

SHAPE = (96, 176)
SCALE = 0.05
STEP = 6
SUBSET = 15
N = 5
ALL_SECTIONS = ["overview", "settings", "uncertainty", "maps", "measures", "gauges", "tensile",
                "quality", "cautions"]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    pat = synth.make_speckle(SHAPE, radius=2.5, seed=8, contrast=600)
    paths = []
    for k, e in enumerate(np.linspace(0.0, 0.05, N)):
        d = synth.tensile_neck(0.6 * e, centre=(88.0, 48.0), neck_strain=0.4 * e,
                               neck_width=30.0) if k else None
        img = synth.render(pat, SHAPE, d, noise=0.5, seed=k)
        paths.append(dic.images.io.write_image(folder / f"c{k}.png", img * 16, bits=16))
    mask = np.zeros(SHAPE, bool)
    mask[14:82, 8:168] = True
    res = dic.track(paths, folder / "results.h5", subset=SUBSET, step=STEP, roi=mask,
                    scale=SCALE)
    return res, folder


def _inputs(n):
    gauges = [SimpleNamespace(name="L0", frames=np.arange(n), values=np.linspace(0, 0.03, n),
                              unit="strain", p0=(30.0, 48.0), p1=(150.0, 48.0)),
              SimpleNamespace(name="width", frames=np.arange(n),
                              values=-np.linspace(0, 0.01, n), unit="")]

    class Tensile:
        def to_dict(self):
            return {"modulus_gpa": 69.1, "poisson_ratio": 0.33, "proof_strength_rp02_mpa": 276.0,
                    "n_value": {"value": 0.10, "unit": "", "label": "Strain-hardening "
                                                                    "exponent n"}}

    class Metrology:
        def to_dict(self):
            return {"strain_noise_floor_microstrain": 21.5, "displacement_noise_px": 0.006,
                    "spatial_resolution_px": 48.0}

    return gauges, Tensile(), Metrology()


class _Page(HTMLParser):
    """Collects section ids, images, links and text of an HTML page."""

    def __init__(self):
        super().__init__()
        self.sections, self.imgs, self.urls, self.text, self.meta = [], [], [], [], {}
        self.body = {}

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "section":
            self.sections.append(a.get("id"))
        if tag == "img":
            self.imgs.append(a)
        if tag == "body":
            self.body = a
        if tag == "meta" and "http-equiv" in a:
            self.meta[a["http-equiv"].lower()] = a.get("content", "")
        for key in ("src", "href", "action", "data", "poster"):
            if key in a:
                self.urls.append(a[key])

    def handle_data(self, data):
        self.text.append(data)


def _parse(text):
    p = _Page()
    p.feed(text)
    p.all_text = " ".join(p.text)
    return p


@pytest.fixture(scope="module")
def full_report(run, tmp_path_factory):
    res, _ = run
    gauges, tensile, metro = _inputs(len(res))
    out = tmp_path_factory.mktemp("full")
    html, pdf = write_report(res.path, out, window=5, gauges=gauges, tensile=tensile,
                             metrology=metro, frames=[2, -1], title="Coupon A7")
    return html, pdf


# --------------------------------------------------------------------------------------------
# content
# --------------------------------------------------------------------------------------------
def test_html_is_self_contained_with_every_section(full_report):
    html, _ = full_report
    text = html.read_text(encoding="utf-8")
    page = _parse(text)
    assert page.sections == ALL_SECTIONS
    # no address outside the file: every src/href is inline data or an anchor in the page
    assert page.urls and all(u.startswith(("data:", "#")) for u in page.urls)
    assert not re.search(r"(?i)(https?:|ftp:)//", text.replace("doi:10.", ""))
    assert "<link" not in text.lower()
    # the page forbids any loading (W3C Content Security Policy Level 3: default-src 'none')
    assert "default-src 'none'" in page.meta["content-security-policy"]
    # figures: PNG data (PNG signature, ISO/IEC 15948 section 5.2)
    assert len(page.imgs) >= 6
    for img in page.imgs:
        data = base64.b64decode(img["src"].split(",", 1)[1])
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        assert img.get("alt")
    assert "Coupon A7" in page.all_text


def test_settings_follow_the_idics_form(full_report):
    page = _parse(full_report[0].read_text(encoding="utf-8"))
    t = page.all_text
    for label in ("Subset size", "Step (grid spacing)", "Subset shape function",
                  "Matching criterion", "Interpolation", "Strain window",
                  "Virtual strain gauge (VSG)", "Strain measure", "Strain noise floor",
                  "Spatial resolution"):
        assert label in t
    # VSG = (window - 1) * step + subset (iDICs Good Practices Guide 2018, doi:10.32720/
    # idics/gpg.ed1), in px and mm
    vsg = (5 - 1) * STEP + SUBSET
    assert f"{vsg} px ({vsg * SCALE:.3g} mm)" in t
    assert "21.5 \u00b5\u03b5" in t  # the metrology input, with its unit
    assert "tensor shear" in t
    # how sure a point must be to be measured: dic.correlate's default max_sigma (2 px) and
    # the propagation's own limit (0.2 px), both of this package
    assert "standard deviation exceeds 2 px are left out" in t and "above 0.2 px" in t
    assert "converged slowly" in t
    # standards named beside the tensile results (ASTM E111 modulus, ASTM E132 Poisson's ratio,
    # ISO 6892-1 proof strength; from memory)
    for std in ("ASTM E111", "ASTM E132", "ISO 6892-1"):
        assert std in t
    # the cautions of the project design (section 9): ISO 9513 / ASTM E83, indicative,
    # machine safety
    for c in CAUTIONS:
        assert c in t
    assert "ISO 9513" in t and "ASTM E83" in t


def test_data_quality_says_how_sure_the_points_are(run, full_report):
    # the sentence on the standard deviations of the last frame's points carries the numbers
    # of the results file itself: median, 95th percentile and largest of max(std_u, std_v)
    # (numpy's percentile; common practice, no source), with 3 significant digits
    res, _ = run
    f = res.field(len(res) - 1)
    s = np.fmax(f.std_u, f.std_v)[f.valid]
    page = _parse(full_report[0].read_text(encoding="utf-8"))
    text = " ".join(page.all_text.split())
    assert (f"has a median of {np.median(s):.3g} px, 95 % of them are within "
            f"{np.percentile(s, 95):.3g} px and the largest is {s.max():.3g} px") in text
    # none of these clean, finely speckled points is less sure than 0.2 px
    assert s.max() < 0.2 and "less sure than 0.2 px and weigh less" not in text
    # three of them made less sure: counted, with their share of the measured points
    from dic.report._content import _how_sure

    idx = np.argwhere(f.valid)[:3]
    f.std_u[idx[:, 0], idx[:, 1]] = 0.5
    line = _how_sure(f, 4)
    assert (f"3 ({100 * 3 / s.size:.1f} %) are less sure than 0.2 px and weigh less in the "
            f"strain fit") in line and "the largest is 0.5 px" in line


def test_tables_of_histories_and_nested_tensile_values(run, tmp_path):
    res, _ = run
    n = len(res)
    table = SimpleNamespace(frame=np.arange(n), columns={"axial": np.linspace(0, 0.02, n)},
                            units={"axial": "mm/mm"})
    tensile = {"software": "x", "caution": "Indicative only.",
               "values": {"E": {"key": "E", "name": "modulus", "value": 70000.0,
                                "unit": "MPa", "standard": "ASTM E111",
                                "method": "least squares", "fit_range": [20.0, 150.0],
                                "range_unit": "MPa"},
                          "r": {"key": "r", "name": "plastic strain ratio", "value": None,
                                "unit": "-", "standard": "ISO 10113", "method": "",
                                "note": "no transverse strain"}},
               "notes": ["force log shifted by 0.1 s"]}
    html, _ = write_report(res.path, tmp_path, window=5, frames=[-1], gauges=table,
                           tensile=tensile)
    page = _parse(html.read_text(encoding="utf-8"))
    t = page.all_text
    assert page.sections == ["overview", "settings", "maps", "measures", "gauges", "tensile",
                             "quality", "cautions"]
    assert "modulus (E)" in t and "70000 MPa" in t and "data from 20 to 150 MPa" in t
    assert "no transverse strain" in t and "force log shifted by 0.1 s" in t
    assert "Indicative only." in t
    # the last reading of the gauge column, in % (2 % = 0.02 mm/mm)
    assert "2 %" in t


def test_sections_without_input_are_left_out(run, tmp_path):
    res, _ = run
    html, _ = write_report(res.path, tmp_path, window=5)
    page = _parse(html.read_text(encoding="utf-8"))
    assert page.sections == ["overview", "settings", "maps", "measures", "quality", "cautions"]
    assert "not assessed for this analysis" in page.all_text


def test_pdf_holds_the_report(full_report):
    _, pdf = full_report
    data = pdf.read_bytes()
    # a PDF file starts with %PDF- and ends with %%EOF (ISO 32000-1, 7.5.2 and 7.5.5)
    assert data[:5] == b"%PDF-" and data.rstrip().endswith(b"%%EOF")
    pages = len(re.findall(rb"/Type\s*/Page[^s]", data))
    # nine sections and at least six figures do not fit on fewer than four A4 pages
    assert pages >= 4
    assert b"Coupon A7" in data  # document title in the metadata (uncompressed)


def test_pdf_leaves_no_heading_alone_at_a_page_foot(full_report):
    # the text of every page as poppler's pdftotext reads it (Debian package poppler-utils)
    exe = shutil.which("pdftotext")
    if exe is None:
        pytest.skip("pdftotext is not installed (Debian: apt-get install -y poppler-utils)")
    _, pdf = full_report
    text = subprocess.run([exe, "-layout", str(pdf), "-"], capture_output=True, text=True,
                          check=True).stdout
    pages = [p for p in text.split("\f") if p.strip()]
    assert len(pages) >= 4
    for k, page in enumerate(pages, 1):
        lines = [ln.strip() for ln in page.splitlines()
                 if re.search(r"[A-Za-z]", ln) and not re.search(r"page \d+\s*$", ln)]
        # a section heading ("4. Strain maps") as the last line of a page is alone at its foot
        assert not re.fullmatch(r"\d+\. [A-Z][a-z ]+", lines[-1]), (k, lines[-1])


# --------------------------------------------------------------------------------------------
# in a browser
# --------------------------------------------------------------------------------------------
def _chromium(page, tmp_path):
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        pytest.skip("headless Chromium is not installed (Debian: apt-get install -y chromium)")
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}", "--enable-logging=stderr",
           "--v=0", "--virtual-time-budget=5000", "--dump-dom", page.as_uri()]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    # page messages (console.log/error, uncaught exceptions, blocked loads) are logged by
    # Chromium as lines with CONSOLE; nothing else the browser says about itself counts
    console = [ln for ln in done.stderr.splitlines()
               if "CONSOLE" in ln or "Uncaught" in ln or "Refused to" in ln]
    return done.stdout, console


def test_report_renders_in_headless_chromium(full_report, tmp_path):
    html, _ = full_report
    dom, console = _chromium(html, tmp_path)
    assert console == []
    page = _parse(dom)
    assert page.sections == ALL_SECTIONS
    # the page's own script marks the body once every image has decoded (naturalWidth > 0)
    assert page.body.get("data-images") == "all-decoded"
    assert len(page.imgs) >= 6
    assert _reader_faults(dom) == []


class _Visible(HTMLParser):
    """The text a reader sees (no script or style) and every table cell, from a rendered DOM."""

    def __init__(self):
        super().__init__()
        self.skip, self.text, self.cells, self.cell = 0, [], [], None

    def handle_starttag(self, tag, attrs):
        if tag in ("script", "style"):
            self.skip += 1
        if tag == "td":
            self.cell = []

    def handle_endtag(self, tag):
        if tag in ("script", "style"):
            self.skip -= 1
        if tag == "td" and self.cell is not None:
            self.cells.append("".join(self.cell).strip())
            self.cell = None

    def handle_data(self, data):
        if not self.skip:
            self.text.append(data)
            if self.cell is not None:
                self.cell.append(data)


def _reader_faults(dom):
    """What a reader would query in the visible text: code keys, jargon, empty or bare cells."""
    v = _Visible()
    v.feed(dom)
    text = " ".join(v.text)
    faults = [f"code key {m!r}" for m in re.findall(r"\b[a-z]+(?:_[a-z]+)+\b", text)]
    # the metrological-efficiency short form of DIC Challenge 2.0 (Reu et al. 2022) is jargon
    faults += ["'Mei'"] if re.search(r"\bMei\b", text) else []
    faults += [f"empty or bare cell {c!r}" for c in v.cells if not c.strip(" ,;:\u2013-")]
    faults += [f"negative zero in {c!r}" for c in v.cells if re.search(r"(?<![\d.])-0(?![.\d])", c)]
    return faults


@pytest.fixture(scope="module")
def checked_report(run, tmp_path_factory):
    """A report whose uncertainty section comes from a real self-check of the settings."""
    from dic.metrology import self_check

    res, folder = run
    ref = dic.images.io.read_image(folder / "c0.png")
    check = self_check(ref, subset=SUBSET, step=STEP, window=5, shifts=(0.0, 0.5),
                       roi=res.roi_mask)
    out = tmp_path_factory.mktemp("checked")
    gauges, tensile, metro = _inputs(len(res))
    html, _ = write_report(res.path, out, window=5, metrology=[check, metro], frames=[-1])
    return html, check


def test_uncertainty_reads_as_plain_words_in_chromium(checked_report, tmp_path):
    html, check = checked_report
    dom, console = _chromium(html, tmp_path)
    assert console == []
    assert _reader_faults(dom) == []
    v = _Visible()
    v.feed(dom)
    text = " ".join(v.text)
    # the self-check's strain noise, in microstrain with its unit (1 microstrain = 1e-6)
    xx = round(check.strain_noise["xx"] * 1e6)
    assert re.search(rf"Strain noise.*xx {xx:.3g} \u00b5\u03b5", text)
    # the published method, named once (Reu et al. 2022, DIC Challenge 2.0)
    assert text.count("Reu et al.") == 1
    assert "What it means" in text


def test_reader_check_catches_code_keys():
    # control page: each fault the check is meant to catch, caught (common practice, no source)
    bad = ("<table><tr><td>settings / vsg</td><td></td></tr><tr><td>Mei u</td><td>,</td></tr>"
           "<tr><td>strain bias xx</td><td>-0</td></tr></table>")
    faults = _reader_faults(bad)
    assert any("code key" in f for f in faults) is False  # 'settings / vsg' has no underscore
    assert "'Mei'" in faults
    assert sum("empty or bare" in f for f in faults) == 2
    assert any("negative zero" in f for f in faults)
    assert _reader_faults("<p>axial.green_lagrange</p>") == ["code key 'green_lagrange'"]


def test_chromium_check_catches_errors(tmp_path):
    bad = tmp_path / "bad.html"
    bad.write_text('<!DOCTYPE html><html><head><meta charset="utf-8"></head>'
                   '<body data-images="pending"><img src="data:image/png;base64,AAAA">'
                   "<script>console.error('deliberate'); missingFunction();</script>"
                   "<script>var i = document.images[0]; document.body.setAttribute("
                   "'data-images', i.naturalWidth > 0 ? 'all-decoded' : 'broken');</script>"
                   "</body></html>", encoding="utf-8")
    dom, console = _chromium(bad, tmp_path)
    assert any("deliberate" in ln for ln in console)
    assert any("missingFunction" in ln for ln in console)
    assert _parse(dom).body.get("data-images") == "broken"


# --------------------------------------------------------------------------------------------
# bad input
# --------------------------------------------------------------------------------------------
def test_report_errors(run, tmp_path):
    res, folder = run
    with pytest.raises(ValueError, match="frame 12 does not exist; .* frames 0 to 4"):
        write_report(res.path, tmp_path, frames=[12], window=5)
    with pytest.raises(ValueError, match="use one of: green-lagrange"):
        write_report(res.path, tmp_path, measure="cauchy", window=5)
    with pytest.raises(ValueError, match="window: 4 is not an odd"):
        write_report(res.path, tmp_path, window=4)
    with pytest.raises(ValueError, match="metrology: expected an object with to_dict"):
        write_report(res.path, tmp_path, window=5, metrology=42)
    with pytest.raises(OSError):
        write_report(folder / "none.h5", tmp_path)
    (tmp_path / "file").write_text("x")
    with pytest.raises(OSError, match="out_dir"):
        write_report(res.path, tmp_path / "file" / "sub", window=5)
    empty = tmp_path / "empty.h5"
    x, y = np.meshgrid([10.0, 20.0, 30.0], [10.0, 20.0, 30.0])
    open_for_writing(empty, settings={"subset": 15, "step": 10}, grid_x=x, grid_y=y,
                     n_frames=1, image_names=["a.png"], image_sha256=["0" * 64]).close()
    with pytest.raises(ValueError, match="no completed frames"):
        write_report(empty, tmp_path)


def _main(argv):
    parser = argparse.ArgumentParser(prog="dic")
    register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    return args.func(args)


def test_report_command(run, tmp_path, capsys):
    res, folder = run
    out = tmp_path / "rep"
    # RESULTS may be the output folder holding results.h5
    assert _main(["report", str(folder), "--out", str(out), "--frames", "-1", "--window", "5",
                  "--measure", "log"]) == 0
    assert sorted(p.name for p in out.iterdir()) == ["report.html", "report.pdf"]
    printed = capsys.readouterr().out
    assert "report.html" in printed and "report.pdf" in printed
    assert "Hencky" in (out / "report.html").read_text(encoding="utf-8")
    with pytest.raises(ValueError, match="--frames: frame 5 does not exist") as info:
        _main(["report", str(res.path), "--out", str(out), "--frames", "5", "--window", "5"])
    assert "\n" not in str(info.value)
    with pytest.raises(ValueError, match="use one of: green-lagrange"):
        _main(["report", str(res.path), "--measure", "true-ish"])
    with pytest.raises(FileNotFoundError, match="RESULTS: no such file"):
        _main(["report", str(folder / "nothing.h5")])


def _real_tensile():
    """Tensile results from a Hollomon material (sigma = K eps_p^n after a linear range; true
    strains split additively, volume-constant plastic flow with width/thickness ratio r,
    ISO 10113; Hollomon, Trans. AIME 162 (1945) 268, from memory)."""
    from dic.tensile.results import tensile_results

    E, K, n, nu, r = 70_000.0, 450.0, 0.18, 0.33, 1.5
    sy = K * 0.002 ** n
    sig = np.concatenate([np.linspace(0.0, sy, 60), np.maximum(K * np.arange(1e-4, 0.3, 1e-4)
                                                               ** n, sy)])
    ep = np.concatenate([np.zeros(60), np.arange(1e-4, 0.3, 1e-4)])
    e = np.expm1(sig / E + ep)
    w = np.expm1(-nu * sig / E - r / (1 + r) * ep)
    return tensile_results(e, sig / (1 + e), transverse=w), {"E": E, "n": n, "r": r}


def test_report_with_real_tensile_results_and_gauge_histories(run, tmp_path):
    from dic.tensile import gauges as G
    from dic.tensile.workflow import write_sidecar

    res, _ = run
    with dic.load_results(res.path) as r:
        hist = G.gauge_histories(r, [G.axial_line(r, None), G.transverse_line(r)], window=5)
    tens, mat = _real_tensile()
    html, pdf = write_report(res.path, tmp_path / "a", window=5, frames=[-1], gauges=hist,
                             tensile=tens)
    t = _parse(html.read_text(encoding="utf-8")).all_text
    # one unit per quantity, as the command line prints them: E in GPa, strengths in MPa,
    # strains in % (common practice for tensile certificates, no source)
    assert f"{tens['E'].value / 1000:.2f} GPa" in t
    assert f"{tens['Rp0.2'].value:.1f} MPa" in t and f"{tens['Rm'].value:.1f} MPa" in t
    assert f"{100 * tens['Ag'].value:.2f} %" in t and f"{100 * tens['Agt'].value:.2f} %" in t
    # the symbols of every row, n and r included, and the basis of E (records and R^2)
    for sym in ("(E)", "(nu)", "(Rp0.2)", "(Rm)", "(Ag)", "(Agt)", "(n)", "(r)"):
        assert sym in t, sym
    assert f"{tens['E'].points} records, R^2" in t
    # the real numbers: the Hollomon exponent and r by construction (ISO 10275 / ISO 10113)
    assert tens["n"].value == pytest.approx(mat["n"], rel=0.01)
    assert tens["r"].value == pytest.approx(mat["r"], rel=0.01)
    # the gauge readings in words, not code names (common practice, no source)
    assert "Gauge readings" in t and "axial gauge, engineering (biot) strain" in t.lower()
    assert "axial.engineering" not in t
    assert pdf.stat().st_size > 10_000
    # stored beside the results file, the report finds them by itself
    write_sidecar(res.path, hist, tens)
    try:
        html2, _ = write_report(res.path, tmp_path / "b", window=5, frames=[-1])
        t2 = _parse(html2.read_text(encoding="utf-8")).all_text
        assert "(n)" in t2 and f"{tens['E'].value / 1000:.2f} GPa" in t2
        assert "axial gauge, engineering (biot) strain" in t2.lower()
    finally:
        (res.path.parent / (res.path.name + ".tensile.json")).unlink()


def test_pdf_table_columns_never_break_a_word():
    # a short first column beside a very long second one: the first still fits its longest
    # word on one line (the PDF wraps cell text at the column's width in characters; common
    # practice, no source), and a table with short texts keeps the proportional widths
    import textwrap

    from dic.report._document import Table
    from dic.report._pdf import _Pages, _chars

    long = " ".join(["points whose standard deviation exceeds 2 px are left out"] * 6)
    t = Table(rows=[("Interpolation", "quintic B-spline"), ("Uncertain points", long),
                    ("Subset size", "21 px")], header=("Parameter", "Value"))
    size, ncol, widths = _Pages._table_layout(t)
    assert ncol == 2
    for row in t.rows:
        for text, w in zip(row, widths):
            # every wrapped line is made of whole words of the cell
            for line in textwrap.wrap(text, _chars(w - 0.1, size)):
                assert set(line.split()) <= set(text.split()), line
    short = Table(rows=[("a", "bb"), ("ccc", "d")], header=("x", "y"))
    _s, _n, w2 = _Pages._table_layout(short)
    assert w2[0] == pytest.approx(w2[1])
