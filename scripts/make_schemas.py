"""Write the table schemas into schemas/ from the column definitions.

Run after changing inclination/report/columns.py or inclination/batch_outputs.py:
python scripts/make_schemas.py (it writes the schemas and docs/glossary.md).
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from inclination.batch_outputs import render_schema as render_batch_schema  # noqa: E402
from inclination.report.candidates import candidates_schema  # noqa: E402
from inclination.report.glossary import glossary_markdown  # noqa: E402
from inclination.report.schemas import SCHEMAS, render  # noqa: E402

if __name__ == "__main__":
    for name in SCHEMAS:
        (ROOT / "schemas" / f"{name}.schema.json").write_text(render(name), encoding="utf-8")
        print(f"schemas/{name}.schema.json")
    text = json.dumps(candidates_schema(), indent=2, ensure_ascii=False) + "\n"
    (ROOT / "schemas" / "candidates.schema.json").write_text(text, encoding="utf-8")
    print("schemas/candidates.schema.json")
    (ROOT / "schemas" / "batch.schema.json").write_text(render_batch_schema(), encoding="utf-8")
    print("schemas/batch.schema.json")
    # The glossary is drawn from the same column list (a test checks it is current).
    (ROOT / "docs" / "glossary.md").write_text(glossary_markdown(), encoding="utf-8")
    print("docs/glossary.md")
