"""auditor: overlap-matrix and linear-dependence audit of Gaussian basis sets.

Public API::

    import auditor
    result = auditor.audit("water_dimer.xyz", basis="aug-cc-pvtz", ghost="4-6")
    result.verdict, result.spectrum.smallest, result.recommendation.threshold
"""

__version__ = "0.1.0"

_EXPORTS = {
    "audit": "pipeline.run",
    "audit_prepared": "pipeline.run",
    "load_molecules": "inputs.readers",
    "audit_cell": "pipeline.periodic",
    "audit_counterpoise": "pipeline.counterpoise",
    "Crystal": "inputs.cell",
    "read_cells": "inputs.cell",
    "make_spec": "pipeline.run",
    "prepare": "pipeline.run",
    "prune_prepared": "pipeline.run",
    "audit_frames": "pipeline.frames",
    "prune_frames": "pipeline.frames",
    "ladder": "pipeline.ladder",
    "AuditResult": "pipeline.result",
    "BasisSpec": "inputs.basis",
    "Molecule": "inputs.geometry",
    "read_geometry": "inputs.readers",
    "load_pruned": "inputs.pruned",
    "Policy": "diagnosis.verdict",
    "RemedyOptions": "remedies.plan",
    "to_json": "report.json_report",
    "render_markdown": "report.markdown",
    "render_html": "report.html",
    "AuditorError": "base.errors",
    "InputError": "base.errors",
    "ResourceError": "base.errors",
    "UsageError": "base.errors",
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
