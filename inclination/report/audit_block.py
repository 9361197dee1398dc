"""The frame audit's block at the top of a report (inclination.audit).

Owns how ``summary.json``'s ``frame_audit`` reads in the report: a warning, styled so
it cannot pass for an all-clear, that leads the page. Nothing is shown when the audit
confirmed the declared frame (``summary.json`` then has no ``frame_audit``).
"""

from __future__ import annotations

import html
import json

__all__ = ["audit_block_html", "audit_block_markdown"]

_STYLE = (
    "border:0.2em solid #D55E00;border-left-width:0.8em;background:#fdf0e6;"
    "padding:0.5em 1em;margin:1em 0"
)


def _patch_text(finding: dict) -> str:
    patch = finding.get("job_patch") or {}
    parts = {k: v for k, v in patch.items() if k != "targets" and v}
    return json.dumps(parts, sort_keys=True) if parts else ""


def audit_block_markdown(summary: dict) -> list[str]:
    """Lines of the Markdown warning block, empty when the audit raised nothing.

    Examples
    --------
    >>> audit_block_markdown({})
    []
    >>> audit_block_markdown({"frame_audit": {"sentence": "S.", "warning": "W.",
    ...     "job_patch": {"map": {"rotation_sense": "active"}, "phases": {}}}})[0]
    '> **WARNING — frame audit.** W.'
    """
    finding = summary.get("frame_audit")
    if not finding:
        return []
    lines = [f"> **WARNING — frame audit.** {finding.get('warning', '')}", ">"]
    lines.append(f"> {finding.get('sentence', '')}")
    patch = _patch_text(finding)
    if patch:
        targets = ", ".join((finding.get("job_patch") or {}).get("targets", []))
        lines += [">", f"> Job patch (fields to set on {targets or '/map'}): `{patch}`"]
    return lines + [""]


def audit_block_html(summary: dict) -> list[str]:
    """HTML of the warning block (a list of one element), empty when nothing was raised.

    Examples
    --------
    >>> audit_block_html({})
    []
    >>> "WARNING" in audit_block_html({"frame_audit": {"sentence": "S.", "warning": "W."}})[0]
    True
    """
    finding = summary.get("frame_audit")
    if not finding:
        return []
    esc = html.escape
    body = (
        f'<div class="frame-audit" role="alert" style="{_STYLE}">'
        f"<p><strong>WARNING — frame audit.</strong> {esc(str(finding.get('warning', '')))}</p>"
        f"<p>{esc(str(finding.get('sentence', '')))}</p>"
    )
    patch = _patch_text(finding)
    if patch:
        targets = ", ".join((finding.get("job_patch") or {}).get("targets", []))
        body += (
            f"<p>Job patch (fields to set on {esc(targets or '/map')}): "
            f"<code>{esc(patch)}</code></p>"
        )
    return [body + "</div>"]
