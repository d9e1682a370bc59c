"""One item as a task: its cache key, the JSON payload a worker receives, and the audit it runs."""

from __future__ import annotations

import json
import time
from collections.abc import Iterable
from pathlib import Path

from .. import __version__
from ..base.errors import InputError, UsageError, failure
from ..diagnosis.verdict import Policy
from ..inputs.basis import BasisSpec, FileBasis, load_shells
from ..inputs.geometry import Molecule
from ..report.json_report import dumps_result
from ..report.rows import brief
from .cache import content_key, file_digest
from .items import GateOptions
from .periodic import Crystal, PeriodicOptions, audit_crystal, crystal_from_geometry, crystal_geometry, not_periodic

#: what every worker checks before its first item: (basis, the elements of the run)
BasisCheck = tuple[BasisSpec, tuple[str, ...]]


def _version_of(package: str) -> str:
    # here, not at the top: importlib.metadata is slow to import, and needed only when
    # there is something to audit
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(package)
    except PackageNotFoundError:
        return "unknown"


def _pyscf_version() -> str:
    return _version_of("pyscf")


def _versions() -> dict:
    """The versions a result depends on, where it is computed."""
    return {"auditor": __version__, "pyscf": _pyscf_version(), "basis_set_exchange": _version_of("basis_set_exchange")}


def _geometry(mol: Molecule | Crystal) -> dict:
    if isinstance(mol, Crystal):
        return crystal_geometry(mol)  # with the lattice: part of the cache key
    record = {
        "symbols": list(mol.symbols),
        "coords": [[float(x) for x in row] for row in mol.coords],
        "ghost": [bool(g) for g in mol.ghost],
        "charge": int(mol.charge),
        "multiplicity": mol.multiplicity,
    }
    if mol.bohr is not None:  # the file's own numbers (QCSchema, checkpoints)
        record["bohr"] = [[float(x) for x in row] for row in mol.bohr]
    if mol.basis is not None:  # the basis the input carries: part of the item and of its key
        record["basis"] = mol.basis.as_dict()
    return record


def run_context(options: GateOptions) -> dict:
    """Everything besides the geometry that a result depends on (part of every cache key)."""
    names = [options.spec.default, *options.spec.per_element.values()]
    files = {n: file_digest(Path(n).expanduser()) for n in names if n and Path(n).expanduser().is_file()}
    return {
        "basis": options.spec.as_dict(),
        "basis_files": files,
        "policy": options.policy.as_dict(),
        "spectrum_method": options.spectrum_method,
        "remedies": options.remedies,
        "versions": _versions(),
        **({"periodic": options.periodic.as_dict()} if options.periodic and options.periodic.asked else {}),
    }


def item_key(geometry: dict, context: dict) -> str:
    """Content hash of (geometry, basis, options, versions); the file name plays no part."""
    return content_key({"geometry": geometry, **context})


def item_payload(path: str, mol: Molecule | Crystal, geometry: dict, context: dict) -> str:
    """JSON text that a worker needs to audit the frame ``mol`` of the file ``path`` as shown
    (``geometry``: ``_geometry(mol)``; ``context``: ``run_context``)."""
    return json.dumps(
        {
            "geometry": geometry,
            "source": path,
            "frame": mol.frame,
            "n_frames": mol.n_frames,
            "basis": context["basis"],
            "policy": context["policy"],
            "spectrum_method": context["spectrum_method"],
            "remedies": context["remedies"],
            "versions": context["versions"],
            "periodic": context.get("periodic"),
        }
    )


def run_item(payload: str) -> str:
    """Audit one item (worker side): JSON text in; JSON text out, {"report": <report JSON
    text>, "brief": ..., "versions": ...} or {"error": "..."}."""
    # here, not at the top: worker side only (the parent's start-up needs neither)
    import numpy as np

    from ..pipeline.run import audit_prepared, prepare

    p = json.loads(payload)
    t0 = time.perf_counter()
    try:
        g = p["geometry"]
        if "lattice" in g or p.get("periodic"):
            return _run_periodic(p, t0)
        mol = Molecule(
            tuple(g["symbols"]),
            np.asarray(g["coords"], dtype=float),
            tuple(g["ghost"]),
            charge=g["charge"],
            multiplicity=g["multiplicity"],
            source=p["source"],
            frame=p["frame"],
            n_frames=p["n_frames"],
            basis=FileBasis.from_dict(g["basis"], p["source"]) if "basis" in g else None,
            bohr=np.asarray(g["bohr"], dtype=float) if "bohr" in g else None,
        )
        b = p["basis"]
        spec = BasisSpec(b["default"], dict(b["per_element"]), bool(b["cartesian"]), str(b.get("source", "pyscf")))
        result = audit_prepared(
            prepare(mol, spec, p["spectrum_method"]),
            Policy(**p["policy"]),
            p["spectrum_method"],
            remedies=bool(p.get("remedies", False)),
        ).as_dict()
        return json.dumps(
            {
                "seconds": round(time.perf_counter() - t0, 6),
                "report": dumps_result(result, compact=True),
                "brief": brief(result),
                "versions": _versions(),
            }
        )
    except Exception as exc:  # an item must never take the run down; report it as that item's error
        return json.dumps({"error": failure(exc)[0]})


def _run_periodic(p: dict, t0: float) -> str:
    """A periodic item (worker side): the reply of `run_item`."""
    g = p["geometry"]
    if "lattice" not in g:
        raise not_periodic(p["source"])
    per = p.get("periodic") or {}
    options = PeriodicOptions(tuple(per["kmesh"]) if per.get("kmesh") else None, per.get("precision"))
    crystal = crystal_from_geometry(g, p["source"], p["frame"], p["n_frames"])
    spec = BasisSpec(p["basis"]["default"], dict(p["basis"]["per_element"]), bool(p["basis"]["cartesian"]))
    result = audit_crystal(crystal, spec, Policy(**p["policy"]), options, bool(p.get("remedies", False))).as_dict()
    return json.dumps(
        {
            "seconds": round(time.perf_counter() - t0, 6),
            "report": dumps_result(result, compact=True),
            "brief": brief(result),
            "versions": _versions(),
        }
    )


def check_basis_names(spec: BasisSpec, elements: Iterable[str]) -> None:
    """A basis name that neither pyscf nor the file system knows is a usage error, not one
    error per item. (load_shells imports pyscf: this runs where the audits run.)"""
    elements = set(elements)
    for name in sorted({spec.for_element(el) for el in elements} - {""}):  # "": the items' own bases
        users = sorted(el for el in elements if spec.for_element(el) == name)
        try:
            load_shells(name, users[0], spec.source)
        except InputError as exc:
            if exc.message.startswith("unknown basis name"):
                raise UsageError(exc.message) from None


def _preflight(check: BasisCheck | None) -> str:
    """Run ``check_basis_names(*check)``; the usage error's message, or "" when fine."""
    if check is None:
        return ""
    try:
        check_basis_names(*check)
    except UsageError as exc:
        return exc.message
    return ""
