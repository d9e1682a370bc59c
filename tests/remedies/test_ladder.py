"""The ladder of named bases: the calendar sets built by basis_set_exchange's stated rule
match its published copies; the ladder command writes a valid document; a published basis
that meets the target ranks first among the remedies."""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.inputs.basis import load_shells, thaw
from auditor.inputs.relatives import calendar_shells, n_functions, relatives, shells_per_l
from auditor.pipeline.run import make_spec, prepare
from auditor.report.schemas import validate
from helpers import WATER, make_molecule, write_xyz

FIRST_ROW = ["H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne"]


def test_relatives_of_named_bases():
    names = lambda basis: [r.name for r in relatives(basis)]  # noqa: E731
    assert names("aug-cc-pvtz") == ["jul-cc-pvtz", "jun-cc-pvtz", "may-cc-pvtz", "cc-pvtz"]
    assert names("aug-cc-pvdz") == ["jul-cc-pvdz", "jun-cc-pvdz", "cc-pvdz"]
    assert names("aug-cc-pvqz")[:4] == ["jul-cc-pvqz", "jun-cc-pvqz", "may-cc-pvqz", "apr-cc-pvqz"]
    assert names("d-aug-cc-pvtz")[:2] == ["aug-cc-pvtz", "jul-cc-pvtz"]
    assert names("def2-tzvppd") == ["ma-def2-tzvpp", "def2-tzvpp"]
    assert names("6-311++g**") == ["6-311+g**", "6-311g**"]
    assert names("cc-pvtz") == []
    assert [r.published for r in relatives("aug-cc-pvtz")][:3] == [
        "jul-cc-pV(T+d)Z",
        "jun-cc-pV(T+d)Z",
        "may-cc-pV(T+d)Z",
    ]


@pytest.mark.parametrize("zeta, months", [("d", ["jul", "jun"]), ("t", ["jul", "jun", "may"]), ("q", ["jun", "apr"])])
@pytest.mark.parametrize("source", ["pyscf", "bse"])
def test_rule_built_calendar_sets_match_the_published_ones_for_first_row_atoms(zeta, months, source):
    # Reference: basis_set_exchange's published jul/jun/may/apr-cc-pV(X+d)Z sets; for H-Ne
    # cc-pV(X+d)Z has the shells of cc-pVXZ, so the counts must agree shell for shell.
    for month in months:
        published = f"{month}-cc-pV({zeta.upper()}+d)Z"
        for el in FIRST_ROW:
            mine = calendar_shells(f"aug-cc-pv{zeta}z", el, month, source)
            theirs = thaw(load_shells(published, el, "bse"))
            assert n_functions(mine) == n_functions(theirs), (published, el)
            assert shells_per_l(mine) == shells_per_l(theirs), (published, el)


def test_jun_removes_the_highest_diffuse_shell_of_heavy_atoms_only():
    aug = thaw(load_shells("aug-cc-pvtz", "O"))
    jun = calendar_shells("aug-cc-pvtz", "O", "jun")
    assert n_functions(aug) - n_functions(jun) == 7  # one diffuse f
    assert n_functions(calendar_shells("aug-cc-pvtz", "H", "jul")) == n_functions(thaw(load_shells("cc-pvtz", "H")))


@pytest.fixture(scope="module")
def water_ladder(tmp_path_factory):
    out = tmp_path_factory.mktemp("ladder")
    path = write_xyz(out / "water.xyz", *WATER)
    res = CliRunner().invoke(
        app, ["ladder", str(path), "-b", "aug-cc-pvtz", "--bases", "def2-svp", "--target", "1e-2", "-o", str(out), "-q"]
    )
    assert res.exit_code == 0, res.output
    return out


def test_ladder_command_writes_a_valid_document(water_ladder):
    doc = json.loads((water_ladder / "water.ladder.json").read_text())
    validate(doc, "ladder")
    names = [r["basis"] for r in doc["rungs"]]
    assert names == ["aug-cc-pvtz", "jul-cc-pvtz", "jun-cc-pvtz", "may-cc-pvtz", "cc-pvtz", "def2-svp"]
    assert all(r["matches_published"] for r in doc["rungs"] if r["kind"] == "calendar")
    # Reference: a rule-built calendar set keeps a subset of the audited shells, so its
    # unit-diagonal S is a principal block of the full one; jul drops the diffuse shells of H.
    prep = prepare(make_molecule(*WATER), make_spec("aug-cc-pvtz"))
    t = prep.table
    keep = ~(t.shell_diffuse[t.func_shell] & (np.array(t.elements)[t.func_atom - 1] == "H"))
    jul = doc["rungs"][1]
    assert jul["n_functions"] == int(keep.sum())
    assert jul["smallest"] == pytest.approx(np.linalg.eigvalsh(prep.S[np.ix_(keep, keep)])[0], rel=1e-9)
    smallest = {r["basis"]: r["smallest"] for r in doc["rungs"]}
    chosen = max((r for r in doc["rungs"][1:] if r["reaches_target"]), key=lambda r: r["n_functions"])
    assert doc["chosen"] == chosen["use_name"] and smallest["aug-cc-pvtz"] < 1e-2
    assert "![Smallest overlap eigenvalue" in (water_ladder / "water.ladder.md").read_text()
    assert "data:image/png;base64," in (water_ladder / "water.ladder.html").read_text()


def test_a_published_basis_that_meets_the_target_ranks_first():
    r = auditor.audit(make_molecule(*WATER), "aug-cc-pvtz", remedies=auditor.RemedyOptions(target=2e-3)).as_dict()
    alts = r["remedies"]["alternatives"]
    named = r["remedies"]["named_basis"]
    assert alts[0]["kind"] == "named_basis" and alts[0]["reaches_target"]
    assert alts[0]["basis"] == named["chosen"]
    assert "use the published basis" in auditor.render_markdown(r)


@pytest.mark.parametrize("basis", ["aug-cc-pvdz", "6-311++g**"])
def test_relatives_evaluated_on_blocks_of_the_full_s_equal_their_own_overlap(basis):
    # Reference: numpy.linalg.eigvalsh of each relative's own unit-diagonal overlap built
    # by pyscf; the remedies take the block of the requested basis's S instead.
    from auditor.numerics.overlap import normalized_overlap
    from auditor.remedies.ladder import _mole, subset_functions

    mol = make_molecule(*WATER)
    spec = make_spec(basis)
    prep = prepare(mol, spec)
    for rung in relatives(spec.default):
        own = _mole(rung, mol, spec)
        idx = subset_functions(own, prep)
        assert idx is not None and idx.size == own.nao
        block = np.linalg.eigvalsh(prep.S[np.ix_(idx, idx)])
        assert np.allclose(block, np.linalg.eigvalsh(normalized_overlap(own)), rtol=1e-10, atol=1e-13)


def test_a_relative_with_other_exponents_is_not_a_block():
    # ma-def2-SVP has diffuse exponents of its own, not def2-SVPD's: no block of S gives it.
    from auditor.remedies.ladder import _mole, subset_functions

    mol = make_molecule(*WATER)
    spec = make_spec("def2-svpd")
    rung = next(r for r in relatives(spec.default) if r.name.startswith("ma-"))
    assert subset_functions(_mole(rung, mol, spec), prepare(mol, spec)) is None


def test_ladder_takes_the_basis_name_a_qcschema_input_carries(tmp_path):
    # The bundled QCSchema example names its basis in model.basis: the ladder uses it when
    # --basis is not given; an XYZ file carries none (usage error, exit code 2).
    from helpers import ROOT

    doc = ROOT / "example_geometries" / "ammonia_water_cp.json"
    named = json.loads(doc.read_text())["model"]["basis"]
    res = CliRunner().invoke(app, ["ladder", str(doc), "-o", str(tmp_path / "l"), "-f", "json"])
    assert res.exit_code == 0, res.output
    assert json.loads((tmp_path / "l" / "ammonia_water_cp.ladder.json").read_text())["requested"] == named
    xyz = write_xyz(tmp_path / "w.xyz", *WATER)
    res = CliRunner().invoke(app, ["ladder", str(xyz), "-o", str(tmp_path / "m")])
    assert res.exit_code == 2 and "no basis" in res.output
