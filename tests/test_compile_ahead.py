"""Kernels compiled ahead in a second process (dic.matching._ahead, dic.matching._ahead_build)."""

import os
import subprocess
import sys
import textwrap
import threading
import time

import pytest

import dic
from dic.matching import _ahead

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
#: the package in use here (the second process must import the same)
PKG = os.path.dirname(os.path.abspath(dic.__file__))

# a first run on a curved field (second-order points: the 'auto' shape choice uses every
# kernel of _ahead.KERNELS), reporting for each of them how often the run had to compile it
# (numba's cache misses) and how often it loaded it from the compile cache
_RUN = textwrap.dedent("""
    import importlib, json
    import numpy as np
    from scipy import ndimage
    import dic
    from dic.matching._ahead import KERNELS
    n = 160
    ref = ndimage.gaussian_filter(np.random.default_rng(1).normal(size=(n, n)), 1.5)
    ref = 128.0 + 100.0 * ref / np.abs(ref).max()
    yy, xx = np.mgrid[0:n, 0:n].astype(float)
    dfm = ndimage.map_coordinates(ref, [yy, xx - 4e-4 * (xx - n / 2) ** 2], order=3)
    f = dic.correlate(ref, dfm, subset=21, step=8)
    out = {"second": f.settings["shape_order_counts"]["second"]}
    for name, mod, fn in KERNELS:
        st = getattr(importlib.import_module(mod), fn).stats
        out[name] = [sum(st.cache_misses.values()), sum(st.cache_hits.values())]
    print(json.dumps(out))
""")


def _env(cache, ahead):
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache), DIC_COMPILE_AHEAD=ahead)
    env["PYTHONPATH"] = os.pathsep.join([ROOT] + [p for p in [env.get("PYTHONPATH")] if p])
    return env


def test_kernels_compiled_ahead_are_the_ones_a_run_loads(tmp_path):
    import json

    names = [k[0] for k in _ahead.KERNELS]
    # the second process, run to its end in an empty compile cache
    child = subprocess.run(_ahead.command(names), env=_env(tmp_path, "0"),
                           capture_output=True, text=True, timeout=600)
    assert child.returncode == 0, child.stderr
    lines = child.stdout.splitlines()
    assert lines[0].split(None, 1) == ["package", PKG]
    assert " ".join(lines[1:]).split() == [w for n in names for w in ("start", n, "ready", n)]
    # a run in a fresh process on that cache compiles none of them: the signatures the second
    # process built are the ones the run calls (the oracle is numba's own bookkeeping,
    # Dispatcher.stats: cache misses are compiles, cache hits loads)
    run = subprocess.run([sys.executable, "-c", _RUN], env=_env(tmp_path, "0"),
                         capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr
    stats = json.loads(run.stdout.strip().splitlines()[-1])
    assert stats.pop("second") > 0
    for name in names:
        misses, hits = stats[name]
        assert misses == 0 and hits >= 1, (name, misses, hits)


def test_the_second_process_imports_this_package_not_one_in_its_directory(tmp_path):
    # run from the top of a source tree after 'pip install .', the current directory holds
    # another copy of the package: the second process must fill the cache of the one in use
    decoy = tmp_path / "dic"
    decoy.mkdir()
    (decoy / "__init__.py").write_text("raise ImportError('the copy in the current directory')")
    child = subprocess.run(_ahead.command([]), cwd=tmp_path, capture_output=True, text=True,
                           timeout=120)
    assert child.returncode == 0, child.stderr
    assert child.stdout.strip().split(None, 1) == ["package", PKG]


@pytest.fixture
def fresh(monkeypatch):
    """The module as in a new process, with every kernel's cache taken as empty."""
    monkeypatch.setattr(_ahead, "_started", False)
    monkeypatch.setattr(_ahead, "_events", {})
    monkeypatch.setattr(_ahead, "_owner", None)
    monkeypatch.setattr(_ahead, "_building", [None])
    monkeypatch.setattr(_ahead, "_procs", [])
    monkeypatch.setattr(_ahead, "_cached", lambda dispatcher: False)
    monkeypatch.delenv("DIC_COMPILE_AHEAD", raising=False)
    return monkeypatch


def test_no_interpreter_to_start_means_no_wait(fresh):
    fresh.setattr(sys, "executable", os.path.join(os.sep, "no", "such", "python"))
    assert _ahead.start() is False
    t = time.perf_counter()
    for name, _, _ in _ahead.KERNELS:
        _ahead.ready(name)
    assert time.perf_counter() - t < 1.0


def test_a_second_process_that_dies_releases_every_wait(fresh):
    # an interpreter that exits at once without reporting anything (a crash, say)
    fresh.setattr(sys, "executable", sys.executable)
    fresh.setattr(_ahead.subprocess, "Popen", _popen_that_exits)
    assert _ahead.start() is True
    t = time.perf_counter()
    for name, _, _ in _ahead.KERNELS:
        _ahead.ready(name)
    assert time.perf_counter() - t < 30.0


_POPEN = subprocess.Popen


def _popen_that_exits(args, **kw):
    return _POPEN([sys.executable, "-c", "pass"], **kw)


def test_waits_only_for_the_kernel_the_second_process_is_building(fresh):
    # a second process starved of time (its priority is the lowest) is still on another
    # kernel: no wait, the kernel is compiled here; on this one: a wait, but a bounded one
    events = {"next_wave": threading.Event(), "second_order": threading.Event()}
    fresh.setattr(_ahead, "_events", events)
    fresh.setattr(_ahead, "_owner", os.getpid())
    fresh.setattr(_ahead, "_building", ["flat_subsets"])
    t = time.perf_counter()
    _ahead.ready("next_wave")
    assert time.perf_counter() - t < 0.5
    fresh.setattr(_ahead, "_building", ["second_order"])
    fresh.setattr(_ahead, "WAIT", {"second_order": 0.3})
    t = time.perf_counter()
    _ahead.ready("second_order")
    assert 0.25 <= time.perf_counter() - t < 5.0
    threading.Timer(0.2, events["second_order"].set).start()
    fresh.setattr(_ahead, "WAIT", {"second_order": 30.0})
    t = time.perf_counter()
    _ahead.ready("second_order")     # released as soon as the kernel is reported ready
    assert time.perf_counter() - t < 5.0


def test_compiles_the_next_kernels_itself_while_it_waits_for_the_solver(fresh):
    # while the second process builds the first-order solver, this process builds the small
    # kernels the run needs next and the second process has not begun (not one it has begun
    # or finished), then waits for the solver, a bounded time
    from dic.matching import _ahead_build

    names = ("first_order",) + _ahead.MEANWHILE["first_order"]
    events = {n: threading.Event() for n in names}
    events["fill_between"].set()           # already reported by the second process
    fresh.setattr(_ahead, "_events", events)
    fresh.setattr(_ahead, "_owner", os.getpid())
    fresh.setattr(_ahead, "_building", ["first_order"])
    fresh.setattr(_ahead, "WAIT", {"first_order": 0.3})
    built = []
    assert _ahead.builder is _ahead_build.build     # set by dic.matching on import

    def spy(name):                          # the real build, recorded
        built.append(name)
        _ahead_build.build(name)

    fresh.setattr(_ahead, "builder", spy)
    t = time.perf_counter()
    _ahead.ready("first_order")
    assert time.perf_counter() - t >= 0.25
    assert built == [n for n in _ahead.MEANWHILE["first_order"] if n != "fill_between"]
    assert all(events[n].is_set() for n in _ahead.MEANWHILE["first_order"])
    # the solver reported ready meanwhile: nothing more is built, no wait
    built.clear()
    for n in _ahead.MEANWHILE["first_order"]:
        events[n].clear()
    events["first_order"].set()
    t = time.perf_counter()
    _ahead.ready("first_order")
    assert built == [] and time.perf_counter() - t < 0.5


def test_a_forked_process_does_not_wait_for_its_parents_second_process(fresh):
    # a fork copies the unset events but not the thread that would set them
    fresh.setattr(_ahead, "_events", {"next_wave": threading.Event()})
    fresh.setattr(_ahead, "_owner", os.getpid() + 1)
    fresh.setattr(_ahead, "_building", ["next_wave"])
    t = time.perf_counter()
    _ahead.ready("next_wave")
    assert time.perf_counter() - t < 1.0


def test_the_second_process_ends_with_this_one(fresh):
    # a second process still compiling when the program ends is stopped (stop() runs at exit)
    fresh.setattr(_ahead.subprocess, "Popen", lambda args, **kw: _POPEN(
        [sys.executable, "-c", "import time; time.sleep(60)"], **kw))
    assert _ahead.start() is True
    (proc,) = _ahead._procs
    assert proc.poll() is None
    _ahead.stop()
    assert proc.wait(timeout=10) is not None
    for name, _, _ in _ahead.KERNELS:   # and every wait is released
        _ahead.ready(name)


def test_a_run_needing_both_solvers_builds_the_second_order_one_there_first(fresh):
    # dic run's warm-up: the second process starts on the second-order solver and leaves the
    # first-order one to this process (the two longest compiles side by side); the default
    # order starts with the first-order solver
    seen = []

    def popen(args, **kw):
        seen.append(list(args[3:]))              # the kernel names after "-c CODE"
        return _popen_that_exits(args, **kw)

    fresh.setattr(_ahead.subprocess, "Popen", popen)
    assert dic.matching.compile_ahead(second_order=True) is True
    assert seen[0] == list(_ahead.SECOND_ORDER_FIRST)
    assert "first_order" not in seen[0]
    assert dic.matching.compile_ahead() is False           # once per process
    fresh.setattr(_ahead, "_started", False)
    assert _ahead.start() is True
    assert seen[1] == [name for name, _, _ in _ahead.KERNELS] and seen[1][0] == "first_order"
    _ahead.stop()


@pytest.mark.parametrize("shape, second", [("auto", True), ("quadratic", True),
                                           ("affine", False)])
def test_dic_run_warm_up_asks_for_the_solvers_it_will_use(fresh, shape, second):
    # the warm-up matches a bent pair, so with 'auto' (or second order) it needs both solvers
    from dic.cli import run as cli_run

    asked = []
    fresh.setattr(dic.matching, "compile_ahead", lambda second_order=False: asked.append(
        second_order))
    cli_run._load_kernels({"shape_function": shape})
    assert asked == [second]


def test_started_once_per_process_and_switched_off_by_the_environment(fresh):
    fresh.setenv("DIC_COMPILE_AHEAD", "0")
    assert _ahead.start() is False
    fresh.setenv("DIC_COMPILE_AHEAD", "1")
    assert _ahead.start() is False      # already tried in this process
