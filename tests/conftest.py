"""Shared fixtures."""

import importlib.util
import signal
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

# Tests stop child processes with Ctrl-C (SIGINT). A shell starts background jobs with SIGINT
# ignored, the children would inherit that, and Python installs no KeyboardInterrupt handler
# where SIGINT is ignored: the children would never stop. Python's own handler here is reset
# to the default in every child at exec, so they see Ctrl-C again.
if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)


@pytest.fixture(scope="session")
def gen():
    """The sample-image generator script, imported as a module (scripts/ is not a package)."""
    spec = importlib.util.spec_from_file_location("make_sample_images",
                                                  ROOT / "scripts" / "make_sample_images.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod
