"""--help off a terminal: a fixed width whatever COLUMNS says, wrapped between words."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from auditor.cli import HELP_WIDTH

pytestmark = pytest.mark.slow  # every test here runs whole auditor processes


@pytest.mark.parametrize("command", ["check", "gate"])
def test_help_wraps_cleanly_at_a_fixed_width(command):
    env = {k: v for k, v in os.environ.items() if k != "TERMINAL_WIDTH"}
    outs = []
    for columns in ("30", "300"):
        res = subprocess.run(
            [sys.executable, "-m", "auditor.cli", command, "--help"],
            capture_output=True,
            text=True,
            timeout=120,
            env={**env, "COLUMNS": columns},
        )
        assert res.returncode == 0, res.stderr
        outs.append(res.stdout)
    for out in outs:
        assert max(len(line) for line in out.splitlines()) <= HELP_WIDTH
        assert "--max-input-mb" in out and "Largest input file (geometry, list of paths)" in out
        if command == "check":
            assert "e.g. 4-6,9." in out.replace("\n", " ").replace("│", " ").replace("  ", " ") or "4-6,9" in out
    # the option table is laid out at the same width whatever COLUMNS says
    assert [ln for ln in outs[0].splitlines() if "│" in ln] == [ln for ln in outs[1].splitlines() if "│" in ln]
