"""What the remedies read from a prepared geometry (the pipeline's ``Prepared`` has it)."""

from __future__ import annotations

from typing import Any, Protocol

import numpy as np

from ..inputs.basis import BasisSpec
from ..inputs.geometry import Molecule
from ..numerics.overlap import FunctionTable


class PreparedGeometry(Protocol):
    """A geometry with its basis: the molecule, the basis specification, the pyscf Mole,
    the function table and the unit-diagonal overlap ``S``."""

    @property
    def molecule(self) -> Molecule: ...

    @property
    def spec(self) -> BasisSpec: ...

    @property
    def mole(self) -> Any: ...  # a pyscf Mole (pyscf has no type information)

    @property
    def table(self) -> FunctionTable: ...

    @property
    def S(self) -> np.ndarray: ...
