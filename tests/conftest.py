"""Shared fixtures: run the CLI in-process and as a subprocess."""

from __future__ import annotations

import contextlib
import io
import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"


@pytest.fixture
def run_cli():
    """Run ``tracevet ARGS`` in this process; return (exit code, stdout, stderr)."""
    from tracevet.cli.main import main

    def run(*args: str):
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            code = main([str(a) for a in args])
        return code, out.getvalue(), err.getvalue()

    return run


@pytest.fixture
def run_cli_process():
    """Run ``python -m tracevet ARGS`` in a child process (real exit codes, real streams)."""

    def run(*args: str, cwd: Path | None = None, timeout: float = 120, env_extra: dict | None = None):
        env = dict(os.environ)
        env["PYTHONPATH"] = str(REPO / "src") + os.pathsep + env.get("PYTHONPATH", "")
        env.update(env_extra or {})
        proc = subprocess.run(
            [sys.executable, "-m", "tracevet", *[str(a) for a in args]],
            capture_output=True,
            text=True,
            cwd=cwd,
            env=env,
            timeout=timeout,
        )
        return proc.returncode, proc.stdout, proc.stderr

    return run
