"""Sentences shared by several report formats (one wording, several renderings)."""

from __future__ import annotations


def vectors_note(d: dict) -> str:
    """Which eigenvectors the causes were summed over, in words."""
    c, sp = d["causes"], d["spectrum"]
    k, level = c["n_vectors"], c["vectors_below"]
    below = sum(1 for v in sp["eigenvalues"] if v is not None and v < level)
    if len(sp["eigenvalues"]) < d["input"]["n_functions"]:
        below = sp["counts_below"].get(format(level, ".0e"), below)
    if below is not None and below >= k:
        return f"the {k} eigenvector(s) with eigenvalue below {level:.0e}"
    return f"the {k} smallest eigenvector(s) ({below or 'none'} below {level:.0e})"
