"""Findings of the periodic audit: contacts across the cell boundary, shells whose decay length
is long compared with the lattice, the lattice-sum check, and the near-singular S(k).

Same Finding records as the molecular path (auditor.diagnosis.findings)."""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, covalent_radii
from ..inputs.cell import Crystal
from ..numerics.overlap import FunctionTable
from ..numerics.periodic import Convergence, KSpectra
from ..numerics.spectrum import Spectrum
from .causes import Causes
from .findings import COINCIDENT_ANGSTROM, CONTACT_CAUTION, CONTACT_FAIL, Finding, near_singular_finding
from .verdict import Policy

#: A shell is flagged when a normalized s Gaussian of its smallest exponent alpha overlaps its
#: own periodic image at the shortest lattice translation R by at least this much: that
#: overlap is exp(-alpha R^2 / 2) (the closed-form s-s overlap with both exponents alpha), so
#: at 1e-2 each nearest image changes the function's Bloch sum by about a percent; the
#: decay length 1/sqrt(alpha) is then longer than R / 3.03. A rule of ours (docs/periodic.md).
IMAGE_OVERLAP = 1e-2

MAX_IMAGE_FINDINGS = 8


def summed_dimension(dimension: int) -> int:
    """Lattice directions pyscf sums S(k) over: all three for a 2D cell (its vacuum direction
    too, at k = 0 along it; pyscf's default for 2D), else the periodic ones."""
    return 3 if dimension >= 2 else dimension


def translations(lattice: np.ndarray, dims: int, reach: int = 1) -> np.ndarray:
    """Lattice translations n_1 a_1 + ... over the first ``dims`` vectors, |n_i| <= reach, without 0."""
    rng = [range(-reach, reach + 1)] * dims + [range(1)] * (3 - dims)
    n = np.array([t for t in itertools.product(*rng) if any(t)], dtype=float).reshape(-1, 3)
    return n @ lattice


def shortest_translation(crystal: Crystal) -> float:
    """Length (Å) of the shortest lattice translation pyscf sums over."""
    T = translations(crystal.lattice, summed_dimension(crystal.dimension), 2)
    return float(np.min(np.linalg.norm(T, axis=1))) if T.size else math.inf


def _name(crystal: Crystal, i: int) -> str:
    return f"{crystal.symbols[i]}{i + 1}" + (" (ghost)" if crystal.ghost[i] else "")


def _closest_pairs(crystal: Crystal, reach: float) -> dict[tuple[int, int], tuple[float, bool]]:
    """Shortest distance (Å) of each atom pair within ``reach``, images included, and whether
    it is across the cell boundary; (i, i) is an atom and its own image."""
    from scipy.spatial import cKDTree  # slow to import; only this check needs it here

    n = crystal.n_atoms
    shifts = np.vstack([np.zeros((1, 3)), translations(crystal.lattice, crystal.dimension, 1)])
    points = (crystal.coords[None, :, :] + shifts[:, None, :]).reshape(-1, 3)
    best: dict[tuple[int, int], tuple[float, bool]] = {}
    for a, b in cKDTree(points).query_pairs(reach):
        if a >= n and b >= n:
            continue
        i, j = sorted((a % n, b % n))
        d = float(np.linalg.norm(points[a] - points[b]))
        if (i, j) not in best or d < best[(i, j)][0]:
            best[(i, j)] = (d, a >= n or b >= n)
    return best


def contact_findings(
    crystal: Crystal, contact_fail: float = CONTACT_FAIL, contact_caution: float = CONTACT_CAUTION
) -> list[Finding]:
    """Coincident atoms, impossible and short contacts (the molecular rules, see
    auditor.diagnosis.findings), across the cell boundary too."""
    real = [i for i in range(crystal.n_atoms) if not crystal.ghost[i]]
    rad = dict(zip(real, covalent_radii([crystal.symbols[i] for i in real]))) if real else {}
    reach = max([COINCIDENT_ANGSTROM] + [contact_caution * 2 * r for r in rad.values()])
    out = []
    for (i, j), (d, image) in sorted(_closest_pairs(crystal, reach).items()):
        where = " across the cell boundary" if image else ""
        who = (
            f"{_name(crystal, i)} and its own periodic image"
            if i == j
            else f"{_name(crystal, i)} and {_name(crystal, j)}"
        )
        atoms = tuple(sorted({i + 1, j + 1}))
        if d < COINCIDENT_ANGSTROM:
            out.append(
                Finding(
                    "coincident_atoms",
                    "error",
                    atoms,
                    f"{who} sit {d:.4f} Å apart{where}: their basis functions coincide and S(k) is singular "
                    "(an atom given twice, once at the image position?).",
                    {"distance_angstrom": round(d, 6)},
                )
            )
        elif i in rad and j in rad and d < contact_caution * (rad[i] + rad[j]):
            out.append(_contact(who, where, atoms, d, rad[i] + rad[j], d < contact_fail * (rad[i] + rad[j])))
    return out


def _contact(who: str, where: str, atoms: tuple[int, ...], d: float, limit: float, impossible: bool) -> Finding:
    what = "no chemical bond is that short" if impossible else "shorter than any chemical bond"
    return Finding(
        "impossible_contact" if impossible else "short_contact",
        "error" if impossible else "warning",
        atoms,
        f"{who} are {d:.3f} Å apart{where}, {d / limit:.0%} of their covalent-radius sum ({limit:.2f} Å): {what}.",
        {"distance_angstrom": round(d, 6), "ratio_to_covalent_sum": round(d / limit, 4)},
    )


def image_overlap_findings(crystal: Crystal, table: FunctionTable, spectra: KSpectra, troubled: bool) -> list[Finding]:
    """Shells whose decay length is long compared with the lattice (see IMAGE_OVERLAP), one
    finding per element and shell, with the smallest norm its Bloch sums reach on the mesh."""
    R = shortest_translation(crystal) / BOHR_IN_ANGSTROM
    groups: dict[tuple[str, str], list[int]] = {}
    for s in range(table.n_shells):
        alpha = float(table.shell_exponent[s])
        if math.exp(-0.5 * alpha * R * R) >= IMAGE_OVERLAP:
            el = table.elements[int(table.shell_atom[s]) - 1]
            groups.setdefault((el, table.shell_name[s]), []).append(s)
    norms = spectra.bloch_norms.min(axis=0)
    ranked = sorted(groups.items(), key=lambda kv: (float(table.shell_exponent[kv[1][0]]), kv[0]))
    out = [_image_finding(table, R, shells, norms, troubled) for _, shells in ranked[:MAX_IMAGE_FINDINGS]]
    if len(ranked) > MAX_IMAGE_FINDINGS:
        rest = [s for _, shells in ranked[MAX_IMAGE_FINDINGS:] for s in shells]
        atoms = tuple(sorted({int(table.shell_atom[s]) for s in rest}))
        out.append(
            Finding(
                "image_overlap",
                "warning" if troubled else "info",
                atoms,
                f"{len(ranked) - MAX_IMAGE_FINDINGS} more shells overlap their own periodic images by at least "
                f"{IMAGE_OVERLAP:g} (s-Gaussian model).",
                {"n_shells": len(rest)},
            )
        )
    return out


def _image_finding(table: FunctionTable, R: float, shells: list[int], norms: np.ndarray, troubled: bool) -> Finding:
    s0 = shells[0]
    alpha = float(table.shell_exponent[s0])
    el = table.elements[int(table.shell_atom[s0]) - 1]
    overlap = math.exp(-0.5 * alpha * R * R)
    funcs = np.flatnonzero(np.isin(table.func_shell, shells))
    low = float(norms[funcs].min())
    atoms = tuple(sorted({int(table.shell_atom[s]) for s in shells}))
    decay = BOHR_IN_ANGSTROM / math.sqrt(alpha)
    return Finding(
        "image_overlap",
        "warning" if troubled else "info",
        atoms,
        f"{el} {table.shell_name[s0]} (exponent {alpha:.4g}, decay length {decay:.2f} Å) overlaps its own "
        f"image at the shortest lattice translation ({R * BOHR_IN_ANGSTROM:.2f} Å) by {overlap:.3f} "
        f"(s Gaussian, exp(-αR²/2)); its Bloch sums reach a norm of {low:.2e} on the mesh "
        f"(1 is the isolated function).",
        {
            "exponent": alpha,
            "decay_length_angstrom": round(decay, 6),
            "shortest_translation_angstrom": round(R * BOHR_IN_ANGSTROM, 6),
            "image_overlap": round(overlap, 6),
            "smallest_bloch_norm": low,
        },
    )


def lattice_sum_findings(conv: Convergence, spectra: KSpectra) -> list[Finding]:
    """The lattice sums did not converge at the requested precision, or an eigenvalue is
    negative beyond rounding (S(k) is a Gram matrix: that can only be truncated sums)."""
    out = []
    moved = [s for s in conv.steps[1:] if s["shift"] is not None and s["shift"] > conv.tolerance]
    if moved:
        first = conv.steps[0]
        out.append(
            Finding(
                "lattice_sum_unconverged",
                "warning",
                (),
                f"At precision {conv.requested:.0e} the lattice sums were not converged: the spectrum moved by "
                f"{moved[0]['shift']:.1e} (rounding: {conv.tolerance:.1e}) at a tighter precision; the smallest "
                f"eigenvalue {first['smallest']:.2e} there is an artefact of truncated sums. "
                + (
                    f"This report uses precision {conv.used:.0e}."
                    if conv.converged
                    else f"Not converged even at {conv.used:.0e}: treat the small eigenvalues with care."
                ),
                {"requested_precision": conv.requested, "used_precision": conv.used, "shift": moved[0]["shift"]},
            )
        )
    low = float(spectra.smallest.min())
    if low < -conv.tolerance:
        k = spectra.worst
        out.append(
            Finding(
                "negative_eigenvalue",
                "error",
                (),
                f"S(k) has the eigenvalue {low:.2e} at k = {_k_text(spectra, k)}, below -{conv.tolerance:.1e} "
                "(rounding). S(k) is a Gram matrix of Bloch sums and cannot have negative eigenvalues: this comes "
                "from truncated lattice sums, not from the basis; tighten --precision.",
                {"smallest": low, "tolerance": conv.tolerance},
            )
        )
    return out


def _k_text(spectra: KSpectra, k: int) -> str:
    return "(" + ", ".join(f"{x:.4g}" for x in np.round(spectra.mesh.scaled[k], 10) + 0.0) + ")"


def periodic_near_singular(spec: Spectrum, policy: Policy, causes: Causes, spectra: KSpectra) -> Finding:
    """`near_singular_finding` for the mesh: counts over every k, the worst k named."""
    f = near_singular_finding(spec, policy, causes)
    k = spectra.worst
    n_low = int(np.sum(spectra.smallest < policy.caution))
    where = (
        f" Worst at k = {_k_text(spectra, k)} (fractions of the reciprocal vectors); "
        f"{n_low} of {spectra.mesh.n} k-points lie below {policy.caution:.0e}."
    )
    return replace(f, message=f.message.replace("eigenvalue(s) lie", "eigenvalue(s) over the mesh lie") + where)
