"""Compiling the kernels a first run needs later in a second process, ahead of time.

On a fresh install every compiled kernel is built on its first call, one after the other, in
the order a run reaches them: the prefilter (about 3 s), the first-order solver (5-7 s), then
the propagation's bookkeeping, the interpolation-bias and neighbour tests (about 3 s), and, as
soon as a point needs second order (a neck), the second-order solver (about 8 s). Numba
compiles under a global lock, so threads do not help, but a second process does: it builds
the solvers into the shared compile cache while this process builds the prefilter and, while
it waits for the first-order solver, the smaller kernels (:data:`MEANWHILE`); each process
then loads from the cache what the other built instead of compiling it again. It runs at the
lowest priority, so once this process has work for every core (matching in threads) the
second process barely slows it; it ends when this process does (:func:`stop`), keeping in the
cache what it has built.

:func:`start` launches that process once, on the first matcher of a process, and only when the
cache of one of the later kernels is empty (a fresh install, or sources changed). :func:`ready`
is called before each of those kernels' first use: while the second process is building that
kernel it waits for it, a bounded time (compiling it here too would only duplicate the work);
otherwise it returns at once. Anything going wrong (no interpreter to start, a crash, a full
disk) only means the kernel is compiled here, as without this module. Set the environment
variable ``DIC_COMPILE_AHEAD=0`` to switch it off.

The second process runs ``dic.matching._ahead_build`` (see there), started by :func:`command`.
"""

from __future__ import annotations

import atexit
import os
import subprocess
import sys
import threading

#: kernels compiled ahead, in the order a run first needs them: (name, module, function)
KERNELS = (
    ("first_order", "dic.matching._icgn_kernel", "match_first"),
    ("flat_subsets", "dic.matching._icgn_kernel", "flat_subsets"),
    ("next_wave", "dic.matching._waves", "next_wave"),
    ("fill_between", "dic.matching._waves", "fill_between"),
    ("interpolation_bias", "dic.matching._interp_bias", "_bias_kernel"),
    ("median_test", "dic.matching._median_kernel", "median_outliers"),
    ("second_order", "dic.matching._icgn_kernel", "match_general"),
)
#: the second process's kernels for a run that needs both solvers (:func:`start`)
SECOND_ORDER_FIRST = ("second_order",) + tuple(
    k for k, _, _ in KERNELS if k not in ("first_order", "second_order"))
#: longest wait (s) for a kernel the second process is building: about twice its compile time
#: on a 2-core machine (0.3-1.1 s; 5-7 s for the first-order solver, 8 s for the second-order
#: one); then it is compiled here
WAIT = {"first_order": 15.0, "second_order": 15.0}
WAIT_DEFAULT = 3.0
#: kernels this process compiles itself while it waits for the one named (the second process
#: has not begun them, and the run needs them next): the first-order solver takes the second
#: process as long as the prefilter and these take this one, so the two finish together
MEANWHILE = {"first_order": ("next_wave", "fill_between", "interpolation_bias",
                             "median_test")}
_ENV = "DIC_COMPILE_AHEAD"
#: builds a kernel of :data:`KERNELS` by name in this process (``dic.matching`` sets it to
#: :func:`dic.matching._ahead_build.build` on import, :func:`set_builder`, so that this
#: module, which the kernels' modules import, imports none of them)
builder = None


def set_builder(fn) -> None:
    """Set the function :func:`ready` builds kernels with in this process (by name)."""
    global builder
    builder = fn


_lock = threading.Lock()
_started = False
_events: dict[str, threading.Event] = {}
#: the kernel the second process is building now
_building = [None]
#: the process that started the second one (a forked child has no listener: it never waits)
_owner = None
#: the second process (a list, so that tests can start several)
_procs: list = []


def _dispatcher(module, name):
    import importlib

    return getattr(importlib.import_module(module), name)


def _cached(dispatcher) -> bool:
    """Whether the compile cache holds a build of ``dispatcher`` for its current source."""
    try:
        return bool(dispatcher._cache._cache_file._load_index())
    except Exception:  # numba internals differ: take it as cached (nothing is started)
        return True


def command(names) -> list:
    """The second process's command line for kernels ``names``. It imports this very package,
    wherever this process imported it from: the folder that holds it comes first on its path,
    in place of the current directory (run from the top of a source tree after ``pip install
    .``, ``python -m`` would import the tree's copy and fill the wrong cache)."""
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    code = (f"import sys; sys.path[0] = {root!r}; "
            f"from dic.matching._ahead_build import main; sys.exit(main(sys.argv[1:]))")
    return [sys.executable, "-c", code, *names]


def start(second_order_first: bool = False) -> bool:
    """Start the second process if the cache lacks one of :data:`KERNELS` (once per process).

    With ``second_order_first`` (a run that will need both solvers, such as ``dic run``'s
    warm-up), the second process builds the second-order solver first and leaves the
    first-order one to this process, so that the two longest compiles run side by side; a run
    that needs only the first-order solver has it sooner in the default order. Returns True
    when a process was started by this call."""
    global _started, _owner
    with _lock:
        if _started:
            return False
        _started = True
        exe = os.path.basename(sys.executable or "").lower()
        if os.environ.get(_ENV, "1").strip() == "0" or not exe.startswith("python"):
            return False   # switched off, or embedded in a program that is not Python
        try:
            from numba.core.config import DISABLE_JIT

            if DISABLE_JIT:
                return False
            missing = [k for k, mod, fn in KERNELS if not _cached(_dispatcher(mod, fn))]
            if second_order_first:
                missing = [k for k in SECOND_ORDER_FIRST if k in missing]
        except Exception:
            return False
        if not missing:
            return False
        env = dict(os.environ)
        env[_ENV] = "0"
        try:
            # at low priority (it lowers its own on POSIX): where this process has work for
            # both cores, the second process leaves them to it
            proc = subprocess.Popen(command(missing), stdin=subprocess.DEVNULL,
                                    stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, env=env,
                                    text=True, creationflags=getattr(subprocess,
                                                                     "IDLE_PRIORITY_CLASS", 0))
        except Exception:
            return False
        _owner = os.getpid()
        _procs.append(proc)
        if len(_procs) == 1:
            atexit.register(stop)
        for name in missing:
            _events[name] = threading.Event()
        threading.Thread(target=_listen, args=(proc, _events, _building), daemon=True,
                         name="dic-compile-ahead").start()
        return True


def _listen(proc, events, building):
    """Set each kernel's event when the second process reports it; all of them when it ends.
    ``building[0]``: the kernel it has begun and not yet reported."""
    try:
        for line in proc.stdout:
            word, _, name = line.strip().partition(" ")
            if word == "start":
                building[0] = name
            elif word == "ready" and name in events:
                building[0] = None
                events[name].set()
    except Exception:
        pass
    finally:
        building[0] = None
        for event in list(events.values()):
            event.set()
        try:
            proc.stdout.close()
            proc.wait()
        except Exception:
            pass


def stop() -> None:
    """End the second process if it is still compiling (run when this process exits: its work
    so far stays in the cache, and no compiler keeps running after the program that wanted it;
    the next process starts one for what is still missing)."""
    for proc in _procs:
        try:
            if proc.poll() is None:
                proc.terminate()
        except Exception:
            pass


def ready(name: str) -> None:
    """Before the first use of kernel ``name`` (of :data:`KERNELS`): wait while the second
    process is building it, at most :data:`WAIT` seconds. If it has not begun that kernel yet
    (it is behind: on a machine whose cores are all busy its low priority starves it), there is
    no wait and the kernel is compiled here."""
    event = _events.get(name)
    if event is None or event.is_set() or os.getpid() != _owner:
        return
    if _building[0] == name:
        # rather than wait idle, compile what the run needs next and the second process has
        # not begun (it then finds those in the cache)
        for other in MEANWHILE.get(name, ()) if builder is not None else ():
            later = _events.get(other)
            if later is None or later.is_set() or _building[0] == other or event.is_set():
                continue
            try:
                builder(other)
            except Exception:  # compiled on first use instead
                pass
            later.set()
        event.wait(WAIT.get(name, WAIT_DEFAULT))
