"""The spectrum step: choose the dense or the factored path for S and run it."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace

import numpy as np

from .cholesky import FactorHandoff
from .dense import full_spectrum
from .factored import large_spectrum
from .memory import check_memory, resolve_method
from .spectrum import Spectrum


def compute_spectrum(
    S: np.ndarray,
    vector_level: float,
    method: str = "full",
    stage: Callable[[str], None] | None = None,
    keep_factor: bool = False,
    core: np.ndarray | None = None,
) -> Spectrum:
    """Spectrum of the unit-diagonal overlap matrix ``S``.

    ``method``: "full" (dense eigendecomposition), "large" (factorizations and
    subspace iteration, ``auditor.numerics.factored``; S is used as workspace and
    restored), or "auto" (large from ``auditor.numerics.memory.CROSSOVER_N`` functions
    on, or when the full path would not fit in memory). ``stage`` is told each step's name.
    With ``keep_factor`` the large path's pivoted factorization of S - vector_level*I, when it
    makes one, stays in the spectrum's ``handoff`` for the remedies (one N x N array), and
    so does the `auditor.numerics.cholesky.SharedCore` of ``core`` (the non-diffuse
    functions, when given) through which that path then applies S^-1.
    """
    method = resolve_method(S.shape[0], method, s_built=True)
    check_memory(S.shape[0], method, s_built=True)  # ResourceError instead of being killed
    if method == "large":
        handoff = FactorHandoff() if keep_factor else None
        spectrum = large_spectrum(S, vector_level, stage=stage, handoff=handoff, core=core if keep_factor else None)
        return replace(spectrum, handoff=handoff)
    if stage:
        stage("eigenvalues (dense)")
    return full_spectrum(S, vector_level)
