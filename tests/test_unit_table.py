"""The generated unit table: equal to pint, current, and enough to load every bundled config without pint."""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

from mcmatch import units
from mcmatch.unit_table import FACTORS

ROOT = Path(__file__).resolve().parents[1]


def _generator():
    spec = importlib.util.spec_from_file_location("unit_table_tool", ROOT / "tools" / "unit_table.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_every_entry_is_what_pint_gives():
    # pint as the reference library
    for (text, target), factor in FACTORS.items():
        assert units._pint_factor(text, target) == pytest.approx(factor, rel=1e-15, abs=0.0), (text, target)
    assert FACTORS[("degC", "K")] == (1.0, 273.15) and FACTORS[("um", "m")][0] == pytest.approx(1e-6, rel=1e-15)


def test_the_table_covers_what_the_bundled_configs_use():
    # common practice, no source: every spelling the bundled configs use is in the table (if pint knows it)
    missing = [pair for pair in _generator().wanted() if pair not in FACTORS and _parses(*pair)]
    assert missing == [], "run `python tools/unit_table.py`"


def _parses(text: str, target: str) -> bool:
    try:
        units._pint_factor(text, target)
    except units.UnitError:
        return False
    return True


def test_loading_every_bundled_config_imports_no_pint():
    code = (
        "import sys, pathlib\n"
        "from mcmatch.config.loading import load_config\n"
        f"for p in sorted(pathlib.Path({str(ROOT / 'configs')!r}).glob('*.toml')): load_config(p)\n"
        "print('pint' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT).stdout
    assert out.strip() == "False"
