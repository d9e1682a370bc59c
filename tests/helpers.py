"""Small builders shared by the tests (imported as ``helpers``; tests/ is on the path)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from auditor.inputs.geometry import Molecule

#: Repository root (example geometries, the pre-commit hook file).
ROOT = Path(__file__).resolve().parents[1]

WATER = (["O", "H", "H"], [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]])


def make_molecule(symbols, coords, ghost=None, source="<test>") -> Molecule:
    """A Molecule from symbols and ångström coordinates."""
    coords = np.asarray(coords, dtype=float)
    return Molecule(tuple(symbols), coords, tuple(ghost or [False] * len(symbols)), source=source)


def write_xyz(path, symbols, coords, comment="") -> Path:
    lines = [str(len(symbols)), comment]
    lines += [f"{s} {x:.8f} {y:.8f} {z:.8f}" for s, (x, y, z) in zip(symbols, coords)]
    path.write_text("\n".join(lines) + "\n")
    return path
