"""The frame audit end to end: the demo's turned-axes case, repaired by its own patch."""

from __future__ import annotations

import json

import jsonschema
import pytest

from inclination.audit import apply_job_patch
from inclination.cli import main
from inclination.demo import write_demo_scenario
from inclination.io.job import job_from_dict
from inclination.io.schemas import load_schema
from inclination.pipeline import run


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    return write_demo_scenario(tmp_path_factory.mktemp("scenario"))


def _coherent(analysis):
    return int((analysis.identification["identification"] == "coherent_twin").sum())


def _run(path, raw=None):
    raw = json.loads(path.read_text()) if raw is None else raw
    return run(job_from_dict(raw, base_dir=path.parent, path_for_errors=path))


def test_patched_job_recovers_the_correct_frame(scenario):
    correct = _run(scenario["job"])
    assert correct.audit.declared_is_best is True
    turned = _run(scenario["job_z90"])
    audit = turned.audit
    assert audit.declared_is_best is False
    # The sections settle z90 against its 180° partner z270 (conventions §6).
    assert audit.settled_by == "sections"
    assert audit.job_patch["map"] == {"data_frame_rotation": "z90"}
    raw = json.loads(scenario["job_z90"].read_text())
    repaired = _run(scenario["job_z90"], apply_job_patch(raw, audit.job_patch))
    assert _coherent(repaired) >= 0.9 * _coherent(correct)
    assert repaired.verdict.verdict == "as_declared"
    assert repaired.audit.declared_is_best is True and repaired.audit.patch_is_empty


def test_audit_command_writes_a_valid_audit(scenario, tmp_path, capsys):
    out = tmp_path / "audit"
    assert main(["audit", str(scenario["job_z90"]), "--out", str(out), "--quiet"]) == 0
    doc = json.loads((out / "audit.json").read_text())
    jsonschema.validate(doc, load_schema("audit.schema.json"))
    assert doc["declared_is_best"] is False
    assert doc["hypotheses"][doc["best"]]["relation"] == "z90"
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "data_frame_rotation" in err[0] and "z90" in err[0]


def test_job_audit_thresholds_reach_the_audit(scenario):
    raw = json.loads(scenario["job_z90"].read_text())
    default = _run(scenario["job_z90"], raw).audit
    # The defaults written out give the audit as the job without the block.
    spelled = dict(raw, audit={"outlier_fraction": 0.3, "min_voters": 5, "min_margin_log10": 2})
    assert _run(scenario["job_z90"], spelled).audit.as_dict() == default.as_dict()
    voters = default.best_hypothesis.fit.n_voters
    strict = dict(raw, audit={"min_voters": voters + 1})
    audit = _run(scenario["job_z90"], strict).audit
    assert audit.declared_is_best == "undecided"
    assert f"only {voters} segment(s)" in audit.reason
    assert f"at least {voters + 1} are needed" in audit.reason
    assert audit.patch_is_empty
    # A margin (odds of 10^x to 1) beyond the vote's own is a tie.
    top, rival = default.reason.split("log-likelihood ")[1].split(" for")[0].split(" against ")
    odds_log10 = (float(top) - float(rival)) / 2.302585
    tie = dict(raw, audit={"min_margin_log10": odds_log10 + 1})
    audit = _run(scenario["job_z90"], tie).audit
    assert audit.declared_is_best == "undecided" and audit.reason.startswith("tie")


def test_job_audit_out_of_range_is_refused(scenario):
    from inclination.errors import InputError

    raw = json.loads(scenario["job_z90"].read_text())
    with pytest.raises(InputError, match="outlier_fraction"):
        _run(scenario["job_z90"], dict(raw, audit={"outlier_fraction": 1.0}))
