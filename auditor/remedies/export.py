"""The pruned basis in other programs' formats, through basis_set_exchange's writers, each
file read back (where basis_set_exchange has a reader) and compared with the document.

A pruned basis is per atom: atoms of one element can keep different shells. Most formats
name elements, not atoms. The rule here:

* every element keeps one set of shells on all its atoms: any writer can carry it, one file;
* an element has several sets: only formats whose basis input can name atoms are written,
  NWChem (a tag per set, e.g. ``H10``, which the geometry must use for those atoms) and
  Gaussian (the atom numbers before each block, as in ``Gen`` input: ``10 11 0``); every
  other format is refused with the reason.

Coefficients are those of the document (pyscf's convention: for normalized primitives,
the contraction normalized as a whole), written with their full precision.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from ..base.elements import ELEMENTS

#: formats written by default (the programs most asked for); "all" writes every writer's
DEFAULT_FORMATS = ("nwchem", "gaussian94", "psi4", "orca", "molpro", "cfour", "turbomole")
#: writer formats that are not a basis for a program (basis_set_exchange's own debugging
#: dump, and an OpenMolcas auxiliary-basis wrapper)
_NOT_PROGRAMS = ("bsedebug", "ricdwrap")
#: formats whose basis input can name atoms instead of elements (see the module docstring)
PER_ATOM_FORMATS = ("nwchem", "gaussian94")
#: writers whose output basis_set_exchange reads with another reader once a header is removed
_READ_AS = {"psi4": "gaussian94", "gaussian94lib": "gaussian94", "genbas": "genbas", "acesii": "genbas"}


@dataclass(frozen=True)
class ExportFile:
    """One format: the file written (or why not), and the read-back check."""

    format: str
    program: str
    file: str | None
    written: bool
    checked: str  # "same exponents and coefficients" | "no reader" | what differed
    note: str


def writer_formats() -> dict[str, str]:
    """basis_set_exchange's writer formats that are bases for a program: name -> program."""
    from basis_set_exchange import writers  # slow to import: only when a pruned basis is exported

    return {k: v for k, v in writers.get_writer_formats().items() if k not in _NOT_PROGRAMS}


def _element(label: str) -> str:
    return re.sub(r"\d+$", "", label.removeprefix("ghost-"))


def variants(doc: dict) -> dict[str, list[str]]:
    """Element -> the distinct basis labels its atoms use (labels with equal shells merged)."""
    out: dict[str, list[str]] = {}
    seen: dict[tuple[str, str], str] = {}
    for label, _ in doc["atoms"]:
        el = _element(label)
        key = (el, repr(doc["basis"][label]))
        if key not in seen:
            seen[key] = label
            out.setdefault(el, []).append(label)
    return out


def _shells(entries: list, cartesian: bool) -> list[dict]:
    """pyscf basis entries [l, [e, c], ...] as basis_set_exchange electron shells."""
    shells = []
    for entry in entries:
        l, prims = entry[0], entry[1:]
        kind = "gto" if l < 2 else ("gto_cartesian" if cartesian else "gto_spherical")
        shells.append(
            {
                "function_type": kind,
                "region": "",
                "angular_momentum": [int(l)],
                "exponents": [repr(float(p[0])) for p in prims],
                "coefficients": [[repr(float(p[1])) for p in prims]],
            }
        )
    return shells


def bse_dict(doc: dict, labels: dict[str, str]) -> dict:
    """A basis_set_exchange basis dictionary of the document: element -> its label's shells."""
    cart = bool(doc.get("cartesian"))
    elements = {
        str(ELEMENTS.index(el) + 1): {"electron_shells": _shells(doc["basis"][lab], cart), "references": []}
        for el, lab in sorted(labels.items(), key=lambda kv: ELEMENTS.index(kv[0]))
    }
    types = ["gto", "gto_cartesian" if cart else "gto_spherical"]
    name = "auditor-pruned"  # one token: several formats put the name where no space may go
    return {
        "molssi_bse_schema": {"schema_type": "complete", "schema_version": "0.1"},
        "revision_description": "written by auditor prune",
        "revision_date": "",
        "version": "1",
        "function_types": types,
        "names": [name],
        "tags": [],
        "family": "",
        "description": f"{doc.get('basis_name', '')} pruned to a smallest eigenvalue of {doc.get('target')}",
        "role": "orbital",
        "auxiliaries": {},
        "name": name,
        "elements": elements,
    }


def _write(d: dict, fmt: str) -> str:
    from basis_set_exchange import writers

    return writers.write_formatted_basis_str(d, fmt)


def _read(text: str, fmt: str) -> dict | None:
    """basis_set_exchange's reading of ``text`` (element Z -> shells), None without a reader."""
    from basis_set_exchange import readers

    fmt = _READ_AS.get(fmt, fmt)
    if fmt not in readers.get_reader_formats():
        return None
    if fmt == "gaussian94":  # psi4's file starts with "spherical" or "cartesian" and a "****" line
        lines = [line for line in text.splitlines() if line.strip().lower() not in ("spherical", "cartesian")]
        while lines and lines[0].strip() in ("", "****"):
            lines.pop(0)
        text = "\n".join(lines)
    return readers.read_formatted_basis_str(text, fmt)["elements"]


def _as_numbers(shells: Sequence[dict]) -> list[tuple]:
    """Shells as sorted (l, exponents, coefficient columns) tuples of floats."""
    out = []
    for sh in shells:
        exps = tuple(float(e) for e in sh["exponents"])
        for l, col in zip(_moments(sh), sh["coefficients"]):
            out.append((l, exps, tuple(float(c) for c in col)))
    return sorted(out)


def _moments(sh: dict) -> list[int]:
    am = sh["angular_momentum"]
    return am if len(am) == len(sh["coefficients"]) else am * len(sh["coefficients"])


def _split(shells: list[tuple]) -> list[tuple]:
    """General contractions split into single columns, zero coefficients dropped."""
    out = []
    for l, exps, col in shells:
        kept = [(e, c) for e, c in zip(exps, col) if c != 0.0]
        out.append((l, tuple(e for e, _ in kept), tuple(c for _, c in kept)))
    return sorted(out)


#: read back within this relative difference: the same numbers; within ROUNDED_RTOL: the
#: format prints fewer digits than the document holds
SAME_RTOL = 1e-10
ROUNDED_RTOL = 1e-3
SAME = "same exponents and coefficients"


def same_shells(expected: dict, read: dict) -> str:
    """`SAME`, the same to the digits the format prints, or what differs."""
    worst = 0.0
    for z, block in expected.items():
        el = ELEMENTS[int(z) - 1]
        got = read.get(z) or read.get(int(z))
        if not got:
            return f"element {el} missing when read back"
        a = _split(_as_numbers(block["electron_shells"]))
        b = _split(_as_numbers(got["electron_shells"]))
        if len(a) != len(b):
            return f"element {el}: {len(b)} shells read back, {len(a)} written"
        for (la, ea, ca), (lb, eb, cb) in zip(a, b):
            if la != lb or len(ea) != len(eb) or len(ca) != len(cb):
                return f"element {el}: a shell of l={la} comes back as l={lb} or with other primitives"
            worst = max(worst, _rel(ea, eb), _rel(ca, cb))
    if worst <= SAME_RTOL:
        return SAME
    if worst <= ROUNDED_RTOL:
        return f"same to a relative {worst:.0e} (the format prints fewer digits)"
    return f"numbers differ when read back (relative {worst:.1e})"


def _rel(x: Sequence[float], y: Sequence[float]) -> float:
    return max((abs(a - b) / max(abs(a), abs(b), 1e-300) for a, b in zip(x, y)), default=0.0)


def export_texts(doc: dict, formats: Sequence[str]) -> list[tuple[ExportFile, str | None]]:
    """Each format's text (None when refused) and its record (file name left to the caller)."""
    programs = writer_formats()
    var = variants(doc)
    per_atom = {el: labs for el, labs in var.items() if len(labs) > 1}
    out: list[tuple[ExportFile, str | None]] = []
    for fmt in formats:
        program = programs.get(fmt)
        if program is None:
            raise ValueError(f"basis_set_exchange has no writer {fmt!r}")
        if not per_atom:
            out.append(_one_file(doc, fmt, program, {el: labs[0] for el, labs in var.items()}))
        elif fmt in PER_ATOM_FORMATS:
            out.append(_per_atom_file(doc, fmt, program, var))
        else:
            which = ", ".join(f"{el} ({len(labs)} sets)" for el, labs in per_atom.items())
            why = (
                f"not written: atoms of one element keep different shells ({which}) and {program}'s basis format "
                "names elements, not atoms; use the NWChem or Gaussian file, which name atoms"
            )
            out.append((ExportFile(fmt, program, None, False, "not written", why), None))
    return out


def _check(d: dict, text: str, fmt: str) -> str:
    """Read ``text`` back and compare it with the dictionary it was written from."""
    try:
        read = _read(text, fmt)
    except Exception as exc:  # basis_set_exchange's readers raise RuntimeError, KeyError, ValueError, ...
        return f"read back failed ({type(exc).__name__}: {str(exc).splitlines()[0][:80] if str(exc) else ''})"
    return "no reader" if read is None else same_shells(d["elements"], read)


def _one_file(doc: dict, fmt: str, program: str, labels: dict[str, str]) -> tuple[ExportFile, str]:
    d = bse_dict(doc, labels)
    text = _write(d, fmt)
    checked = _check(d, text, fmt)
    note = "one basis per element (every atom of an element keeps the same shells)"
    return ExportFile(fmt, program, None, True, checked, note), text


def _per_atom_file(doc: dict, fmt: str, program: str, var: dict[str, list[str]]) -> tuple[ExportFile, str]:
    """One block per set of atoms: NWChem tags, Gaussian atom numbers; the joined file is
    split again and every block read back."""
    atoms_of: dict[str, list[int]] = {}
    for i, (label, _) in enumerate(doc["atoms"]):
        atoms_of.setdefault(label, []).append(i + 1)
    blocks, expected = [], {}
    for el, labs in var.items():
        for lab in labs:
            d = bse_dict(doc, {el: lab})
            atoms = _same_basis_atoms(doc, lab, atoms_of)
            key = lab.removeprefix("ghost-") if fmt == "nwchem" else " ".join(map(str, atoms))
            expected[key] = (el, d)
            blocks.append(_relabel(_write(d, fmt), fmt, el, lab, atoms))
    text = _join(blocks, fmt)
    problems = []
    for key, (el, d) in expected.items():
        block = _block_as_element(text, fmt, key, el)
        result = _check(d, block, fmt)
        if result != SAME:
            problems.append(f"{key}: {result}")
    checked = "; ".join(problems) or SAME
    how = (
        "one block per set of atoms, tagged by the label of the pruned-basis document (give those atoms that tag "
        "in the NWChem geometry, e.g. H10)"
        if fmt == "nwchem"
        else "one block per set of atoms, headed by the atom numbers (Gaussian Gen input)"
    )
    return ExportFile(fmt, program, None, True, checked, how), text


def _block_as_element(text: str, fmt: str, key: str, el: str) -> str:
    """The block of ``key`` (a tag or the atom numbers) cut from a joined file, with the
    element symbol put back, as the format's reader takes it."""
    lines = text.splitlines()
    if fmt == "nwchem":
        keep, tag = [], None
        for line in lines:
            head = line.split()
            if head[:1] in (["BASIS"], ["END"]):
                keep.append(line)
                continue
            if len(head) == 2 and head[1].isalpha():  # a shell header: TAG  S
                tag = head[0]
                line = f"{el}  {head[1]}"
            if tag == key:
                keep.append(line)
        return "\n".join(keep)
    out, inside = [], False
    for line in lines:
        if line.strip().endswith(" 0") and line.strip()[:-2].replace(" ", "").isdigit():
            inside = line.strip()[:-2].strip() == key
            if inside:
                out.append(f"{el}     0")
            continue
        if inside:
            out.append(line)
            if line.strip() == "****":
                inside = False
    return "\n".join(out)


def _same_basis_atoms(doc: dict, lab: str, atoms_of: dict[str, list[int]]) -> list[int]:
    """1-based atoms whose label has the same shells as ``lab``."""
    target = repr(doc["basis"][lab])
    return sorted(a for other, nums in atoms_of.items() if repr(doc["basis"][other]) == target for a in nums)


def _relabel(text: str, fmt: str, el: str, lab: str, atoms: list[int]) -> str:
    """The written block with the element replaced by the tag (NWChem) or atom numbers (Gaussian)."""
    out = []
    for line in text.splitlines():
        tokens = line.split()
        if fmt == "nwchem" and tokens and tokens[0] == el and len(tokens) == 2 and tokens[1].isalpha():
            line = f"{lab.removeprefix('ghost-'):<6}{tokens[1]}"
        elif fmt == "gaussian94" and tokens == [el, "0"]:
            line = " ".join(str(a) for a in atoms) + " 0"
        out.append(line)
    return "\n".join(out)


def _join(blocks: list[str], fmt: str) -> str:
    """Blocks of one format as one file (NWChem: one BASIS ... END around every block)."""
    if fmt != "nwchem":
        return "\n".join(blocks) + "\n"
    inner = []
    for b in blocks:
        lines = b.splitlines()
        start = next(i for i, line in enumerate(lines) if line.strip().upper().startswith("BASIS"))
        end = max(i for i, line in enumerate(lines) if line.strip().upper() == "END")
        inner += lines[start + 1 : end]
    head = next(line for line in blocks[0].splitlines() if line.strip().upper().startswith("BASIS"))
    return "\n".join([*blocks[0].splitlines()[: blocks[0].splitlines().index(head)], head, *inner, "END", ""])


def file_name(stem: str, fmt: str) -> str:
    """``<stem>.pruned.<format><extension>``, e.g. water.pruned.nwchem.nw (psi4 and Gaussian
    share an extension, so the format name is part of the file name)."""
    from basis_set_exchange import writers

    return f"{stem}.pruned.{fmt}{writers.get_format_extension(fmt)}"


def parse_formats(text: str | None) -> list[str]:
    """``--export`` as a list of writer formats: "all", "none", or a comma-separated list
    (the default when None). UsageError for a format basis_set_exchange does not write."""
    from ..base.errors import UsageError

    if text is None:
        return list(DEFAULT_FORMATS)
    value = text.strip().lower()
    if value == "none":
        return []
    known = writer_formats()
    if value == "all":
        return list(known)
    asked = [f.strip() for f in value.split(",") if f.strip()]
    bad = [f for f in asked if f not in known]
    if bad:
        raise UsageError(f"--export: no writer for {', '.join(bad)}; basis_set_exchange writes {', '.join(known)}")
    return list(dict.fromkeys(asked))


def as_record(f: ExportFile) -> dict[str, Any]:
    return dict(f.__dict__)
