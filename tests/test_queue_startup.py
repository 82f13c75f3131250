"""`tracevet status` must start fast: building the command line imports no heavy module."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

SRC = Path(__file__).resolve().parents[1] / "src"

HEAVY = ("scipy.signal", "textual", "plotext", "tracevet.cleaning.engine", "tracevet.assessment.core")


def test_building_the_command_line_imports_no_heavy_module():
    code = (
        "import sys; from tracevet.cli.main import build_parser; build_parser(); "
        f"print(' '.join(m for m in {HEAVY!r} if m in sys.modules))"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env={"PYTHONPATH": str(SRC)}, check=True
    )
    # A command module that imports one of these at import time slows every command, status included
    # (issue 4: status of 10,000 records in under a second): import it inside the command's function.
    assert result.stdout.strip() == ""
