"""Integrity check of a study's outputs: case files present, ids matching content, tables matching cases."""
from __future__ import annotations

import numpy as np
import pandas as pd

from .layout import StudyLayout, read_plan
from .pipeline import OK_STATUSES, read_json

#: files every case folder has once its case ran (ok or not), and those only a finished case has
ALWAYS = ("case.json", "scene.json", "preview.png", "metrics.json")
ON_SUCCESS = ("result.h5", "sparams.s2p")


def case_json2case_id(case: dict) -> str:
    """Recompute a case's id from its ``case.json`` content (the study layer's identity rule)."""
    from .study.cases import identity_content
    from .study.identity import content2case_id

    return content2case_id(identity_content(case["scene"], case["frequency_Hz"], case["solver"], case["sar"],
                                            case.get("excite_ports", [1]), case["versions"]))


def verify_case(layout: StudyLayout, entry: dict) -> list[str]:
    """Problems of one case folder (empty list: consistent)."""
    cid = entry["case_id"]
    d = layout.case_dir(cid)
    out = []
    if not d.is_dir():
        return [f"{cid}: case folder missing"]
    for name in ALWAYS:
        if not (d / name).exists():
            out.append(f"{cid}: {name} missing")
    case = read_json(d / "case.json")
    if case is not None:
        try:
            again = case_json2case_id(case)
        except Exception as exc:
            out.append(f"{cid}: case.json cannot be hashed ({exc})")
        else:
            if again != cid:
                out.append(f"{cid}: case.json content hashes to {again}, not to its folder name")
        if case.get("case_id") != cid:
            out.append(f"{cid}: case.json says case_id {case.get('case_id')!r}")
    m = read_json(d / "metrics.json")
    if m is not None:
        if str(m.get("status")) in OK_STATUSES:
            for name in ON_SUCCESS:
                if name == "sparams.s2p" and (d / "sparams.s1p").exists():  # one-port scene (no implant)
                    continue
                if not (d / name).exists():
                    out.append(f"{cid}: status {m.get('status')} but {name} missing")
            for p in entry.get("ports", [1]):
                if not (d / f"excite_{p}" / "status.json").exists():
                    out.append(f"{cid}: status {m.get('status')} but excite_{p}/status.json missing")
        elif not m.get("reason"):
            out.append(f"{cid}: status {m.get('status')!r} without a reason")
    return out


def _same(a: pd.Series, b: pd.Series) -> bool:
    an, bn = pd.to_numeric(a, errors="coerce"), pd.to_numeric(b, errors="coerce")
    if an.notna().sum() == a.notna().sum() and bn.notna().sum() == b.notna().sum():
        x, y = an.to_numpy(float), bn.to_numpy(float)
        return bool(np.all((np.isnan(x) & np.isnan(y)) | np.isclose(x, y, rtol=1e-9, atol=0.0, equal_nan=True)))
    return bool((a.fillna("").astype(str).to_numpy() == b.fillna("").astype(str).to_numpy()).all())


def verify_tables(layout: StudyLayout, entries: list[dict]) -> list[str]:
    """Compare the stored tables with tables collected afresh from the case files."""
    from .collect import collect_frames

    out = []
    fresh = collect_frames(layout, entries)
    for name, df in fresh.items():
        p = layout.tables_dir / f"{name}.parquet"
        if not p.exists():
            out.append(f"tables: {p.name} missing")
            continue
        if not (layout.tables_dir / f"{name}.csv").exists():
            out.append(f"tables: {name}.csv missing")
        stored = pd.read_parquet(p)
        if list(stored.columns) != list(df.columns):
            out.append(f"tables: {name} columns differ from the case files ({sorted(set(stored.columns) ^ set(df.columns))[:6]})")
            continue
        if len(stored) != len(df):
            out.append(f"tables: {name} has {len(stored)} rows, the case files give {len(df)}")
            continue
        for c in df.columns:
            if not _same(stored[c].reset_index(drop=True), df[c].reset_index(drop=True)):
                out.append(f"tables: {name}.{c} differs from the case files (collect again)")
    ids = set(e["case_id"] for e in entries)
    if "summary" in fresh and (layout.tables_dir / "summary.parquet").exists():
        stored_ids = set(pd.read_parquet(layout.tables_dir / "summary.parquet", columns=["case_id"])["case_id"])
        if stored_ids != ids:
            out.append(f"tables: summary case ids differ from the plan ({len(stored_ids ^ ids)} ids)")
    return out


def verify_study(layout: StudyLayout) -> tuple[list[str], int]:
    """All problems of a study's outputs and the number of cases checked."""
    entries = read_plan(layout)["cases"]
    problems: list[str] = []
    for e in entries:
        problems += verify_case(layout, e)
    problems += verify_tables(layout, entries)
    return problems, len(entries)

