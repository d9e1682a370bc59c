"""Every remedy is evaluated at one target; canonical orthogonalization at the target removes
exactly the eigenvalues below it, the interlacing lower bound, and ranks by what it removes."""

from __future__ import annotations

import numpy as np
import pytest

import auditor
from auditor.pipeline.run import make_spec, prepare
from helpers import make_molecule

DIMER = (
    ["O", "H", "H", "O", "H", "H"],
    [[0, 0, 0], [0.757, 0.586, 0], [-0.757, 0.586, 0], [0.3, -0.2, 2.2], [1.0, 0.4, 2.3], [-0.5, 0.3, 2.5]],
)


def test_canonical_at_target_removes_the_count_below_and_ranks_by_it():
    prep = prepare(make_molecule(*DIMER), make_spec("d-aug-cc-pvdz"))
    target = 1e-3
    result = auditor.audit_prepared(prep, remedies=auditor.RemedyOptions(target=target))
    rem = result.as_dict()["remedies"]
    # Reference: numpy's eigenvalues of the same unit-diagonal S.
    w = np.linalg.eigvalsh(prep.S)
    below = int(np.sum(w < target))
    assert below > 0 and rem["lower_bound"] == below
    canon = next(a for a in rem["alternatives"] if a["kind"] == "canonical_orthogonalization")
    assert canon["threshold"] == target and canon["removed"] == below
    assert canon["smallest_after"] == pytest.approx(w[below], rel=1e-10) and canon["reaches_target"]
    # no remedy removes fewer than the bound (Cauchy interlacing)
    assert all(a["removed"] >= below for a in rem["alternatives"])
    # ranked: those reaching the target first (a published basis first among them), then by what they remove
    keys = [
        (not a["reaches_target"], not (a["reaches_target"] and a["kind"] == "named_basis"), a["removed"])
        for a in rem["alternatives"]
    ]
    assert keys == sorted(keys)
    # the bound is shown in every report
    assert f"Lower bound: {below}." in auditor.render_markdown(result)
    assert f"Lower bound: {below}." in auditor.render_html(result, images={})
