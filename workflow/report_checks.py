"""Report sections on how far a study's numbers can be trusted: per-case warnings and the uncertainty budget.

Kept apart from :mod:`.report` (plots and the case list); :func:`.report.write_report` appends the lines
these functions return.
"""
from __future__ import annotations

import pandas as pd


def warning_lines(summary: pd.DataFrame) -> list[str]:
    """A ``## Warnings`` section listing each finished case's warnings (empty list when there are none)."""
    if "warnings" not in summary:
        return []
    flagged = summary[summary["warnings"].fillna("").astype(str).str.len() > 0]
    if flagged.empty:
        return []
    lines = ["", "## Warnings", "",
             f"{len(flagged)} of {len(summary)} cases finished with numbers that may be wrong (status stays `ok`; "
             "column `warnings` of the summary table):", ""]
    for _, r in flagged.iterrows():
        for w in str(r["warnings"]).split("; "):
            lines.append(f"- `{r['case_id']}` ({r['label']}): {w}")
    return lines
