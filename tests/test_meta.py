"""House rules that keep the package light and documented."""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import subprocess
import sys
import warnings
from pathlib import Path

import pytest

import lagfield
from lagfield import hookspecs

ROOT = Path(__file__).resolve().parents[1]
HEAVY = ("numba", "matplotlib", "pyarrow")


def _imported_after(code: str) -> list[str]:
    probe = f"{code}\nimport sys\nprint(','.join(m for m in {HEAVY!r} if m in sys.modules))"
    result = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                            check=True)
    last_line = result.stdout.strip().splitlines()[-1] if result.stdout.strip() else ""
    return [m for m in last_line.split(",") if m and m in HEAVY]


def test_import_lagfield_is_light():
    assert _imported_after("import lagfield") == []


def test_plugins_listing_is_light():
    assert _imported_after("from lagfield.cli import main; main(['plugins'])") == []


@pytest.mark.parametrize("name", sorted(
    m.name for m in pkgutil.walk_packages(lagfield.__path__, "lagfield.")))
def test_every_module_imports_without_warnings(name):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        importlib.import_module(name)


def test_every_hook_is_documented_and_tested():
    guide = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    tests = "\n".join(p.read_text(encoding="utf-8") for p in (ROOT / "tests").rglob("test_*.py"))
    hooks = [n for n, f in inspect.getmembers(hookspecs, inspect.isfunction)
             if n.startswith("lagfield_")]
    assert hooks
    for name in hooks:
        signature = f"{name}{inspect.signature(getattr(hookspecs, name))}"
        assert signature in guide, f"{signature} is not in DEVELOPERS.md"
        assert f"def test_hook_{name}" in tests, f"no test_hook_{name}"


def test_only_lagfield_is_a_top_level_package(tmp_path):
    probe = ("import importlib.util as u, lagfield.plugins as p; "
             "print(u.find_spec('pipeline'), u.find_spec('plugins'), p.__name__)")
    result = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                            check=True, cwd=tmp_path)
    assert result.stdout.split() == ["None", "None", "lagfield.plugins"]
