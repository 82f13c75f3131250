"""pyproject.toml: every dependency has an honest floor and an upper bound (issue 13, point 10).

The floors are tested by the low-floor CI job (.ci/lowest), which installs exactly these
versions; here only the shape of the requirements is checked, with the same parser.
"""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _lowest_pins():
    spec = importlib.util.spec_from_file_location("lowest_pins", ROOT / ".ci" / "lowest_pins.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_every_requirement_has_a_floor_and_an_upper_bound():
    pins = _lowest_pins()
    floors = pins.floors()  # raises SystemExit naming a requirement without '>=' or '<'
    assert {"numpy", "PyWavelets", "scipy", "PyYAML", "textual", "plotext"} <= set(floors)
    assert {"pytest", "pytest-asyncio", "hypothesis", "pyedflib"} <= set(floors)
    reqs, extras = pins.requirements()
    assert "test" in extras and "dev" not in extras
    assert len(floors) == len(reqs)


def test_a_requirement_without_an_upper_bound_is_refused(tmp_path, monkeypatch):
    pins = _lowest_pins()
    bad = tmp_path / "pyproject.toml"
    bad.write_text('[project]\ndependencies = ["numpy>=1.23.2"]\n', encoding="utf-8")
    monkeypatch.setattr(pins, "PYPROJECT", bad)
    with pytest.raises(SystemExit, match=re.escape("'numpy>=1.23.2' needs one floor (>=) and an upper bound (<)")):
        pins.floors()
