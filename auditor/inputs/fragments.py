"""Fragments of a complex for counterpoise audits: from ``--fragments`` (one 1-based atom
range per fragment, repeated) or from the file (QCSchema ``fragments``, an extended XYZ
``fragment`` column), checked against the molecule."""

from __future__ import annotations

from collections.abc import Sequence

from ..base.errors import UsageError
from .geometry import Molecule, check_atom_numbers, parse_atom_ranges

Fragments = tuple[tuple[int, ...], ...]


def parse_fragment_option(specs: Sequence[str]) -> list[list[tuple[int, int]]]:
    """The ranges of each --fragments value ('1-6', '7-12,15'), not expanded; UsageError for
    bad syntax or fewer than two fragments."""
    ranges = []
    for spec in specs:
        try:
            ranges.append(parse_atom_ranges(spec))
        except UsageError as exc:
            raise UsageError(exc.message.replace("--ghost", "--fragments")) from None
        if not ranges[-1]:
            raise UsageError("--fragments: a fragment needs at least one atom")
    if len(ranges) < 2:
        raise UsageError(
            "--fragments: give at least two fragments (repeat the option: --fragments 1-3 --fragments 4-6)"
        )
    return ranges


def fragments_for(mol: Molecule, specs: Sequence[str] | None) -> Fragments:
    """The fragments of ``mol`` (0-based atom indices): from ``specs`` (--fragments values)
    when given, else the file's own (``mol.fragments``, possibly none). Fragments from the
    option must not share an atom and must hold every atom (UsageError naming the file)."""
    if not specs:
        return mol.fragments
    parse_fragment_option(specs)
    frags = [tuple(k - 1 for k in check_atom_numbers(spec, mol.n_atoms, mol.source, "--fragments")) for spec in specs]
    seen = [i for f in frags for i in f]
    if len(seen) != len(set(seen)):
        shared = next(i for i in seen if seen.count(i) > 1)
        raise UsageError(f"--fragments: atom {shared + 1} of {mol.source} is in two fragments")
    if len(seen) != mol.n_atoms:
        missing = next(i for i in range(mol.n_atoms) if i not in set(seen))
        raise UsageError(f"--fragments: atom {missing + 1} of {mol.source} is in no fragment; every atom needs one")
    return tuple(frags)
