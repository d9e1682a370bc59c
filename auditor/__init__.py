"""auditor: overlap-matrix and linear-dependence audit of Gaussian basis sets.

Public API::

    import auditor
    result = auditor.audit("water_dimer.xyz", basis="aug-cc-pvtz", ghost="4-6")
    result.verdict, result.spectrum.smallest, result.recommendation.threshold
"""
__version__ = "0.1.0"

from .api import audit, audit_prepared, load_molecules, make_spec, prepare  # noqa: E402
from .basis import BasisSpec  # noqa: E402
from .errors import AuditorError, InputError, ResourceError, UsageError  # noqa: E402
from .geometry import Molecule, read_geometry  # noqa: E402
from .policy import Policy  # noqa: E402
from .result import AuditResult  # noqa: E402

__all__ = [
    "audit", "audit_prepared", "prepare", "make_spec", "load_molecules", "read_geometry",
    "AuditResult", "BasisSpec", "Molecule", "Policy",
    "AuditorError", "InputError", "UsageError", "ResourceError",
]
