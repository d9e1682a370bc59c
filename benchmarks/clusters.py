"""Water clusters for the benchmarks: waters on a cubic grid, each turned at random (fixed seed).

The benchmarks published their figures with three recipes that differ in the water's
shape, how it is turned, which grid axis runs fastest, the spacing and the seed; each
recipe is kept exactly (check_clusters.py compares them with the builders they replace):

* bench_audit: ase's H2O, turned about z then x by angles drawn uniformly in [0, 360),
  x fastest; spacing 3.0 Angstrom, seed 3 (an ase Atoms).
* bench_prune: WATER_ROUNDED turned by the Q of a Gaussian matrix, z fastest; spacing
  2.9, seed 0 (a pyscf atom list).
* bench_large: water_shape() turned the same way, z fastest; spacing 3.0, seed 11 (XYZ text).

numpy loads on first use, not on import: bench_prune sets the BLAS thread count before
numpy loads.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

#: O, H, H (Angstrom) with the second H at rounded coordinates (bench_prune)
WATER_ROUNDED = ((0.0, 0.0, 0.0), (0.9572, 0.0, 0.0), (-0.2400, 0.9266, 0.0))
SYMBOLS = ("O", "H", "H")


def water_shape(r_oh: float = 0.9572, angle_deg: float = 104.52) -> Any:
    """O, H, H (Angstrom) in the xy plane: O-H 0.9572, H-O-H 104.52 degrees (bench_large)."""
    import numpy as np

    angle = np.deg2rad(angle_deg)
    return np.array([[0.0, 0.0, 0.0], [r_oh, 0.0, 0.0], [r_oh * np.cos(angle), r_oh * np.sin(angle), 0.0]])


def qr_turn(water: Sequence[Sequence[float]] | Any) -> Callable[[Any], Any]:
    """Turn ``water`` by the Q factor of a 3 x 3 matrix of standard normal draws."""
    import numpy as np

    local = np.asarray(water, dtype=float)

    def turn(rng: Any) -> Any:
        q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
        return local @ q.T

    return turn


def ase_zx_turn(rng: Any) -> Any:
    """ase's H2O turned about z, then about x, by angles drawn uniformly in [0, 360) degrees."""
    from ase.build import molecule

    m = molecule("H2O")
    m.rotate(rng.uniform(0, 360), "z")
    m.rotate(rng.uniform(0, 360), "x")
    return m.positions


def grid_index(idx: int, side: int, fastest: str) -> tuple[int, int, int]:
    """(i, j, k) of the idx-th point of a side^3 grid filled with x or z running fastest."""
    if fastest == "x":
        return idx % side, (idx // side) % side, idx // (side * side)
    if fastest == "z":
        return idx // (side * side), (idx // side) % side, idx % side
    raise ValueError(f"fastest must be 'x' or 'z', got {fastest!r}")


@dataclass(frozen=True)
class Cluster:
    symbols: tuple[str, ...]
    coords: Any  # (n_atoms, 3) float array, Angstrom

    def atom_list(self) -> list[tuple[str, tuple[float, ...]]]:
        """pyscf's atom= list: (symbol, (x, y, z)), in Angstrom."""
        return [(s, tuple(x)) for s, x in zip(self.symbols, self.coords)]

    def xyz(self, comment: str) -> str:
        """XYZ text, coordinates with six decimals."""
        lines = [f"{s} {p[0]:.6f} {p[1]:.6f} {p[2]:.6f}" for s, p in zip(self.symbols, self.coords)]
        return f"{len(lines)}\n{comment}\n" + "\n".join(lines) + "\n"

    def ase_atoms(self) -> Any:
        from ase import Atoms

        return Atoms(symbols=list(self.symbols), positions=self.coords)


def water_cluster(count: int, spacing: float, seed: int, turn: Callable[[Any], Any], fastest: str = "z") -> Cluster:
    """``count`` waters on the smallest cubic grid that holds them (``spacing`` Angstrom
    apart), each placed as ``turn(rng)`` returns it (O, H, H), one after another from
    ``numpy.random.default_rng(seed)``."""
    import numpy as np

    rng = np.random.default_rng(seed)
    side = int(np.ceil(count ** (1.0 / 3.0)))
    blocks = []
    for idx in range(count):
        turned = turn(rng)
        blocks.append(turned + spacing * np.array(grid_index(idx, side, fastest), dtype=float))
    coords = np.vstack(blocks) if blocks else np.zeros((0, 3))
    return Cluster(SYMBOLS * count, coords)
