"""The report pages: verdict first and styled, final paths, figures listed, glossary rule."""

from __future__ import annotations

import json
import re

import pytest

from inclination.compare.verdict import VERDICTS
from inclination.report.document import VERDICT_STYLES, render_markdown, verdict_style
from inclination.report.glossary import ROUNDING_RULE
from inclination.report.tables import round_to_uncertainty


def test_every_verdict_has_a_style():
    assert set(VERDICT_STYLES) == set(VERDICTS)
    # A wrong or doubtful frame must look like a warning; only the all-clear looks calm.
    assert {k for k, v in VERDICT_STYLES.items() if v == "ok"} == {"as_declared"}
    for bad in ("turned_180_about_normal", "inconsistent"):
        assert verdict_style({"frame_verdict": {"verdict": bad}}) == "warning"


def test_glossary_examples_follow_the_rule():
    # The worked examples printed in the glossary are what the rounding function gives.
    examples = re.findall(
        r"(-?\d+(?:\.\d+)?) ± (\d+(?:\.\d+)?) → (-?\d+(?:\.\d+)?) ± (\d+(?:\.\d+)?)", ROUNDING_RULE
    )
    assert len(examples) == 3
    for value, sigma, v_text, s_text in examples:
        assert round_to_uncertainty(float(value), float(sigma)) == (v_text, s_text)


@pytest.mark.parametrize("folder", ["results", "results-turned-frame"])
def test_demo_report_order_paths_and_figures(demo_run, folder):
    summary = json.loads((demo_run / folder / "summary.json").read_text("utf-8"))
    page = (demo_run / folder / "report.html").read_text("utf-8")
    md = (demo_run / folder / "report.md").read_text("utf-8")
    # Verdict before everything else the page says; then settings, figures, table, glossary.
    order = [
        page.index(k)
        for k in (
            'id="verdict"',
            'id="settings"',
            'id="figures"',
            'id="boundaries"',
            'id="glossary"',
            'id="provenance"',
        )
    ]
    assert order == sorted(order)
    # Provenance names the final folder, never the staging one that no longer exists.
    assert ".partial" not in page and ".partial" not in md
    assert ".partial" not in json.dumps(summary)
    assert summary["provenance"]["output_folder"] == str(demo_run / folder)
    for f in summary["figures"]:
        assert (demo_run / folder / f["file"]).exists() and (
            demo_run / folder / f["vector"]
        ).exists()
    assert {f["file"] for f in summary["figures"]} >= {"boundaries.png", "planes.png"}
    warning = summary["frame_verdict"]["verdict"] != "as_declared"
    assert ("**Warning — frame:**" in md) == warning


def test_markdown_without_verdict_says_so():
    table = {k: [] for k in ("boundary_id", "identification", "measured_dip_deg", "length_um")}
    text = render_markdown({}, table)
    assert "could not be checked" in text
