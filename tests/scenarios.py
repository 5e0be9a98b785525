"""The shipped scenarios' generator, sample_data/make_samples.py, loaded as a module (it is
a script, not part of the package)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

REPOSITORY = Path(__file__).resolve().parents[1]


def make_samples_module():
    """sample_data/make_samples.py as a module."""
    path = REPOSITORY / "sample_data" / "make_samples.py"
    spec = importlib.util.spec_from_file_location("lagfield_sample_scenarios", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module
