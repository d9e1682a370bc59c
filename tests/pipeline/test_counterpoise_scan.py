"""Counterpoise combinations (each spectrum equal to a separate run of that combination) and
scans (the curve over the frames, the scan coordinate, the first frame below each level)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

import auditor
from auditor.base.errors import UsageError
from auditor.cli import app
from auditor.inputs.fragments import fragments_for
from auditor.pipeline.counterpoise import audit_counterpoise
from auditor.pipeline.run import make_spec
from auditor.report.scan import comment_numbers, scan_document
from auditor.report.schemas import validate
from helpers import write_xyz

# A water dimer of our own: a donor, and an acceptor 2.9 Å away (O...O)
DIMER = (
    ["O", "H", "H", "O", "H", "H"],
    [
        [-1.551, -0.115, 0.0],
        [-1.934, 0.763, 0.0],
        [-0.600, 0.041, 0.0],
        [1.351, 0.111, 0.0],
        [1.680, -0.374, -0.759],
        [1.680, -0.374, 0.759],
    ],
)


def test_dimer_gives_five_spectra_equal_to_separate_runs(tmp_path):
    path = write_xyz(tmp_path / "dimer.xyz", *DIMER)
    (mol,) = auditor.load_molecules(path)
    frags = fragments_for(mol, ["1-3", "4-6"])
    result, combos = audit_counterpoise(mol, frags, make_spec("aug-cc-pvdz"), remedies=False)
    assert len(combos) == 5
    basis = "aug-cc-pvdz"
    a = write_xyz(tmp_path / "a.xyz", DIMER[0][:3], DIMER[1][:3])
    b = write_xyz(tmp_path / "b.xyz", DIMER[0][3:], DIMER[1][3:])
    separate = {
        "complex": auditor.audit(path, basis, remedies=False),
        "fragment_1_complex_basis": auditor.audit(path, basis, ghost="4-6", remedies=False),
        "fragment_2_complex_basis": auditor.audit(path, basis, ghost="1-3", remedies=False),
        "fragment_1_own_basis": auditor.audit(a, basis, remedies=False),
        "fragment_2_own_basis": auditor.audit(b, basis, remedies=False),
    }
    table = result.as_dict()["counterpoise"]
    for c, row in zip(combos, table["combinations"]):
        want = separate[c.key]
        assert c.result.spectrum.eigenvalues == want.spectrum.eigenvalues, c.key
        assert row["eigenvalues"] == list(want.spectrum.eigenvalues) and row["verdict"] == want.verdict
        assert row["n_functions"] == want.input.n_functions
    assert [r["n_functions"] for r in table["combinations"]] == [82, 82, 41, 82, 41]
    own = {r["fragment"]: r["smallest"] for r in table["combinations"] if r["basis"] == "own"}
    assert table["limiting_fragment"] == min(own, key=own.get)
    assert abs(sum(table["near_null_share"]) - 1) < 1e-6
    validate(json.loads(auditor.to_json(result)), "report")


def test_check_with_fragments_writes_one_report_with_the_table(tmp_path):
    path = write_xyz(tmp_path / "dimer.xyz", *DIMER)
    out = tmp_path / "o"
    args = ["check", str(path), "-b", "sto-3g", "--fragments", "1-3", "--fragments", "4-6", "-o", str(out), "-q"]
    res = CliRunner().invoke(app, args)
    assert res.exit_code == 0, res.output
    assert sorted(p.name for p in out.glob("dimer.*")) == ["dimer.html", "dimer.json", "dimer.md"]
    md = (out / "dimer.md").read_text()
    assert "## Counterpoise combinations" in md and "fragment 2 in its own basis" in md
    assert 'id="counterpoise"' in (out / "dimer.html").read_text()
    doc = json.loads((out / "dimer.json").read_text())
    assert len(doc["counterpoise"]["combinations"]) == 5


def test_fragments_from_an_extended_xyz_column(tmp_path):
    lines = ["6", 'Properties=species:S:1:pos:R:3:fragment:I:1 pbc="F F F"']
    lines += [f"{s} {x} {y} {z} {1 if i < 3 else 2}" for i, (s, (x, y, z)) in enumerate(zip(*DIMER))]
    (tmp_path / "d.extxyz").write_text("\n".join(lines) + "\n")
    (mol,) = auditor.load_molecules(tmp_path / "d.extxyz")
    assert mol.fragments == ((0, 1, 2), (3, 4, 5))


BAD_FRAGMENTS = [
    (["1-3"], "at least two"),
    (["1-3", "3-6"], "two fragments"),
    (["1-3", "4-5"], "no fragment"),
    (["1-3", "4-9"], "6 atoms"),
]


@pytest.mark.parametrize("specs, match", BAD_FRAGMENTS)
def test_bad_fragments_are_usage_errors(tmp_path, specs, match):
    (mol,) = auditor.load_molecules(write_xyz(tmp_path / "d.xyz", *DIMER))
    with pytest.raises(UsageError, match=match):
        fragments_for(mol, specs)


def _he2_scan(path, comments=True):
    """Two helium atoms approaching: 10 frames, the distance in the comment line or not."""
    text = ""
    for k in range(10):
        r = 2.0 - 0.2 * k
        text += f"2\n{f'scan step {k + 1} r={r:.2f}' if comments else ''}\nHe 0 0 0\nHe 0 0 {r:.4f}\n"
    path.write_text(text)
    return path


def test_ten_frame_scan_shows_the_crossing_frames(tmp_path):
    path = _he2_scan(tmp_path / "he2.xyz")
    out = tmp_path / "o"
    args = ["check", str(path), "-b", "aug-cc-pvdz", "--caution", "1e-2", "--fail", "1e-3", "--no-remedies"]
    res = CliRunner().invoke(app, [*args, "-o", str(out), "-q"])
    assert res.exit_code == 1, res.output  # the last frames fail
    doc = json.loads((out / "he2.scan.json").read_text())
    validate(doc, "scan")
    assert doc["n_frames"] == 10 and doc["coordinate"]["name"] == "r" and doc["coordinate"]["source"] == "comment"
    frames = [json.loads((out / f"he2_f{k:03d}.json").read_text()) for k in range(1, 11)]
    smallest = [f["spectrum"]["smallest"] for f in frames]
    assert [f["smallest"] for f in doc["frames"]] == smallest
    first_caution = next(k + 1 for k, s in enumerate(smallest) if s < 1e-2)
    first_fail = next(k + 1 for k, s in enumerate(smallest) if s < 1e-3)
    assert doc["first_frame_below"] == {"caution": first_caution, "fail": first_fail}
    assert 1 < first_caution < first_fail <= 10
    assert [f["coordinate"] for f in doc["frames"]] == [round(2.0 - 0.2 * k, 2) for k in range(10)]
    md = (out / "he2.scan.md").read_text()
    assert f"first crossed at frame {first_fail}" in md and (out / "he2.scan.png").stat().st_size > 1000
    assert "first crossed at frame" in (out / "he2.scan.html").read_text()


def test_scan_coordinate_from_the_one_changing_distance(tmp_path):
    path = _he2_scan(tmp_path / "he2.xyz", comments=False)
    results = [auditor.audit(path, "sto-3g", frame=k, remedies=False) for k in range(1, 11)]
    doc = scan_document(results, [""] * 10)
    assert doc["coordinate"]["source"] == "distance" and doc["coordinate"]["atoms"] == [1, 2]
    assert np.allclose([f["coordinate"] for f in doc["frames"]], [2.0 - 0.2 * k for k in range(10)])


def test_comment_numbers():
    assert comment_numbers("step 3 r = 2.50 E=-76.1 charge=0 H2O") == [("step", 3.0), ("r", 2.5), ("E", -76.1)]
    assert comment_numbers("-1.5 monomer separation 2.9 A") == [("", -1.5), ("separation", 2.9)]
    assert comment_numbers("R: 1e-1") == [("R", 0.1)]


def _lookup(doc, key):
    for part in key.split("."):
        doc = doc[int(part)] if isinstance(doc, list) else doc[part]
    return doc


def _tagged_numbers_match(page: str, doc: dict) -> int:
    import html
    import re

    pairs = re.findall(r'data-key="([^"]+)" data-value="([^"]*)"', page)
    for key, value in pairs:
        assert json.loads(html.unescape(value)) == _lookup(doc, key), key
    return len(pairs)


def test_counterpoise_and_scan_pages_show_the_json_numbers(tmp_path):
    from auditor.report.html import render_html
    from auditor.report.scan import scan_html

    (mol,) = auditor.load_molecules(write_xyz(tmp_path / "d.xyz", *DIMER))
    result, _ = audit_counterpoise(mol, fragments_for(mol, ["1-3", "4-6"]), make_spec("sto-3g"), remedies=False)
    doc = json.loads(auditor.to_json(result))
    page = render_html(result, images={})
    assert 'id="counterpoise"' in page and _tagged_numbers_match(page, doc) > 40
    path = _he2_scan(tmp_path / "he2.xyz")
    scan = scan_document([auditor.audit(path, "sto-3g", frame=k, remedies=False) for k in range(1, 11)])
    assert _tagged_numbers_match(scan_html(scan, None), scan) == 50  # five numbers in each of ten rows
