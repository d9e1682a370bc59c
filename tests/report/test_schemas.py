"""Every JSON document the auditor writes matches its shipped JSON Schema (draft 2020-12):
check (all formats, and the large spectrum path), gate (a report and an item error), prune,
and the Python API; a document of the wrong shape does not."""

import copy
import json
import sys

import numpy as np
import pytest
from typer.testing import CliRunner

import auditor
from auditor.cli import app
from auditor.inputs.pruned import load_pruned_doc
from auditor.report import schemas
from helpers import ROOT, WATER, make_molecule, write_xyz

jsonschema = pytest.importorskip("jsonschema")

# water with its second hydrogen pasted twice, 0.001 Å apart: near-singular even in cc-pVDZ
PASTED = (WATER[0] + ["H"], WATER[1] + [[0.0, 0.7572, -0.4682]])


def run(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def load(path):
    return json.loads(path.read_text(encoding="utf-8"))


@pytest.fixture
def water_xyz(tmp_path):
    return write_xyz(tmp_path / "water.xyz", *WATER, comment="water charge=0 multiplicity=1")


@pytest.mark.parametrize("name", sorted(schemas.SCHEMAS))
def test_shipped_schemas_are_draft_2020_12(name):
    schema = schemas.load_schema(name)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    jsonschema.Draft202012Validator.check_schema(schema)
    tag = schemas.SCHEMAS[name][1]
    assert schema["title"] == tag and schemas.load_schema(tag) == schema


def test_check_all_formats_writes_a_valid_report(tmp_path, water_xyz):
    out = tmp_path / "out"
    res = run("check", water_xyz, "-b", "cc-pvdz", "-o", out, "-f", "all")
    assert res.exit_code == 0, res.output
    assert {"water.json", "water.md", "water.html"} <= {p.name for p in out.iterdir()}
    doc = load(out / "water.json")
    schemas.validate(doc, "report")
    assert doc["remedies"] == {
        "target": 1e-5,
        "needed": False,
        "alternatives": [],
        "lower_bound": 0,
        "diffuse_by_element": [],
        "problems": [],
        "trial_scf": None,
    }
    assert doc["input"]["multiplicity"] == 1


def test_check_large_path_report_with_null_counts_is_valid(tmp_path):
    # three waters stacked 2.6 Å apart in d-aug-cc-pVDZ: the large path computes the few
    # smallest eigenpairs, so the counts at 1e-4 and 1e-3 stay unknown (null)
    xyz = np.vstack([np.array(WATER[1]) + [0.0, 0.0, 2.6 * k] for k in range(3)])
    f = write_xyz(tmp_path / "stack.xyz", WATER[0] * 3, xyz)
    out = tmp_path / "out"
    res = run("check", f, "-b", "d-aug-cc-pvdz", "--spectrum", "large", "-o", out, "-f", "json")
    assert res.exit_code in (0, 1), res.output
    doc = load(out / "stack.json")
    schemas.validate(doc, "report")
    spectrum = doc["spectrum"]
    assert spectrum["method"] == "large" and None in spectrum["counts_below"].values()
    assert None in [c["n_removed"] for c in doc["recommendation"]["candidates"]]
    assert doc["input"]["multiplicity"] is None
    assert doc["remedies"]["needed"] and doc["remedies"]["alternatives"]


def test_gate_item_report_and_item_error_are_valid(tmp_path, water_xyz, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "bad.xyz").write_text("2\n\nH 0 0 0\nH 0 0 zero\n")
    res = run("gate", "water.xyz", "bad.xyz", "-b", "sto-3g", "-o", "out", "--no-cache", "-j", "1")
    assert res.exit_code == 1, res.output
    docs = {p.stem: load(p) for p in (tmp_path / "out" / "items").glob("*.json")}
    assert sorted(docs) == ["bad", "water"]
    schemas.validate(docs["water"], "report")
    assert docs["water"]["remedies"] is None  # the gate leaves remedies off unless asked
    schemas.validate(docs["bad"], "item-error")
    assert docs["bad"]["frame"] is None and docs["bad"]["path"] == "bad.xyz"
    for doc in docs.values():
        schemas.validate(doc)  # the document's own tag picks the schema


def test_prune_writes_a_valid_pruned_basis(tmp_path, water_xyz):
    out = tmp_path / "pruned"
    res = run("prune", water_xyz, "-b", "cc-pvdz", "--target", "0.1", "-o", out, "-q")
    assert res.exit_code == 0, res.output
    doc = load(out / "water.pruned.json")
    schemas.validate(doc, "pruned-basis")
    assert doc["dropped_shells"] and doc["n_functions"] < doc["n_functions_full"]
    assert auditor.load_pruned(out / "water.pruned.json").nao == doc["n_functions"]


def test_api_documents_are_valid():
    water = make_molecule(*WATER)
    with_scf = auditor.audit(water, "cc-pvdz", remedies=auditor.RemedyOptions(target=0.3, trial_scf="hf"))
    not_needed = auditor.audit(water, "sto-3g", remedies=auditor.RemedyOptions(trial_scf="hf"))
    off = auditor.audit(water, "sto-3g", remedies=False)
    docs = [json.loads(auditor.to_json(r, compact=c)) for r in (with_scf, not_needed, off) for c in (False, True)]
    for doc in docs:
        schemas.validate(doc, "report")
    trial = docs[0]["remedies"]["trial_scf"]
    assert len(trial["runs"]) == 2 and trial["difference_microhartree"] is not None
    assert docs[2]["remedies"]["trial_scf"]["runs"] == [] and docs[2]["remedies"]["trial_scf"]["skipped"]
    assert docs[4]["remedies"] is None


def test_bundled_demo_reports_are_valid():
    paths = sorted((ROOT / "reports").glob("*.json"))
    assert paths
    for path in paths:
        schemas.validate(load(path), "scan" if path.name.endswith(".scan.json") else "report")


@pytest.fixture(scope="module")
def small_report():
    return json.loads(auditor.to_json(auditor.audit(make_molecule(*WATER), "sto-3g")))


def _set(doc, path, value):
    *head, last = path
    for key in head:
        doc = doc[key]
    if value is KeyError:
        del doc[last]
    else:
        doc[last] = value


@pytest.mark.parametrize(
    "path, value",
    [
        (("spectrum", "smallest"), "1e-5"),  # a number written as text
        (("spectrum", "condition_number"), "inf"),
        (("spectrum", "counts_below", "1e-05"), 1.5),
        (("verdict",), "maybe"),
        (("findings",), [{"kind": "near_singular", "severity": "fatal", "atoms": [], "message": "", "details": {}}]),
        (("input", "frame"), 0),
        (("input", "multiplicity"), "singlet"),
        (("recommendation", "n_removed"), -1),
        (("causes",), KeyError),  # a required key missing
        (("spectrum", "spare"), 1),  # nested objects are closed
    ],
)
def test_wrong_documents_fail(small_report, path, value):
    doc = copy.deepcopy(small_report)
    schemas.validate(doc, "report")
    _set(doc, path, value)
    with pytest.raises(jsonschema.ValidationError):
        schemas.validate(doc, "report")


def test_wrong_item_error_and_pruned_basis_fail():
    error = {"schema": "auditor-item-error/1", "path": "x.xyz", "frame": None, "error": "x.xyz: no such file"}
    schemas.validate(error)
    with pytest.raises(jsonschema.ValidationError):
        schemas.validate({**error, "frame": "1"})
    doc = {
        "format": "auditor-pruned-basis/1",
        "source": "h2.xyz",
        "basis_name": "sto-3g [spherical]",
        "unit": "angstrom",
        "cartesian": False,
        "charge": 0,
        "spin": 0,
        "target": 1e-5,
        "smallest_eigenvalue": 0.34,
        "n_functions": 2,
        "n_functions_full": 2,
        "atoms": [["H", [0.0, 0.0, 0.0]], ["H", [0.0, 0.0, 0.74]]],
        "basis": {"H": [[0, [3.42525091, 0.15432897], [0.62391373, 0.53532814], [0.1688554, 0.44463454]]]},
        "dropped_shells": [],
    }
    schemas.validate(doc)
    assert load_pruned_doc(doc).nao == 2
    for key, value in [("atoms", [[1, [0.0, 0.0, 0.0]]]), ("unit", "bohr"), ("basis", {"H": [["s", [1.0, 1.0]]]})]:
        with pytest.raises(jsonschema.ValidationError):
            schemas.validate({**doc, key: value})


def test_unknown_names_and_tags_are_errors():
    with pytest.raises(ValueError, match="no schema named"):
        schemas.load_schema("summary")
    with pytest.raises(ValueError, match="not an auditor document"):
        schemas.validate({"schema": "something-else/1"})


def test_missing_jsonschema_is_a_clear_error(monkeypatch):
    schemas._validator.cache_clear()
    monkeypatch.setitem(sys.modules, "jsonschema", None)  # import jsonschema now fails
    try:
        with pytest.raises(ModuleNotFoundError, match="needs the jsonschema package"):
            schemas.validate({"schema": "auditor-item-error/1"}, "item-error")
    finally:
        schemas._validator.cache_clear()
