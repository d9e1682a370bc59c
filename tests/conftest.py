import numpy as np
import pytest

from auditor.geometry import Molecule


def make_molecule(symbols, coords, ghost=None, source="<test>"):
    """A Molecule from symbols and ångström coordinates."""
    coords = np.asarray(coords, dtype=float)
    return Molecule(tuple(symbols), coords, tuple(ghost or [False] * len(symbols)), source=source)


WATER = (["O", "H", "H"], [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]])


@pytest.fixture
def water():
    return make_molecule(*WATER)


def write_xyz(path, symbols, coords, comment=""):
    lines = [str(len(symbols)), comment]
    lines += [f"{s} {x:.8f} {y:.8f} {z:.8f}" for s, (x, y, z) in zip(symbols, coords)]
    path.write_text("\n".join(lines) + "\n")
    return path
