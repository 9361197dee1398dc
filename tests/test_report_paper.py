"""The paper table: rounding to the uncertainty, selection, glossary coverage, LaTeX width."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from inclination.report.columns import (
    BOUNDARY_COLUMNS,
    CLASS_DESCRIPTIONS,
    GRAIN_COLUMNS,
    PAPER_COLUMNS,
    SEGMENT_COLUMNS,
    header_text,
)
from inclination.report.tables import (
    PaperTable,
    latex_fits,
    paper_latex,
    paper_table,
    round_to_uncertainty,
)

ROOT = Path(__file__).resolve().parents[1]

# (value, σ) -> (value text, σ text) by the rule in docs/glossary.md: σ to two significant
# digits, the value to σ's last digit, halves away from zero (common practice; ISO/IEC
# Guide 98-3 §7.2.6). Each case worked by hand from the rule.
ROUNDING_CASES = [
    ((63.132, 3.381), ("63.1", "3.4")),
    ((15.491, 0.5), ("15.49", "0.50")),
    ((54.7356, 0.0123), ("54.736", "0.012")),
    ((12.04, 0.996), ("12.0", "1.0")),  # σ rounds up to 1.0: one decimal, not two
    ((1234.5, 23.0), ("1235", "23")),  # half away from zero
    ((1234.5, 230.0), ("1230", "230")),  # σ above 100: the value to tens
    ((-0.004, 0.012), ("-0.004", "0.012")),
    ((-0.0004, 0.012), ("0.000", "0.012")),  # no "-0.000"
    ((45.0, 0.0), ("", "")),  # no uncertainty: the caller uses fixed decimals
    ((float("nan"), 1.0), ("", "")),
]


@pytest.mark.parametrize(("pair", "expected"), ROUNDING_CASES)
def test_rounding_to_the_uncertainty(pair, expected):
    assert round_to_uncertainty(*pair) == expected


def test_glossary_covers_every_column_and_class():
    # docs/glossary.md is the user's reference: every column a table writes, and every
    # identification class, has an entry (a row that starts with its name in backquotes).
    text = (ROOT / "docs" / "glossary.md").read_text(encoding="utf-8")
    for columns in (PAPER_COLUMNS, BOUNDARY_COLUMNS, SEGMENT_COLUMNS, GRAIN_COLUMNS):
        for c in columns:
            assert f"`{c.name}`" in text, f"docs/glossary.md lacks column {c.name}"
            assert c.description, f"column {c.name} has no description"
            assert c.header, f"column {c.name} has no header"
    for key in CLASS_DESCRIPTIONS:
        assert f"`{key}`" in text, f"docs/glossary.md lacks class {key}"


def test_every_rounding_rule_names_an_existing_uncertainty():
    names = {c.name for c in BOUNDARY_COLUMNS}
    for c in BOUNDARY_COLUMNS + PAPER_COLUMNS:
        assert c.rounding in ("fixed", "uncertainty") or c.sigma_column in names, c


def _boundaries(n, *, rng=0):
    g = np.random.default_rng(rng)
    ident = g.choice(["coherent_twin", "identified", "ambiguous", "none"], n).astype(object)
    measured = g.uniform(0, 1, n) < 0.5
    return {
        "boundary_id": np.arange(1, n + 1),
        "grain_a": g.integers(1, 500, n),
        "grain_b": g.integers(500, 1000, n),
        "sigma": np.where(ident == "coherent_twin", "3", "").astype(object),
        "identification": ident,
        "plane_a": np.full(n, "(1 -1 -2)", dtype=object),
        "plane_b": np.full(n, "(-2 1 -1)", dtype=object),
        "trace_angle_deg": g.uniform(0, 180, n),
        "trace_sigma_deg": g.uniform(0.05, 3, n),
        "predicted_dip_deg": g.uniform(0, 90, n),
        "predicted_dip_azimuth_deg": g.uniform(0, 360, n),
        "measured_dip_deg": np.where(measured, g.uniform(0, 90, n), np.nan),
        "measured_dip_sigma_deg": np.where(measured, g.uniform(0.3, 4, n), np.nan),
        "measured_dip_azimuth_deg": np.where(measured, g.uniform(0, 360, n), np.nan),
        "dip_source": np.where(measured, "serial-stack", "").astype(object),
        "sense": np.where(measured, "undecided", "").astype(object),
        "length_um": g.uniform(1, 100, n),
    }


def test_paper_selection_rule():
    b = _boundaries(200)
    t = paper_table(b, max_rows=25)
    assert (t.n_rows, t.n_total) == (25, 200)
    chosen = np.isin(b["boundary_id"], [int(x) for x in t.cells["boundary_id"]])
    eligible = np.isfinite(b["measured_dip_deg"]) | np.isin(
        b["identification"], ["coherent_twin", "identified"]
    )
    assert np.all(eligible[chosen])
    # The longest eligible boundaries, none shorter than any left out.
    assert b["length_um"][chosen].min() >= b["length_um"][eligible & ~chosen].max()
    assert "25 longest" in t.rule


def test_wide_paper_table_is_split_in_two():
    b = _boundaries(30)
    t = paper_table(b)
    names = [c.name for c in PAPER_COLUMNS]
    text = paper_latex(t, caption="c", label="l")
    assert not latex_fits(t, names)
    assert text.count(r"\begin{tabularx}{\textwidth}") == 2


def _compile(tmp_path, body) -> str:
    (tmp_path / "table.tex").write_text(body, encoding="utf-8")
    (tmp_path / "doc.tex").write_text(
        "\\documentclass[a4paper]{article}\n\\usepackage{booktabs}\n\\usepackage{tabularx}\n"
        "\\begin{document}\n\\input{table.tex}\n\\end{document}\n",
        encoding="utf-8",
    )
    run = subprocess.run(
        ["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "doc.tex"],
        cwd=tmp_path,
        capture_output=True,
        text=True,
        timeout=120,
    )
    log = (tmp_path / "doc.log").read_text(encoding="latin-1")
    assert run.returncode == 0, log[-2000:]
    return log


@pytest.mark.skipif(
    shutil.which("pdflatex") is None,
    reason="no TeX engine (Debian texlive-latex-base + texlive-latex-recommended; .ci/run "
    "installs them)",
)
@pytest.mark.parametrize("n", [3, 30])
def test_paper_latex_fits_an_a4_article(tmp_path, n):
    b = _boundaries(n, rng=n)
    t = paper_table(b)
    log = _compile(tmp_path, paper_latex(t, caption="Boundaries_x & 10%.", label="tab:b"))
    assert "Overfull" not in log, re.findall(r"Overfull.*", log)


@pytest.mark.skipif(shutil.which("pdflatex") is None, reason="no TeX engine")
def test_demo_latex_table_fits_an_a4_article(tmp_path, demo_run):
    log = _compile(tmp_path, (demo_run / "results" / "boundaries.tex").read_text("utf-8"))
    assert "Overfull" not in log, re.findall(r"Overfull.*", log)


def test_headers_have_units():
    assert header_text(next(c for c in PAPER_COLUMNS if c.name == "trace")) == "Trace (°)"
    assert isinstance(paper_table(_boundaries(4)), PaperTable)


def test_committed_glossary_equals_fresh_rendering():
    from inclination.report.glossary import glossary_markdown

    committed = (ROOT / "docs" / "glossary.md").read_text(encoding="utf-8")
    assert committed == glossary_markdown(), "docs/glossary.md is stale: regenerate it"
