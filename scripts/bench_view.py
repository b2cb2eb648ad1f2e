"""Benchmark of the review page (``dic view``): time to first picture and frame switching.

Time to first picture: from starting ``dic view RESULTS --no-browser`` (a new process: imports,
opening the results file, starting the server) until the page in headless Chromium shows the
image with the strain map over it. The browser is started beforehand, as a user's browser
usually is. Frame switching: from moving the frame slider to the new map being on the page,
first for frames never shown (the strain is computed), then for frames shown before.
The peer figure is the library's own ``Results.strain(k)`` on the same file: the least any
frame switch can cost.

Targets (issue 16): first picture < 2 s, frame switching < 0.3 s on a 2-core machine.

Usage::

    python scripts/bench_view.py [RESULTS]

Without RESULTS the sample analysis is run first (``dic run --config
sample_images/analysis.toml``) into a temporary folder.
"""

from __future__ import annotations

import os
import random
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync"]


def _cpu_seconds(pid):
    """User + system CPU time of a process so far (Linux /proc; NaN elsewhere)."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError):
        return float("nan")


def main():
    import dic
    from playwright.sync_api import sync_playwright

    tmp = None
    if len(sys.argv) > 1:
        results = Path(sys.argv[1])
    else:
        tmp = Path(tempfile.mkdtemp(prefix="bench_view_"))
        print("running the sample analysis first ...", flush=True)
        subprocess.run([sys.executable, "-m", "dic", "run", "--config",
                        str(ROOT / "sample_images" / "analysis.toml"), "--out",
                        str(tmp / "run"), "--quiet"], check=True)
        results = tmp / "run"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=chromium, args=ARGS)
            page = browser.new_page(viewport={"width": 1300, "height": 900})
            t0 = time.perf_counter()
            with subprocess.Popen([sys.executable, "-m", "dic", "view", str(results),
                                   "--no-browser"], stdout=subprocess.PIPE,
                                  stderr=subprocess.DEVNULL, text=True, env=env) as proc:
                try:
                    url = proc.stdout.readline().split(": ", 1)[1].strip()
                    t_url = time.perf_counter() - t0
                    page.goto(url)
                    page.wait_for_selector("#overlay[data-frame]")
                    page.wait_for_selector('#photo[data-loaded="1"]')
                    first = time.perf_counter() - t0
                    cpu_first = _cpu_seconds(proc.pid)
                    n = int(page.evaluate("window.dicView.info.frames"))
                    order = list(range(n - 1))
                    random.Random(1).shuffle(order)
                    cold, warm, moved = [], [], []
                    for times, frames in ((cold, order), (warm, order[::-1])):
                        for k in frames:
                            t = time.perf_counter()
                            page.locator("#frame").fill(str(k))
                            page.wait_for_selector(f'#overlay[data-frame="{k}"]')
                            times.append(time.perf_counter() - t)
                    # the map moved with the material over the image of each frame
                    page.select_option("#under", "cur")
                    page.wait_for_selector('#overlay[data-under="cur"]')
                    for k in order:
                        t = time.perf_counter()
                        page.locator("#frame").fill(str(k))
                        page.wait_for_selector(f'#overlay[data-frame="{k}"][data-under="cur"]')
                        moved.append(time.perf_counter() - t)
                finally:
                    proc.terminate()
                    proc.communicate()
            browser.close()
        with dic.load_results(results if results.is_file() else results / "results.h5") as r:
            lib = []
            for k in order:
                t = time.perf_counter()
                r.strain(k, window=9)
                lib.append(time.perf_counter() - t)
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
    ms = lambda v: f"{1000 * v:.0f} ms"  # noqa: E731
    print(f"results: {results} ({n} frames)")
    print(f"load average while measuring: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
          "(wall-clock times grow with it)")
    print(f"address printed after {ms(t_url)}; first picture after {ms(first)} "
          f"(target < 2000 ms): {'met' if first < 2 else 'NOT met'}")
    print(f"server CPU time until the first picture: {ms(cpu_first)} (what the wall-clock time "
          "comes down to on an idle machine)")
    print(f"frame switch, frames not shown before: median {ms(statistics.median(cold))}, "
          f"slowest {ms(max(cold))}")
    print(f"frame switch, frames shown before:     median {ms(statistics.median(warm))}, "
          f"slowest {ms(max(warm))}")
    print(f"frame switch, map over the image of the frame: median "
          f"{ms(statistics.median(moved))}, slowest {ms(max(moved))}")
    print(f"peer: Results.strain(k) alone, median {ms(statistics.median(lib))}; ratio of a "
          f"new frame's switch to it: {statistics.median(cold) / statistics.median(lib):.1f}")
    worst = max(max(cold), max(warm), max(moved))
    print(f"target < 300 ms per switch: {'met' if worst < 0.3 else 'NOT met'} "
          f"(slowest {ms(worst)})")


if __name__ == "__main__":
    main()
