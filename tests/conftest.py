"""Shared fixtures."""

import importlib.util
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session")
def gen():
    """The sample-image generator script, imported as a module (scripts/ is not a package)."""
    spec = importlib.util.spec_from_file_location("make_sample_images",
                                                  ROOT / "scripts" / "make_sample_images.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod
