"""Basis names and files -> per-element shells, and shell metadata (exponent, diffuse)."""

from __future__ import annotations

import difflib
import math
import os
import re
from dataclasses import dataclass, field, replace
from functools import cache, lru_cache
from pathlib import Path
from typing import Any

from ..base.elements import element_symbol
from ..base.errors import InputError, UsageError
from ..base.jsonio import to_jsonable
from ..base.textio import NUMBER, read_text

#: A shell counts as diffuse (when the basis name does not tell us its parent, see
#: ``parent_basis``) if its smallest exponent is below this fraction of the smallest
#: exponent of the same angular momentum in the reference valence basis below.
#: Heuristic of our own, calibrated on the cc-pVXZ / aug-cc-pVXZ pairs for H and C-O.
FALLBACK_FRACTION = 0.35
REFERENCE_BASES = ("cc-pvdz", "def2-svp")
#: the copies of named basis sets the auditor can read
SOURCES = ("pyscf", "bse")


@dataclass(frozen=True)
class BasisSpec:
    """Which basis each element gets: a default plus per-element overrides.

    Each value is a basis name that pyscf knows or a path to a basis file in a
    format pyscf parses (NWChem format).
    """

    default: str
    per_element: dict[str, str] = field(default_factory=dict)
    cartesian: bool = False
    #: where named bases come from: "pyscf" (pyscf's own library, which asks
    #: basis_set_exchange for names it lacks) or "bse" (basis_set_exchange). Files are files.
    source: str = "pyscf"
    #: the explicit basis data of the input (a checkpoint's, a QCSchema document's) that
    #: the audit uses as they are; None for named bases and files
    data: FileBasis | None = None

    def for_element(self, element: str) -> str:
        return self.per_element.get(element, self.default)

    def describe(self) -> str:
        extra = ", ".join(f"{el}={name}" for el, name in sorted(self.per_element.items()))
        kind = "cartesian" if self.cartesian else "spherical"
        copy = ", basis_set_exchange" if self.source == "bse" else ""
        origin = f" (data of the {self.data.origin})" if self.data is not None else ""
        name = self.default or "each input's own basis"
        return name + (f" ({extra})" if extra else "") + origin + f" [{kind}{copy}]"

    def files(self) -> list[str]:
        """The basis files this specification names (inputs: never overwritten)."""
        if self.data is not None:
            return []
        names = [self.default, *self.per_element.values()]
        return [n for n in dict.fromkeys(names) if n and Path(n).expanduser().is_file()]

    def __post_init__(self) -> None:
        object.__setattr__(self, "per_element", dict(sorted(self.per_element.items())))
        if self.source not in SOURCES:
            raise UsageError(f"basis source must be one of {', '.join(SOURCES)}, got {self.source!r}")

    def as_dict(self) -> dict:
        """The report's ``basis_spec`` (the data themselves are recorded by digest in ``basis_data``)."""
        out = to_jsonable(replace(self, data=None))
        del out["data"]
        return out


#: Largest angular momentum accepted in basis data read from a file (k functions; pyscf's
#: integral library goes no further in practice) and the largest number of primitives or
#: contractions in one shell: generous bounds of our own that no published basis reaches.
MAX_L = 8
MAX_PRIMITIVES = 64
MAX_CONTRACTIONS = 64


@dataclass(frozen=True)
class FileBasis:
    """The basis an input file carries: a name (a QCSchema ``model.basis`` string), or
    explicit shells per atom in pyscf's internal format (a pyscf checkpoint, a QCSchema
    basis object), checked number by number (``check_shells``)."""

    origin: str  # "checkpoint" or "QCSchema document"
    name: str  # the name the file gives, or "custom"
    atoms: tuple = ()  # per atom: frozen shells; () when the file names its basis only
    cartesian: bool = False
    sha256: str = ""  # of the file

    @property
    def explicit(self) -> bool:
        return bool(self.atoms)

    def subset(self, atoms: list[int]) -> FileBasis:
        """The basis data of the 0-based ``atoms`` only."""
        return replace(self, atoms=tuple(self.atoms[i] for i in atoms)) if self.atoms else self

    def as_dict(self) -> dict:
        """JSON form (what a gate item carries to its worker and its cache key hashes)."""
        return {
            "origin": self.origin,
            "name": self.name,
            "atoms": thaw(self.atoms),
            "cartesian": self.cartesian,
            "sha256": self.sha256,
        }

    @staticmethod
    def from_dict(d: dict, where: str = "basis data") -> FileBasis:
        """``as_dict`` read back, every shell checked again."""
        atoms = tuple(check_shells(a, f"{where}: atom {i + 1}") for i, a in enumerate(d.get("atoms") or []))
        return FileBasis(str(d["origin"]), str(d["name"]), atoms, bool(d["cartesian"]), str(d.get("sha256", "")))


def _finite(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _check_shell(shell: object, where: str) -> tuple:
    """One shell [l, (kappa,) [exponent, c1, c2, ...], ...] checked and frozen."""
    if not isinstance(shell, (list, tuple)) or len(shell) < 2:
        raise InputError(f"{where}: a shell must be [l, [exponent, coefficient, ...], ...]")
    l = shell[0]
    if isinstance(l, bool) or not isinstance(l, int) or not 0 <= l <= MAX_L:
        raise InputError(f"{where}: angular momentum must be an integer from 0 to {MAX_L}, found {str(l)[:20]!r}")
    head = 2 if len(shell) > 2 and isinstance(shell[1], int) and not isinstance(shell[1], bool) else 1
    if head == 2 and not -1 <= shell[1] <= 1:
        raise InputError(f"{where}: kappa must be -1, 0 or 1, found {shell[1]!r}")
    prims = shell[head:]
    if not 1 <= len(prims) <= MAX_PRIMITIVES:
        raise InputError(f"{where}: a shell has 1 to {MAX_PRIMITIVES} primitives, found {len(prims)}")
    width = None
    for p in prims:
        if not isinstance(p, (list, tuple)) or not 2 <= len(p) <= MAX_CONTRACTIONS + 1:
            raise InputError(f"{where}: a primitive must be [exponent, coefficient, ...]")
        if width is not None and len(p) != width:
            raise InputError(f"{where}: the primitives of a shell have different numbers of coefficients")
        width = len(p)
        if not all(_finite(x) for x in p):
            bad = next(x for x in p if not _finite(x))
            raise InputError(f"{where}: basis data must be finite numbers, found {str(bad)[:20]!r}")
        if not p[0] > 0:
            raise InputError(f"{where}: exponent {p[0]!r} must be positive")
    return tuple(shell[:head]) + tuple(tuple(float(x) for x in p) for p in prims)


def check_shells(shells: object, where: str) -> tuple:
    """Shells in pyscf's internal list format read from a file, checked: every structure
    of the expected shape, every number finite, exponents positive; frozen (nested tuples).
    InputError naming ``where`` otherwise."""
    if not isinstance(shells, (list, tuple)) or not shells:
        raise InputError(f"{where}: expected a non-empty list of shells")
    return tuple(_check_shell(sh, f"{where}: shell {k + 1}") for k, sh in enumerate(shells))


def parse_overrides(items: list[str] | None) -> dict[str, str]:
    """Parse ['H=cc-pvtz', 'O=file.nw'] into {'H': 'cc-pvtz', 'O': 'file.nw'}."""
    out: dict[str, str] = {}
    for item in items or []:
        if "=" not in item:
            raise UsageError(f"--basis-for expects ELEMENT=BASIS, got {item!r}")
        el, name = item.split("=", 1)
        try:
            sym = element_symbol(el, "--basis-for")
        except InputError as exc:
            raise UsageError(str(exc)) from None
        out[sym] = check_basis_name(name, f"--basis-for {el}")
    return out


def _canon(name: str) -> str:
    from pyscf.gto import basis as pbasis  # pyscf is slow to import: only when a basis is looked up

    return pbasis._format_basis_name(name)


@cache
def _known_names() -> tuple[str, ...]:
    from pyscf.gto import basis as pbasis  # pyscf is slow to import: only when a basis is looked up

    return tuple(sorted(pbasis.ALIAS))


@cache
def _exchange_names() -> frozenset:
    """Basis names of basis_set_exchange, which pyscf consults for names it does not hold."""
    try:
        import basis_set_exchange as bse  # slow to import: only when a name is not pyscf's
    except ImportError:
        return frozenset()
    return frozenset(n.lower() for n in bse.get_all_basis_names())


def _in_exchange(name: str) -> bool:
    return name.strip().lower() in _exchange_names()


@cache
def _display_names() -> dict[str, str]:
    """pyscf's canonical name -> a name as people write it (basis_set_exchange's, if any)."""
    shown = {k: k for k in _known_names()}
    for n in sorted(_exchange_names()):
        shown[_canon(n)] = n
    return shown


def _suggest(name: str) -> str:
    shown = _display_names()
    close = difflib.get_close_matches(_canon(name), list(shown), n=3, cutoff=0.6)
    return f"; close names: {', '.join(shown[c] for c in close)}" if close else ""


def check_basis_name(name: str, where: str = "basis") -> str:
    """``name`` stripped, or UsageError for an empty name or one with control characters
    (pyscf would parse a name with a line break as basis text)."""
    if not isinstance(name, (str, os.PathLike)):
        raise UsageError(f"{where}: a basis is a name or a file path, got {name!r:.40}")
    text = str(name).strip()
    if not text:
        raise UsageError(f"{where}: empty basis name")
    if any(ord(c) < 32 or ord(c) == 127 for c in text):
        raise UsageError(f"{where}: a basis name or file name is one line without control characters")
    return text


def eval_off() -> None:
    """Turn off pyscf's evaluation of text as Python in every parser that has it.

    pyscf's basis, ECP and geometry parsers evaluate a data line that is not a plain
    number with ``eval`` unless DISABLE_EVAL is set; a basis file could then run code.
    The flag is read at import time into each parser module, so it is set in each one
    (and in pyscf's config, for parsers imported later)."""
    import pyscf  # pyscf is slow to import: only when a basis or geometry is parsed
    import pyscf.gto.basis.parse_cp2k as cp2k
    import pyscf.gto.basis.parse_molpro as molpro
    import pyscf.gto.basis.parse_nwchem as nwchem
    import pyscf.gto.basis.parse_nwchem_ecp as nwchem_ecp
    import pyscf.gto.mole as mole

    pyscf.__config__.DISABLE_EVAL = True
    for module in (mole, nwchem, nwchem_ecp, cp2k, molpro):
        module.DISABLE_EVAL = True


#: NWChem-format basis files above this size are refused (published sets are a few MB).
MAX_BASIS_FILE_BYTES = 16 << 20
_KEYWORDS = ("BASIS", "END", "ECP", "SO")


def _stamp(path: str) -> tuple[str, int, int]:
    """(real path, size, modification time): what the caches of basis files are keyed
    on, so that another working folder or an edited file is never served stale."""
    try:
        st = os.stat(path)
    except (OSError, ValueError):
        return (path, -1, -1)
    return (os.path.realpath(path), st.st_size, st.st_mtime_ns)


def read_basis_file(path: str) -> dict[str, tuple[str, ...]]:
    """The lines of each element's shells in an NWChem-format basis file, checked line by
    line: every data line must be plain ASCII numbers (InputError naming the line
    otherwise). ECP sections are skipped: they do not enter the overlap."""
    return _read_basis_file(path, _stamp(path))


@lru_cache(maxsize=64)
def _read_basis_file(path: str, stamp: tuple[str, int, int]) -> dict[str, tuple[str, ...]]:
    text = read_text(path, "basis file", MAX_BASIS_FILE_BYTES, hint="")
    blocks: dict[str, list[str]] = {}
    current: list[str] | None = None
    in_ecp = False
    for k, raw in enumerate(text.splitlines(), 1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        tokens = line.split()
        head = tokens[0].upper()
        if head in _KEYWORDS:
            in_ecp = head == "ECP" or (in_ecp and head != "END")
            current = None
            continue
        if tokens[0][0].isalpha():
            try:
                symbol = element_symbol(tokens[0], f"{path}:{k}")
            except InputError:
                raise InputError(
                    f"{path}:{k}: expected an element and a shell type (e.g. 'H S'), found {line[:40]!r}"
                ) from None
            current = None if in_ecp else blocks.setdefault(symbol, [])
        elif not all(NUMBER.fullmatch(t) for t in tokens):
            bad = next(t for t in tokens if not NUMBER.fullmatch(t))
            raise InputError(f"{path}:{k}: basis data must be plain numbers, found {bad[:40]!r}")
        elif current is None and not in_ecp:
            raise InputError(f"{path}:{k}: numbers before any 'ELEMENT SHELL' line")
        if current is not None:
            current.append(line)
    if not blocks:
        raise InputError(
            f"{path}: no basis data in NWChem format (lines such as 'H S' followed by exponents and coefficients)"
        )
    return {el: tuple(lines) for el, lines in blocks.items()}


def _file_shells(path: str, element: str) -> list:
    from pyscf.gto import basis as pbasis  # pyscf is slow to import: only when a basis file is read
    from pyscf.gto.basis import parse_nwchem

    blocks = read_basis_file(path)
    if element not in blocks:
        raise InputError(
            f"basis file {path} has no functions for element {element} (it has {', '.join(sorted(blocks))})"
        )
    try:  # only this element's lines: pyscf alone would fall back to the whole file
        return parse_nwchem.parse("\n".join(blocks[element]), optimize=pbasis.OPTIMIZE_CONTRACTION)
    except Exception as exc:  # pyscf raises BasisNotFoundError, ValueError, IndexError, ...
        raise InputError(
            f"basis file {path}: cannot read the shells of {element} "
            f"({exc.__class__.__name__}: {str(exc).strip().splitlines()[0] if str(exc).strip() else ''})"
        ) from None


def load_shells(name: str, element: str, source: str = "pyscf") -> tuple:
    """Shells of ``element`` in basis ``name`` (pyscf's internal list format).

    ``name`` is a basis name or an NWChem-format file (read by a numbers-only check
    first); ``source`` picks the copy of a named basis ("pyscf" or "bse"). Raises
    InputError naming what is missing, with close names for typos.
    """
    name = check_basis_name(name)
    path = Path(name).expanduser()
    return _load_shells(name, element, source, _stamp(str(path)) if os.path.lexists(path) else None)


@cache
def _load_shells(name: str, element: str, source: str, stamp: tuple[str, int, int] | None) -> tuple:
    eval_off()
    path = Path(name).expanduser()
    if stamp is not None:
        shells = _file_shells(str(path), element)
    elif source == "bse":
        shells = _exchange_shells(name, element)
    else:
        shells = _pyscf_shells(name, element)
    if not shells:
        where = f"basis file {name}" if stamp is not None else f"basis {name!r}"
        raise InputError(f"{where} has no functions for element {element}")
    bad = _bad_exponent(shells)
    if bad is not None:
        raise InputError(
            f"basis {name!r}: element {element} has a shell with exponent {bad!r}; "
            "exponents must be positive and finite"
        )
    return tuple(_freeze(s) for s in shells)


def _pyscf_shells(name: str, element: str) -> list:
    from pyscf.gto import basis as pbasis  # pyscf loads only where the audits run

    try:
        return pbasis.load(name, element)
    except Exception:  # pyscf raises BasisNotFoundError, KeyError, RuntimeError, ...
        if not _known_anywhere(name):
            raise InputError(f"unknown basis name {name!r}{_suggest(name)}") from None
        raise InputError(f"basis {name!r} has no functions for element {element}") from None


def _known_anywhere(name: str) -> bool:
    from pyscf.gto import basis as pbasis

    return _canon(name) in pbasis.ALIAS or bool(pbasis._is_pople_basis(name)) or _in_exchange(name)


def _exchange_shells(name: str, element: str) -> list:
    """The shells of ``element`` in basis_set_exchange's copy of ``name``, in pyscf's
    format: one entry per angular momentum of each shell, general contractions kept."""
    import basis_set_exchange as bse  # a dependency; imported where needed (it reads its data lazily)

    if not _in_exchange(name):
        raise InputError(f"basis_set_exchange has no basis named {name!r}{_suggest(name)}")
    try:
        data = bse.get_basis(name, elements=[element], header=False)
    except Exception:  # basis_set_exchange raises KeyError, RuntimeError, ... for a missing element
        raise InputError(f"basis_set_exchange's {name!r} has no functions for element {element}") from None
    record: dict = next(iter(data["elements"].values()), {})
    shells = []
    for shell in record.get("electron_shells", []):
        exps = [float(e) for e in shell["exponents"]]
        columns = [[float(c) for c in row] for row in shell["coefficients"]]
        moments = shell["angular_momentum"]
        if len(moments) == 1:  # general contraction: every coefficient row is one contraction
            shells.append([moments[0], *[[e, *(col[p] for col in columns)] for p, e in enumerate(exps)]])
        else:  # an SP-type shell: one coefficient row per angular momentum
            for l, col in zip(moments, columns):
                shells.append([l, *[[e, col[p]] for p, e in enumerate(exps)]])
    return sorted(shells, key=lambda sh: sh[0])


def shells_digest(shells: tuple | list) -> str:
    """SHA-256 of the shells as pyscf reads them (exact floats), to tell copies apart."""
    import hashlib
    import json

    text = json.dumps(thaw(shells) if isinstance(shells, tuple) else shells, separators=(",", ":"))
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def basis_origin(name: str, element: str, source: str = "pyscf") -> dict:
    """Where the shells of ``element`` in ``name`` came from: pyscf's library (and its
    version), basis_set_exchange (and its version), or a file (and its SHA-256); with the
    digest of the shells themselves."""
    from importlib.metadata import version

    path = Path(name).expanduser()
    shells = load_shells(name, element, source)
    record: dict = {"element": element, "basis": name}
    if path.exists():
        import hashlib

        record.update(source="file", sha256=hashlib.sha256(path.read_bytes()).hexdigest())
    elif source == "bse" or not _in_pyscf(name):
        how = "basis_set_exchange" if source == "bse" else "basis_set_exchange (pyscf's fallback)"
        record.update(source=how, version=version("basis_set_exchange"))
    else:
        record.update(source="pyscf", version=version("pyscf"))
    record["digest"] = shells_digest(shells)
    return record


def _in_pyscf(name: str) -> bool:
    from pyscf.gto import basis as pbasis

    return _canon(name) in pbasis.ALIAS or bool(pbasis._is_pople_basis(name))


def _bad_exponent(shells: list) -> object | None:
    for shell in shells:
        prims = shell[2:] if isinstance(shell[1], int) else shell[1:]
        for p in prims:
            if not (isinstance(p[0], (int, float)) and math.isfinite(p[0]) and p[0] > 0):
                return p[0]
    return None


def _freeze(shell: object) -> object:
    if isinstance(shell, list):
        return tuple(_freeze(x) for x in shell)
    return shell


def thaw(shells: Any) -> Any:
    """Frozen shells (nested tuples) back to pyscf's mutable list format (nested lists);
    anything else, such as the numbers inside, as it is."""
    if isinstance(shells, tuple):
        return [thaw(x) for x in shells]
    return shells


_AUG_PATTERNS = (
    (re.compile(r"^(?:[dtq]-)?aug-(.+)$"), r"\1"),
    (re.compile(r"^ma-(.+)$"), r"\1"),
    (re.compile(r"^(def2-(?:svp|tzvp|tzvpp|qzvp|qzvpp))d$"), r"\1"),
)


def parent_basis(name: str) -> str | None:
    """The basis without its diffuse augmentation, when the name says so.

    aug-cc-pvtz -> cc-pvtz, d-aug-X -> X, ma-def2-svp -> def2-svp,
    def2-tzvppd -> def2-tzvpp, 6-311++g** -> 6-311g**. None otherwise.
    """
    low = name.strip().lower()
    for pattern, repl in _AUG_PATTERNS:
        if pattern.match(low):
            return pattern.sub(repl, low)
    if re.match(r"^\d-\d+\+{1,2}g", low):
        return low.replace("+", "", 2) if "++" in low else low.replace("+", "", 1)
    return None


def _min_exponent_by_l(shells: tuple | list) -> dict[int, float]:
    out: dict[int, float] = {}
    for shell in shells:
        l = shell[0]
        prims = shell[1:] if not isinstance(shell[1], (int,)) else shell[2:]
        exps = [p[0] for p in prims]
        if exps:
            out[l] = min(out.get(l, float("inf")), min(exps))
    return out


@cache
def diffuse_rule(name: str, element: str, source: str = "pyscf") -> tuple[str, dict[int, float], float]:
    """How shells of ``element`` in basis ``name`` (the copy ``source``) are judged diffuse.

    Returns (how, cut-off exponent per l, cut-off for l not listed). A shell whose
    smallest exponent lies below the cut-off for its l is diffuse. With a known
    parent basis the cut-off is the parent's smallest exponent (the shells that the
    augmentation added, read from the same copy: copies of one basis can differ in their
    exponents); otherwise FALLBACK_FRACTION of a reference valence basis.
    """
    parent = parent_basis(name) if not Path(name).expanduser().is_file() else None
    if parent:
        try:
            ref = _min_exponent_by_l(load_shells(parent, element, source))
            return (f"below the smallest exponent of {parent}", {l: a * 0.999 for l, a in ref.items()}, float("inf"))
        except InputError:
            pass
    for ref_name in REFERENCE_BASES:
        try:
            ref = _min_exponent_by_l(load_shells(ref_name, element))
        except InputError:
            continue
        cut = {l: FALLBACK_FRACTION * a for l, a in ref.items()}
        top = cut[max(cut)]
        return (f"below {FALLBACK_FRACTION} x the smallest exponent of {ref_name}", cut, top)
    return ("no reference basis for this element", {}, 0.0)


def is_diffuse(name: str, element: str, l: int, exponent: float, source: str = "pyscf") -> bool:
    """Whether a shell with angular momentum ``l`` and smallest exponent counts as diffuse
    (``source``: the copy of the basis, as for `load_shells`)."""
    _, cut, other = diffuse_rule(name, element, source)
    return exponent < cut.get(l, other)
