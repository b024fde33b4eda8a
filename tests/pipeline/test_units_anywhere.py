"""The unit definitions load from the installed package, whatever the working folder (no reliance on the
checkout's folder names being importable)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path


def test_units_load_outside_the_checkout(tmp_path: Path) -> None:
    code = "from vzero import units; print(units.factor('(uM/min)/(nM)', '1/s'))"
    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, check=False)
    assert out.returncode == 0, out.stderr[-500:]
    assert abs(float(out.stdout) - 1000 / 60) < 1e-9  # 1 uM/min per nM = 1000/min = 16.67/s
