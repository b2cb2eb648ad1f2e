"""The README's examples run on the bundled sample as written, only the file names changed.

Every command of the README's "Command line" section is run through ``dic.cli.main`` in a
scratch folder, in order, with the generic names (``frames/*.tif``, ``log.csv``, ...) replaced
by the sample's files; then the "From Python" block is executed the same way. The sample's
numbers are checked against the curve it was made from (scripts/make_sample_images.py: 6061-T6
handbook values E = 68.9 GPa, Rp0.2 = 276 MPa, Rm = 310 MPa, ASM Handbook Vol. 2, from memory).
"""

from __future__ import annotations

import json
import os
import re
import shlex
from pathlib import Path

import pytest

from dic.cli import main

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_images"

#: the README's generic names -> the sample's files (the only change made to the commands).
#: The sample has no static image pair; its first two images (0.05 % strain apart) stand in.
PATHS = {
    "frames/*.tif": str(SAMPLES / "coupon_*.png"),
    "analysis.toml": str(SAMPLES / "analysis.toml"),
    "log.csv": str(SAMPLES / "force_log.csv"),
    "frame_times.csv": str(SAMPLES / "frame_times.csv"),
    "loaded.png": str(SAMPLES / "coupon_015.png"),
    "ref.png": str(SAMPLES / "coupon_000.png"),
    "static_*.png": str(SAMPLES / "coupon_000.png") + " " + str(SAMPLES / "coupon_001.png"),
    "frames/": str(SAMPLES) + "/",
}


def readme_block(title, lang=""):
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split(f"## {title}\n", 1)[1].split("\n## ", 1)[0]
    m = re.search(r"```" + lang + r"\n(.*?)```", section, re.S)
    assert m, title
    return m.group(1)


def adapted(text):
    for generic, real in PATHS.items():
        text = text.replace(generic, real)
    return text


def commands():
    block = readme_block("Command line").replace("\\\n", " ")
    out = []
    for line in block.splitlines():
        line = line.split("  #", 1)[0].strip()
        if line:
            out.append(line)
    return out


def test_readme_lists_the_commands_it_promises():
    names = [shlex.split(c)[1] for c in commands()]
    assert names == ["run", "run", "info", "tensile", "report", "export", "pattern", "noise",
                     "advise", "view", "view", "run"]


def run_view(words, cwd):
    """``dic view`` as written, in its own process: it prints its address, serves the page
    (fetched once here with the token in the address) and stops on Ctrl-C with exit code 0.
    ``BROWSER=true`` makes the standard library's webbrowser open nothing (common practice, no
    source: the documented $BROWSER variable of Python's webbrowser module)."""
    import signal
    import subprocess
    import sys
    import urllib.request

    env = dict(os.environ, BROWSER="true", PYTHONPATH=str(ROOT))
    with subprocess.Popen([sys.executable, "-m", "dic", *words[1:]], cwd=cwd, env=env,
                          stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True) as proc:
        try:
            line = proc.stdout.readline()  # blocks until the server prints its address
            m = re.search(r"(http://127\.0\.0\.1:\d+/\S*)", line)
            assert m, (words, line)
            with urllib.request.urlopen(m.group(1), timeout=60) as r:
                assert r.status == 200 and b"<html" in r.read().lower()
        finally:
            proc.send_signal(signal.SIGINT)
            try:
                _out, err = proc.communicate(timeout=60)
            except subprocess.TimeoutExpired:
                proc.kill()  # a server that ignores Ctrl-C fails the test, never hangs it
                _out, err = proc.communicate()
                err = "did not stop on Ctrl-C within 60 s\n" + err
    assert proc.returncode == 0, (words, err)


def test_every_command_line_example_and_the_python_example_run_on_the_sample(
        tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    for cmd in commands():
        words = shlex.split(adapted(cmd))
        # a shell would expand the glob of static images; the noise command gets the files
        assert words[0] == "dic"
        if words[1] == "view":  # serves until Ctrl-C: run it in a process of its own
            run_view(words, tmp_path)
            continue
        code = main(words[1:])
        out, err = capsys.readouterr()
        assert code == 0, (cmd, err[-2000:])
        assert "Traceback" not in err, cmd
    # the tensile example: numbers within the bars of issue 12 against the generating curve
    d = json.loads((tmp_path / "tensile_folder" / "tensile.json").read_text())
    v = {k: x["value"] for k, x in d["values"].items()}
    assert v["E"] == pytest.approx(68_900.0, rel=0.01)
    assert v["nu"] == pytest.approx(0.33, abs=0.01)
    assert v["Rp0.2"] == pytest.approx(276.0, rel=0.01)
    assert v["Rm"] == pytest.approx(310.0, rel=0.005)
    assert d["values"]["E"]["points"] >= 8 and not d["warnings"]
    # dic report found the stored gauges and tensile results by itself
    html = (tmp_path / "report_folder" / "report.html").read_text(encoding="utf-8")
    assert "Tensile results" in html and "Gauge readings" in html
    assert "(Rp0.2)" in html and "(n)" in html and "(r)" in html
    # the analysis-file run wrote its own tensile results and report
    assert (tmp_path / "results_folder" / "tensile.json").is_file()
    cfg = (tmp_path / "results_folder" / "report.html").read_text(encoding="utf-8")
    assert "Basis and uncertainty" in cfg and "(n)" in cfg and "(r)" in cfg

    # the "From Python" block, with the same names changed, in a fresh folder
    py = tmp_path / "py"
    py.mkdir()
    os.chdir(py)
    code = adapted(readme_block("From Python", "python"))
    scope: dict = {}
    exec(compile(code, "README From Python", "exec"), scope)  # noqa: S102 (our own README)
    capsys.readouterr()
    res = scope["tensile"].results
    assert res["E"].value == pytest.approx(68_900.0, rel=0.01)
    assert scope["results"].scale == pytest.approx(0.08)
    scope["results"].close()
