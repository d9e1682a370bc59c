"""Property-based tests: random bytes and mutated XYZ, extended XYZ and basis text thrown at
the readers. Only InputError or UsageError may come out, a geometry that is read has finite
coordinates within range and integer charge and multiplicity, and nothing in the text runs
(a canary file is never created)."""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from auditor.base.errors import InputError, UsageError
from auditor.inputs.basis import load_shells, read_basis_file
from auditor.inputs.geometry import MAX_COORDINATE, check_atom_numbers, parse_atom_ranges
from auditor.inputs.readers import read_geometry

CANARY = Path("/tmp") / f"auditor-hypothesis-canary-{os.getpid()}"
PY = f"__import__('pathlib').Path('{CANARY}').touch()"

WATER = ["O 0.0 0.0 0.1173", "H 0.0 0.7572 -0.4692", "H 0.0 -0.7572 -0.4692"]
COMMENTS = ["", "charge=0 multiplicity=1", 'Properties=species:S:1:pos:R:3 pbc="F F F" charge=-1']
ODD_TOKENS = [
    "1_0",
    "１.0",
    "٣",
    "۳",
    "nan",
    "NaN",
    "inf",
    "-Infinity",
    "1e400",
    "1e200",
    "-1e308",
    "1e-400",
    "0x10",
    "1D3",
    "1.0d-1",
    "+.5",
    "5.",
    ".",
    "-",
    "e5",
    "1e",
    "٫5",
    "\u00a0",
    "\u200b",
    "\x00",
    "\ufeff",
    "Ⅻ",
    "²",
    "charge=abc",
    "multiplicity=1.5",
    "mult=0",
    "charge=",
    "[/]",
    "[bold]",
    "Xx",
    "h",
    "118",
    "119",
    "0",
    "999999999999",
    PY,
    "\\",
    "'",
    '"',
    "#",
    "@x",
    "\r",
]

SETTINGS = settings(
    max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture]
)


def _text(comment: str, atoms: list[str], count: str | None = None) -> str:
    return "\n".join([count or str(len(atoms)), comment, *atoms]) + "\n"


@st.composite
def near_xyz(draw) -> str:
    """A valid XYZ (or extended XYZ) text with a few mutations."""
    atoms = [ln.split() for ln in WATER]
    comment = draw(st.sampled_from(COMMENTS))
    count = None
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["token", "swap", "count", "comment", "drop", "duplicate", "unicode"]))
        i = draw(st.integers(0, len(atoms) - 1)) if atoms else 0
        if kind == "token" and atoms:
            atoms[i][draw(st.integers(0, 3))] = draw(st.sampled_from(ODD_TOKENS))
        elif kind == "swap" and atoms:
            j, k = draw(st.integers(0, 3)), draw(st.integers(0, 3))
            atoms[i][j], atoms[i][k] = atoms[i][k], atoms[i][j]
        elif kind == "count":
            count = draw(st.sampled_from(["0", "-3", "2", "4", "1e3", "three", "３", "999999999999", ""]))
        elif kind == "comment":
            comment += " " + draw(st.sampled_from(ODD_TOKENS))
        elif kind == "drop" and atoms:
            atoms.pop(i)
        elif kind == "duplicate" and atoms:
            atoms.insert(i, list(atoms[i]))
        elif kind == "unicode" and atoms:
            atoms[i][draw(st.integers(1, 3))] += draw(st.text(min_size=1, max_size=3))
    text = _text(comment, [" ".join(a) for a in atoms], count)
    cut = draw(st.one_of(st.none(), st.integers(0, len(text))))
    return text if cut is None else text[:cut]


def _read_only_errors(path: Path) -> None:
    try:
        frames = read_geometry(path)
    except (InputError, UsageError) as exc:
        assert "\n" not in exc.message
        return
    for mol in frames:
        coords = np.asarray(mol.coords)
        assert coords.shape == (mol.n_atoms, 3) and mol.n_atoms >= 1
        assert np.isfinite(coords).all() and (np.abs(coords) <= MAX_COORDINATE).all()
        assert isinstance(mol.charge, int) and (mol.multiplicity is None or mol.multiplicity >= 1)
        assert all(math.isfinite(float(x)) for x in coords.ravel())


@pytest.fixture(scope="module", autouse=True)
def _canary():
    CANARY.unlink(missing_ok=True)
    yield
    assert not CANARY.exists(), "text in an input ran as code"


@SETTINGS
@given(data=st.binary(max_size=400), suffix=st.sampled_from([".xyz", ".extxyz", ".json", ".pdb", ".cif", ""]))
def test_random_bytes_give_only_input_errors(tmp_path, data, suffix):
    path = tmp_path / f"g{suffix}"
    path.write_bytes(data)
    _read_only_errors(path)


@SETTINGS
@given(text=near_xyz(), suffix=st.sampled_from([".xyz", ".extxyz", ".txt"]))
def test_mutated_xyz_gives_a_sane_geometry_or_an_input_error(tmp_path, text, suffix):
    path = tmp_path / f"g{suffix}"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    _read_only_errors(path)


@SETTINGS
@given(text=near_xyz())
def test_latin1_and_bom_variants(tmp_path, text):
    for i, data in enumerate(
        (b"\xef\xbb\xbf" + text.encode("utf-8", "surrogatepass"), text.encode("latin-1", "replace"))
    ):
        path = tmp_path / f"v{i}.xyz"
        path.write_bytes(data)
        _read_only_errors(path)


BASIS_LINES = [
    "H S",
    "  13.01 0.0197",
    "  1.962 0.138",
    "H P",
    "  0.727 1.0",
    "O S",
    "  5484.7 0.0018",
    "  825.2 0.0139",
]


@st.composite
def near_basis(draw) -> str:
    lines = [ln.split() for ln in BASIS_LINES]
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.integers(0, len(lines) - 1))
        kind = draw(st.sampled_from(["token", "drop", "duplicate", "keyword"]))
        if kind == "token":
            lines[i][draw(st.integers(0, len(lines[i]) - 1))] = draw(
                st.sampled_from([*ODD_TOKENS, "0", "-1.0", "0.0", "1e-320"])
            )
        elif kind == "drop" and len(lines) > 1:
            lines.pop(i)
        elif kind == "duplicate":
            lines.insert(i, list(lines[i]))
        else:
            lines.insert(i, [draw(st.sampled_from(["BASIS", "END", "ECP", "SO", "H", "S", "SP", "H L"]))])
    return "\n".join(" ".join(ln) for ln in lines) + "\n"


def _basis_only_errors(path: Path) -> None:
    try:
        read_basis_file(str(path))
        for element in ("H", "O"):
            shells = load_shells(str(path), element)
            for shell in shells:
                prims = shell[2:] if isinstance(shell[1], int) else shell[1:]
                assert all(p[0] > 0 and math.isfinite(p[0]) for p in prims)
    except (InputError, UsageError) as exc:
        assert "\n" not in exc.message


@SETTINGS
@given(data=st.binary(max_size=300))
def test_random_bytes_as_a_basis_file(tmp_path, data):
    path = tmp_path / "b.nw"
    path.write_bytes(data)
    _basis_only_errors(path)


@SETTINGS
@given(text=near_basis())
def test_mutated_basis_file(tmp_path, text):
    path = tmp_path / "b.nw"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    _basis_only_errors(path)


@SETTINGS
@given(
    spec=st.one_of(st.text(max_size=30), st.from_regex(r"[0-9]{1,20}(-[0-9]{1,20})?(,[0-9]{1,20})*", fullmatch=True))
)
def test_atom_ranges_never_expand_before_the_check(spec):
    try:
        parse_atom_ranges(spec)
        numbers = check_atom_numbers(spec, 50, "w.xyz")
    except UsageError as exc:
        assert "\n" not in exc.message
        return
    assert all(1 <= k <= 50 for k in numbers)
