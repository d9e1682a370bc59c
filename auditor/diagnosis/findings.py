"""Findings: geometry defects, duplicate functions, diffuse crowding, the near-singular spectrum.

Every function here reads arrays (coordinates, S, eigenvalues, the function table) and returns
plain findings; nothing here builds or diagonalizes S."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..base.elements import BOHR_IN_ANGSTROM, ELEMENTS, NOBLE, covalent_radii
from ..inputs.geometry import Molecule
from ..numerics.inplace import gather_symmetric
from ..numerics.memory import SCAN_BYTES
from ..numerics.overlap import FunctionTable
from ..numerics.spectrum import Spectrum
from .causes import Causes
from .verdict import Policy

COINCIDENT_ANGSTROM = 0.01  # closer than this, two centres are one: S is singular


#: Contacts, as distance over the sum of covalent radii (Cordero et al., Dalton Trans. 2008,
#: 2832). The shortest chemical bonds are triple bonds at about 0.77-0.79 of that sum
#: (N2 1.098 Å, CO 1.128 Å, C2H2's C-C 1.203 Å; experimental lengths from memory) and H2 is
#: 1.19 of it: below CONTACT_CAUTION no bond is known (a caution), below CONTACT_FAIL the
#: geometry is impossible (a fail). Both are policy settings (common practice, our margins).
CONTACT_CAUTION = 0.7
CONTACT_FAIL = 0.5


DUPLICATE_OVERLAP = 0.99  # |S_ij| at which two functions are near-copies


CROWDING_OVERLAP = 0.92  # diffuse shells on two atoms that overlap this much


MAX_CROWDING_FINDINGS = 8


@dataclass(frozen=True)
class Finding:
    """One thing the audit found: ``kind`` is a fixed identifier, ``severity`` one of
    "info", "warning", "error"; ``atoms`` are 1-based; ``message`` is one sentence."""

    kind: str
    severity: str
    atoms: tuple[int, ...]
    message: str
    details: dict = field(default_factory=dict)


SEVERITY_ORDER = {"error": 0, "warning": 1, "info": 2}


def _atom_name(mol: Molecule, i: int) -> str:
    return f"{mol.symbols[i]}{i + 1}" + (" (ghost)" if mol.ghost[i] else "")


def geometry_findings(
    mol: Molecule, contact_fail: float = CONTACT_FAIL, contact_caution: float = CONTACT_CAUTION
) -> list[Finding]:
    """Coincident atoms, impossible and short contacts, a unit mix-up, and an electron count
    that the multiplicity cannot have. ``contact_fail`` and ``contact_caution`` are the
    distance / covalent-radius-sum ratios below which a contact is impossible or short."""
    from scipy.spatial import cKDTree  # scipy.spatial is slow to import and only this check needs it

    findings = _spin_findings(mol)
    if mol.n_atoms < 2:
        return findings
    findings += _coincident(mol, cKDTree(mol.coords))
    real = np.flatnonzero(~np.asarray(mol.ghost))
    if real.size < 2:
        return findings
    rad = covalent_radii([mol.symbols[i] for i in real])
    rtree = cKDTree(mol.coords[real])
    findings += _contacts(mol, real, rad, rtree, contact_fail, contact_caution)
    unit = _unit_finding(mol, real, mol.coords[real], rad, rtree)
    return findings + ([unit] if unit else [])


def _coincident(mol: Molecule, tree: Any) -> list[Finding]:
    out = []
    for i, j in sorted(tree.query_pairs(COINCIDENT_ANGSTROM)):
        d = float(np.linalg.norm(mol.coords[i] - mol.coords[j]))
        out.append(
            Finding(
                "coincident_atoms",
                "error",
                (i + 1, j + 1),
                f"{_atom_name(mol, i)} and {_atom_name(mol, j)} sit {d:.4f} Å apart: their basis "
                f"functions coincide and the overlap matrix is singular (a pasted or duplicated atom?).",
                {"distance_angstrom": round(d, 6)},
            )
        )
    return out


def _contacts(
    mol: Molecule, real: np.ndarray, rad: np.ndarray, rtree: Any, fail: float, caution: float
) -> list[Finding]:
    """Pairs of real atoms closer than ``caution`` (impossible below ``fail``) times the sum
    of their covalent radii; coincident pairs are reported by `_coincident` instead."""
    out = []
    xyz = mol.coords[real]
    for a, b in sorted(rtree.query_pairs(caution * 2 * rad.max())):
        d = float(np.linalg.norm(xyz[a] - xyz[b]))
        limit = rad[a] + rad[b]
        if not COINCIDENT_ANGSTROM <= d < caution * limit:
            continue
        i, j = int(real[a]), int(real[b])
        impossible = d < fail * limit
        what = "no chemical bond is that short" if impossible else "shorter than any chemical bond"
        out.append(
            Finding(
                "impossible_contact" if impossible else "short_contact",
                "error" if impossible else "warning",
                (i + 1, j + 1),
                f"{_atom_name(mol, i)} and {_atom_name(mol, j)} are {d:.3f} Å apart, "
                f"{d / limit:.0%} of their covalent-radius sum ({limit:.2f} Å): {what}.",
                {"distance_angstrom": round(d, 6), "ratio_to_covalent_sum": round(d / limit, 4)},
            )
        )
    return out


def _spin_findings(mol: Molecule) -> list[Finding]:
    """An electron count (nuclear charges of the real atoms minus the charge) that the
    declared multiplicity 2S+1 cannot go with: S must be a multiple of 1/2 with 2S of the
    parity of the electron count, and 2S cannot exceed the count."""
    if not mol.multiplicity:
        return []
    nelec = sum(ELEMENTS.index(s) + 1 for s, g in zip(mol.symbols, mol.ghost) if not g) - int(mol.charge)
    unpaired = int(mol.multiplicity) - 1
    if nelec >= unpaired and (nelec - unpaired) % 2 == 0:
        return []
    if nelec < unpaired:
        why = f"{max(nelec, 0)} electrons cannot have {unpaired} unpaired"
    else:
        even = nelec % 2 == 0
        why = f"an {'even' if even else 'odd'} count needs an {'odd' if even else 'even'} multiplicity"
    return [
        Finding(
            "spin_parity",
            "warning",
            (),
            f"{nelec} electrons (charge {mol.charge:+d}) and multiplicity {mol.multiplicity} do not go together: "
            f"{why}. The overlap does not depend on them, but a calculation with these settings will not run "
            "as meant: check the charge and multiplicity of the file.",
            {"electrons": nelec, "charge": int(mol.charge), "multiplicity": int(mol.multiplicity)},
        )
    ]


def _unit_finding(mol: Molecule, real: np.ndarray, rxyz: np.ndarray, rad: np.ndarray, rtree: Any) -> Finding | None:
    """Nearest-neighbour distances against covalent-radius sums, atom by atom.

    A sane molecule has most ratios near 1; numbers in bohr read as ångström put
    them near 1.89, ångström read as bohr (or converted to ångström once too often) near
    0.53. Noble-gas atoms are left out (their nearest neighbours are not bonded).
    """
    keep = np.array([mol.symbols[i] not in NOBLE for i in real])
    if keep.sum() < 2:
        return None
    dist, idx = rtree.query(rxyz, k=2)
    nn_d, nn = dist[:, 1], idx[:, 1]
    ratio = nn_d / (rad + rad[nn])
    ratio = ratio[keep & keep[nn]]
    if ratio.size < 3:  # one bond length alone cannot tell a unit mix-up from a bad geometry
        return None
    median = float(np.median(ratio))
    bonded = np.mean((ratio > 0.75) & (ratio < 1.3))
    stretched = np.mean((ratio * BOHR_IN_ANGSTROM > 0.75) & (ratio * BOHR_IN_ANGSTROM < 1.3))
    shrunk = np.mean((ratio / BOHR_IN_ANGSTROM > 0.75) & (ratio / BOHR_IN_ANGSTROM < 1.3))
    if bonded >= 0.2 or max(stretched, shrunk) < 0.6:
        return None
    lead = (
        f"The median nearest-neighbour distance is {median:.2f} times the covalent-radius sum, so the "
        "coordinates as read are about "
    )
    if stretched >= 0.6:
        text = lead + "1.89 times too large: numbers in bohr read as ångström (use --unit bohr if the file is in bohr)."
    else:
        text = lead + (
            "0.53 times too small: numbers in ångström read as bohr (--unit bohr on an ångström file), "
            "or converted from bohr to ångström twice; check how the file was made."
        )
    atoms = tuple(int(i) + 1 for i in real)
    return Finding("suspect_units", "error", atoms, text, {"median_ratio_to_covalent_sum": round(median, 4)})


def _row_blocks(n: int, block: int):
    for start in range(0, n, block):
        yield start, min(n, start + block)


def duplicate_findings(S: np.ndarray, table: FunctionTable, block: int | None = None) -> list[Finding]:
    """Pairs of distinct functions with |S_ij| >= DUPLICATE_OVERLAP, grouped by atom pair."""
    n = S.shape[0]
    block = block or max(64, SCAN_BYTES // (8 * max(n, 1)))  # rows of about SCAN_BYTES at a time
    pairs_i, pairs_j, vals = [], [], []
    for lo, hi in _row_blocks(n, block):
        rows = np.abs(S[lo:hi, lo:])
        r, c = np.nonzero(rows >= DUPLICATE_OVERLAP)
        c = c + lo
        r = r + lo
        upper = c > r
        pairs_i.append(r[upper])
        pairs_j.append(c[upper])
        vals.append(rows[r[upper] - lo, c[upper] - lo])
    if not pairs_i:
        return []
    pi, pj, pv = np.concatenate(pairs_i), np.concatenate(pairs_j), np.concatenate(vals)
    if pi.size == 0:
        return []
    fa = table.func_atom
    groups: dict[tuple[int, int], list[int]] = {}
    for k in range(pi.size):
        first, second = sorted((int(fa[pi[k]]), int(fa[pj[k]])))
        groups.setdefault((first, second), []).append(k)
    out = []
    for (a, b), ks in sorted(groups.items(), key=lambda kv: (-float(pv[kv[1]].max()), kv[0])):
        best = max(ks, key=lambda k: (pv[k], -pi[k]))
        top = float(pv[best])
        exact = top >= 1.0 - 1e-8
        where = (
            f"atom {table.elements[a - 1]}{a}"
            if a == b
            else f"atoms {table.elements[a - 1]}{a} and {table.elements[b - 1]}{b}"
        )
        out.append(
            Finding(
                "duplicate_functions",
                "error" if exact else "warning",
                (a,) if a == b else (a, b),
                f"{len(ks)} pair(s) of functions on {where} overlap by at least {DUPLICATE_OVERLAP} "
                f"(largest {top:.6f}, {table.function_label(int(pi[best]))} with "
                f"{table.function_label(int(pj[best]))}): "
                + ("they are copies of each other." if exact else "they are near-copies of each other."),
                {"n_pairs": len(ks), "largest_overlap": round(top, 8)},
            )
        )
    return out


def gaussian_s_overlap(a: float, b: float, r_bohr: float) -> float:
    """Overlap of two normalized s Gaussians (exponents a, b; centres r apart, bohr)."""
    p = a + b
    return (2.0 * np.sqrt(a * b) / p) ** 1.5 * np.exp(-a * b * r_bohr**2 / p)


def _diffuse_block_maxima(
    S: np.ndarray, table: FunctionTable, shells: np.ndarray, chunk_bytes: int | None = None
) -> np.ndarray:
    """max |S_ij| over the functions of every pair of the given shells, read in row chunks
    of whole shells so that no copy of the diffuse block of S is made."""
    chunk_bytes = chunk_bytes or SCAN_BYTES
    funcs = np.flatnonzero(np.isin(table.func_shell, shells))
    order = np.searchsorted(shells, table.func_shell[funcs])
    starts = np.flatnonzero(np.r_[True, order[1:] != order[:-1]])
    rows_per_chunk = max(1, chunk_bytes // (8 * max(funcs.size, 1)))
    out = np.empty((shells.size, shells.size))
    k = 0
    while k < starts.size:
        k_end = min(starts.size, k + max(1, rows_per_chunk // 4))  # shells have up to ~9 functions
        lo = starts[k]
        hi = starts[k_end] if k_end < starts.size else funcs.size
        block = np.abs(gather_symmetric(S, funcs[lo:hi], funcs))
        block = np.maximum.reduceat(block, starts[k:k_end] - lo, axis=0)
        out[k:k_end] = np.maximum.reduceat(block, starts, axis=1)
        k = k_end
    return out


def crowding_findings(S: np.ndarray, mol: Molecule, table: FunctionTable, troubled: bool) -> list[Finding]:
    """Diffuse shells on two different atoms that nearly duplicate each other.

    The largest |S_ij| between the two shells' functions decides; the closed-form
    s-type overlap at the shells' smallest exponents explains why.
    """
    return crowding_from_maxima(diffuse_shell_maxima(S, table), mol, table, troubled)


def diffuse_shell_maxima(S: np.ndarray, table: FunctionTable) -> np.ndarray | None:
    """max |S_ij| over the functions of every pair of diffuse shells (None for fewer than two):
    all that the crowding findings read of S."""
    dif_shells = np.flatnonzero(table.shell_diffuse)
    return None if dif_shells.size < 2 else _diffuse_block_maxima(S, table, dif_shells)


def crowding_from_maxima(
    shellmax: np.ndarray | None, mol: Molecule, table: FunctionTable, troubled: bool
) -> list[Finding]:
    """`crowding_findings` from the `diffuse_shell_maxima` of S."""
    if shellmax is None:
        return []
    dif_shells = np.flatnonzero(table.shell_diffuse)
    satom = table.shell_atom[dif_shells]
    best: dict[tuple[int, int], tuple[float, int, int]] = {}
    ii, jj = np.nonzero(np.triu(shellmax >= CROWDING_OVERLAP, k=1))
    for i, j in zip(ii, jj):
        a, b = int(satom[i]), int(satom[j])
        if a == b:
            continue
        key = (min(a, b), max(a, b))
        val = float(shellmax[i, j])
        if key not in best or val > best[key][0]:
            best[key] = (val, int(dif_shells[i]), int(dif_shells[j]))
    ranked = sorted(best.items(), key=lambda kv: (-kv[1][0], kv[0]))
    severity = "warning" if troubled else "info"
    out = []
    for (a, b), (val, si, sj) in ranked[:MAX_CROWDING_FINDINGS]:
        r = float(np.linalg.norm(mol.coords[a - 1] - mol.coords[b - 1])) / BOHR_IN_ANGSTROM
        ea, eb = float(table.shell_exponent[si]), float(table.shell_exponent[sj])
        model = float(gaussian_s_overlap(ea, eb, r))
        out.append(
            Finding(
                "diffuse_crowding",
                severity,
                (a, b),
                f"Diffuse shells {table.shell_label(si)} (exponent {ea:.4g}) and {table.shell_label(sj)} "
                f"(exponent {eb:.4g}), {r * BOHR_IN_ANGSTROM:.2f} Å apart, overlap by {val:.3f} "
                f"(s Gaussians of these exponents: {model:.3f}): nearly the same function twice.",
                {
                    "overlap": round(val, 6),
                    "s_model_overlap": round(model, 6),
                    "distance_angstrom": round(r * BOHR_IN_ANGSTROM, 6),
                },
            )
        )
    if len(ranked) > MAX_CROWDING_FINDINGS:
        rest = ranked[MAX_CROWDING_FINDINGS:]
        atoms = tuple(sorted({x for (k, _) in rest for x in k}))
        out.append(
            Finding(
                "diffuse_crowding",
                severity,
                atoms,
                f"{len(rest)} more atom pairs carry diffuse shells that overlap by at least {CROWDING_OVERLAP}.",
                {"n_pairs": len(rest)},
            )
        )
    return out


def near_singular_finding(spec: Spectrum, policy: Policy, causes: Causes) -> Finding:
    """The spectrum's own finding: its first words are the decision (below which level)."""
    failing = spec.smallest < policy.fail
    level = f"the {'fail' if failing else 'caution'} level {policy.fail if failing else policy.caution:.0e}"
    top = [a for a in causes.atoms[:5] if a["weight"] >= 0.05]
    who = ", ".join(f"{a['element']}{a['atom']} ({a['weight']:.0%})" for a in top)
    cond = spec.condition_number
    lost = f"about {math.log10(cond):.1f} digits lost" if cond else "singular to rounding"
    n_caution = spec.count_below(policy.caution)
    count = f"; {n_caution} eigenvalue(s) lie below {policy.caution:.0e}" if n_caution is not None else ""
    return Finding(
        "near_singular",
        "error" if failing else "warning",
        tuple(a["atom"] for a in top),
        f"Smallest overlap eigenvalue {spec.smallest:.2e} is below {level} ({lost}){count}"
        + (f"; the near-null space sits mostly on {who}." if who else "."),
        {"smallest": spec.smallest},
    )
