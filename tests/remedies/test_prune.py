"""Remedies: pruned-basis JSON, ranked alternatives, trial SCF and the `prune` command."""

from __future__ import annotations

import json

import numpy as np
import pytest
from pyscf import gto
from typer.testing import CliRunner

import auditor
from auditor.base.errors import UsageError
from auditor.cli import app
from auditor.inputs.pruned import load_pruned, load_pruned_doc
from auditor.numerics.overlap import normalized_overlap
from auditor.pipeline.run import make_spec, prepare
from auditor.remedies.plan import RemedyOptions, plan_remedies
from auditor.remedies.pruned_basis import pruned_basis
from auditor.remedies.trial_scf import run_scf, scf_mole, trial_scf
from helpers import make_molecule, write_xyz

DIMER = (
    ["O", "H", "H", "O", "H", "H"],
    [[0, 0, 0], [0.757, 0.586, 0], [-0.757, 0.586, 0], [0.3, -0.2, 2.2], [1.0, 0.4, 2.3], [-0.5, 0.3, 2.5]],
)
HE2 = (["He", "He"], [[0.0, 0.0, 0.0], [0.0, 0.0, 0.9]])

runner = CliRunner()


@pytest.fixture(scope="module")
def dimer_prep():
    return prepare(make_molecule(*DIMER), make_spec("d-aug-cc-pvdz"))


@pytest.fixture(scope="module")
def dimer_result(dimer_prep):
    return auditor.audit_prepared(dimer_prep, auditor.Policy(caution=1e-3, fail=1e-7))


def test_pruned_json_is_the_kept_subset(dimer_prep, tmp_path):
    # Reference: a pruned basis is a subset of the same functions, so its normalized overlap
    # is the kept block of the full one; eigvalsh of it meets the target.
    target = 1e-3
    r = auditor.audit_prepared(dimer_prep, remedies=False)
    plan = plan_remedies(dimer_prep, r.recommendation, r.spectrum.smallest, target)
    kept = plan.shells.kept
    assert kept.size < dimer_prep.table.n_functions
    path = tmp_path / "p.json"
    path.write_text(json.dumps(plan.pruned))
    mol = load_pruned(path)
    S = normalized_overlap(mol)
    assert np.allclose(S, dimer_prep.S[np.ix_(kept, kept)], atol=1e-12)
    assert np.linalg.eigvalsh(S)[0] >= target
    labels = [a[0] for a in plan.pruned["atoms"]]
    assert len(labels) == 6 and set(labels) <= set(plan.pruned["basis"])
    assert sum(s["functions"] for s in plan.pruned["dropped_shells"]) == plan.shells.n_dropped


def test_unpruned_document_reproduces_full_basis(dimer_prep):
    # Reference: the overlap pyscf builds from the named basis directly.
    doc = pruned_basis(dimer_prep, range(dimer_prep.table.n_shells))
    assert set(doc["basis"]) == {"O", "H"} and doc["dropped_shells"] == []
    mol = gto.M(atom=doc["atoms"], basis=doc["basis"], unit="Angstrom", verbose=0)
    assert np.allclose(normalized_overlap(mol), dimer_prep.S, atol=1e-12)


def test_ranked_alternatives(dimer_result, dimer_prep):
    rem = dimer_result.as_dict()["remedies"]
    alts = rem["alternatives"]
    assert [a["rank"] for a in alts] == list(range(1, len(alts) + 1))
    kinds = {a["kind"] for a in alts}
    assert {"canonical_orthogonalization", "cholesky_functions", "cholesky_shells"} <= kinds
    reach = [a["reaches_target"] for a in alts]
    assert reach == sorted(reach, reverse=True)  # those reaching the target come first
    # Reference: eigvalsh of the full S restricted to the kept functions (1-based in the report).
    kept = np.array(rem["cholesky_functions"]["kept_functions_in_order"]) - 1
    low = np.linalg.eigvalsh(dimer_prep.S[np.ix_(kept, kept)])[0]
    assert low == pytest.approx(rem["cholesky_functions"]["smallest_kept"], rel=1e-8)
    assert low >= rem["target"]
    functions = next(a for a in alts if a["kind"] == "cholesky_functions")
    assert functions["reaches_target"] == bool(low >= rem["target"])


def test_dropping_diffuse_shells_of_one_element_matches_parent_basis():
    # Reference: dropping H's augmentation everywhere is the same as giving H the parent
    # basis (cc-pVDZ) directly; pyscf's overlap of that molecule gives the eigenvalue.
    prep = prepare(make_molecule(*DIMER), make_spec("aug-cc-pvdz"))
    r = auditor.audit_prepared(prep, remedies=False)
    plan = plan_remedies(prep, r.recommendation, r.spectrum.smallest, 5e-2)
    opt = {o.element: o for o in plan.diffuse}["H"]
    mol = gto.M(
        atom=[(s, c) for s, c in zip(*DIMER)], basis={"O": "aug-cc-pvdz", "H": "cc-pvdz"}, unit="Angstrom", verbose=0
    )
    assert opt.smallest_after == pytest.approx(np.linalg.eigvalsh(normalized_overlap(mol))[0], rel=1e-9)
    assert opt.removed == prep.table.n_functions - mol.nao


def test_pruning_that_empties_an_atom_is_an_error():
    # Two coincident helium atoms with one shell each (STO-3G): one of them must lose it.
    prep = prepare(make_molecule(["He", "He"], [[0, 0, 0], [0, 0, 0]]), make_spec("sto-3g"))
    r = auditor.audit_prepared(prep, remedies=False)
    plan = plan_remedies(prep, r.recommendation, r.spectrum.smallest, 1e-5)
    assert plan.pruned is None and any("every basis function of atom" in p for p in plan.problems)
    with pytest.raises(UsageError, match="atom 2"):
        pruned_basis(prep, [0])


def test_variational_property_of_remedies(tmp_path):
    # Reference: variational principle; canonical orthogonalization and pruning both work in
    # a subspace of the full span, so their energies are not below the full-basis energy
    # (within the SCF convergence of 1e-9 hartree).
    prep = prepare(make_molecule(*HE2), make_spec("aug-cc-pvdz"))
    r = auditor.audit_prepared(prep, remedies=False)
    target = 3e-2
    assert r.spectrum.smallest < target
    plan = plan_remedies(prep, r.recommendation, r.spectrum.smallest, target)
    assert plan.shells.n_dropped > 0
    full = run_scf(scf_mole(prep), "hf", 0.0)
    canonical = run_scf(scf_mole(prep), "hf", target)
    (tmp_path / "p.json").write_text(json.dumps(plan.pruned))
    pruned = run_scf(load_pruned(tmp_path / "p.json"), "hf", 0.0)
    assert full["converged"] and canonical["converged"] and pruned["converged"]
    assert full["directions_removed"] == 0 and canonical["directions_removed"] > 0
    assert canonical["energy"] >= full["energy"] - 1e-7
    assert pruned["energy"] >= full["energy"] - 1e-7


def test_trial_scf_reports_and_limits():
    prep = prepare(make_molecule(*HE2), make_spec("aug-cc-pvdz"))
    r = auditor.audit_prepared(prep, remedies=False)
    plan = plan_remedies(prep, r.recommendation, r.spectrum.smallest, 3e-2)
    out = trial_scf(prep, "hf", 3e-2, plan.pruned)
    assert out["skipped"] is None and len(out["runs"]) == 2
    e0, e1 = out["runs"][0]["energy"], out["runs"][1]["energy"]
    assert out["difference_microhartree"] == pytest.approx((e1 - e0) * 1e6)
    # reference: pyscf's own RHF on the pruned basis, built from the pruned-basis document
    from pyscf import scf

    ref = scf.RHF(load_pruned_doc(plan.pruned)).run(conv_tol=1e-10)
    assert e1 == pytest.approx(ref.e_tot, abs=1e-6)
    assert "judgement" in out["reminder"]
    small = trial_scf(prep, "hf", 3e-2, plan.pruned, max_functions=5)
    assert small["runs"] == [] and "exceed the limit of 5" in small["skipped"]
    stopped = trial_scf(prep, "hf", 3e-2, plan.pruned, time_limit=0.0)
    assert all(run["status"] == "stopped" and run["energy"] is None for run in stopped["runs"])
    with pytest.raises(UsageError, match="functional"):
        trial_scf(prep, "no-such-functional", 3e-2, plan.pruned)


def test_check_json_and_markdown_carry_remedies(tmp_path):
    f = write_xyz(tmp_path / "dimer.xyz", *DIMER)
    res = runner.invoke(
        app,
        [
            "check",
            str(f),
            "-b",
            "d-aug-cc-pvdz",
            "--caution",
            "1e-3",
            "--fail",
            "1e-7",
            "-o",
            str(tmp_path / "o"),
            "-f",
            "json",
        ],
    )
    assert res.exit_code == 0, res.output
    d = json.loads((tmp_path / "o" / "dimer.json").read_text())
    assert d["remedies"]["target"] == 1e-3 and d["remedies"]["alternatives"]
    assert "shell-pruned basis" in res.output
    res = runner.invoke(
        app, ["check", str(f), "-b", "d-aug-cc-pvdz", "--target", "1e-3", "-o", str(tmp_path / "m"), "-f", "md"]
    )
    md = (tmp_path / "m" / "dimer.md").read_text()
    assert "## Remedies" in md and "| rank | remedy |" in md


def test_prune_command_end_to_end(tmp_path):
    f = write_xyz(tmp_path / "dimer.xyz", *DIMER)
    out = tmp_path / "pruned"
    res = runner.invoke(app, ["prune", str(f), "--basis", "d-aug-cc-pvdz", "--target", "1e-3", "--out", str(out)])
    assert res.exit_code == 0, res.output
    d = json.loads((out / "dimer.pruned.json").read_text())
    # pyscf reads the document as it is; eigvalsh of its normalized overlap meets the target.
    mol = gto.M(atom=d["atoms"], basis=d["basis"], unit="Angstrom", verbose=0)
    assert mol.nao == d["n_functions"] < d["n_functions_full"]
    assert np.linalg.eigvalsh(normalized_overlap(mol))[0] >= 1e-3
    # X^T S X = 1 on the full basis (definition of an orthogonalizing transformation).
    full = gto.M(atom=[(s, c) for s, c in zip(*DIMER)], basis="d-aug-cc-pvdz", unit="Angstrom", verbose=0)
    X = np.load(out / "dimer.X.npy")
    assert np.allclose(X.T @ full.intor("int1e_ovlp") @ X, np.eye(X.shape[1]), atol=1e-8)
    assert "1.0e-03" in (out / "dimer.prune.md").read_text()


@pytest.mark.parametrize("bad", ["0", "-1e-5", "1.5", "nan"])
def test_prune_bad_target_is_one_line(tmp_path, bad):
    f = write_xyz(tmp_path / "w.xyz", *HE2)
    res = runner.invoke(app, ["prune", str(f), "-b", "cc-pvdz", "--target", bad, "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    text = res.output.strip()
    assert "Traceback" not in text and len(text.splitlines()) == 1 and "target" in text
    assert not (tmp_path / "o").exists()


def test_prune_emptying_an_atom_exits_with_usage_error(tmp_path):
    # Helium atoms 0.3 Å apart with one shell each (STO-3G): a target of 0.5 needs one of
    # the two shells gone, which would leave an atom without functions.
    f = write_xyz(tmp_path / "close.xyz", ["He", "He", "Ne"], [[0, 0, 0], [0, 0, 0.3], [0, 0, 3]])
    res = runner.invoke(app, ["prune", str(f), "-b", "sto-3g", "--target", "0.5", "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    assert "every basis function of atom" in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1


def test_prune_refuses_a_broken_geometry(tmp_path):
    # coincident helium atoms: the file must be fixed, no pruned basis is offered for it
    f = write_xyz(tmp_path / "coin.xyz", ["He", "He", "Ne"], [[0, 0, 0], [0, 0, 0], [0, 0, 3]])
    res = runner.invoke(app, ["prune", str(f), "-b", "sto-3g", "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    assert "He1 and He2 sit 0.0000 Å apart" in res.output and "Fix the geometry" in res.output
    assert not (tmp_path / "o").exists()


def test_remedy_options_default_target_is_caution():
    r = auditor.audit(
        make_molecule(*HE2),
        basis="aug-cc-pvdz",
        policy=auditor.Policy(caution=3e-2, fail=1e-7),
        remedies=RemedyOptions(),
    )
    assert r.remedies.target == 3e-2 and r.remedies.needed


def test_prune_with_ghost_atoms_keeps_them_ghosts(tmp_path):
    # Reference: pyscf's own reading of the document: ghost atoms carry no charge, and the
    # normalized overlap is the kept block of the full one.
    f = write_xyz(tmp_path / "cp.xyz", *DIMER)
    out = tmp_path / "o"
    res = runner.invoke(
        app, ["prune", str(f), "-b", "aug-cc-pvdz", "--ghost", "4-6", "--target", "2e-2", "--out", str(out), "-q"]
    )
    assert res.exit_code == 0, res.output
    d = json.loads((out / "cp.pruned.json").read_text())
    mol = load_pruned(out / "cp.pruned.json")
    assert [mol.atom_charge(i) for i in range(6)] == [8, 1, 1, 0, 0, 0]
    assert all(a[0].startswith("ghost-") for a in d["atoms"][3:])
    assert d["dropped_shells"] and np.linalg.eigvalsh(normalized_overlap(mol))[0] >= 2e-2
