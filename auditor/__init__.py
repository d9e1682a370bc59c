"""auditor: overlap-matrix and linear-dependence audit of Gaussian basis sets.

Public API::

    import auditor
    result = auditor.audit("water_dimer.xyz", basis="aug-cc-pvtz", ghost="4-6")
    result.verdict, result.spectrum.smallest, result.recommendation.threshold
"""
__version__ = "0.1.0"

_EXPORTS = {
    "audit": "api", "audit_prepared": "api", "load_molecules": "api", "make_spec": "api", "prepare": "api",
    "BasisSpec": "basis", "AuditorError": "errors", "InputError": "errors", "ResourceError": "errors",
    "UsageError": "errors", "Molecule": "geometry", "read_geometry": "geometry", "Policy": "policy",
    "AuditResult": "result",
}

__all__ = list(_EXPORTS)


def __getattr__(name: str):
    # Imported on first use, so that the command line can start worker processes before
    # numpy and pyscf load in this one.
    if name in _EXPORTS:
        from importlib import import_module

        value = getattr(import_module(f".{_EXPORTS[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
