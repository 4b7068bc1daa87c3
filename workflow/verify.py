"""Integrity check of a study's outputs: case files present, ids matching content, the solves the study
refers to in the shared store (:mod:`.store`), tables matching cases."""
from __future__ import annotations

import numpy as np
import pandas as pd

from .casefolder import CaseFolder, SolveFolder
from .layout import StudyLayout, read_plan
from .pipeline import OK_STATUSES
from .study.cases import case_identities


def case_json2case_id(case: dict) -> str:
    """Recompute a case's id from its ``case.json`` content (the study layer's identity rule)."""
    return case_identities(case)[1]


def verify_case(layout: StudyLayout, entry: dict, store=None) -> list[str]:
    """Problems of one case folder (empty list: consistent)."""
    cid = entry["case_id"]
    folder = CaseFolder(layout.case_dir(cid))
    cj = folder.case_file.name
    out = []
    if not folder.dir.is_dir():
        return [f"{cid}: case folder missing"]
    for f in (folder.case_file, folder.metrics_file):  # every case folder has them once its case ran
        if not f.exists():
            out.append(f"{cid}: {f.name} missing")
    case = folder.read_case()
    if case is not None:
        try:
            again = case_json2case_id(case)
        except Exception as exc:
            out.append(f"{cid}: {cj} cannot be hashed ({exc})")
        else:
            if again != cid:
                out.append(f"{cid}: {cj} content hashes to {again}, not to its folder name")
        if case.get("case_id") != cid:
            out.append(f"{cid}: {cj} says case_id {case.get('case_id')!r}")
        try:
            sid = case_identities(case)[0]
        except Exception:
            sid = None
        if sid is not None and (case.get("solve_id") != sid or entry.get("solve_id") != sid):
            out.append(f"{cid}: {cj} content gives solve id {sid}, {cj} / {layout.plan_file.name} say "
                       f"{case.get('solve_id')!r} / {entry.get('solve_id')!r}")
    m = folder.read_metrics()
    if m is not None:
        if str(m.get("status")) in OK_STATUSES:
            for name in folder.missing_results(entry.get("ports", [1])):
                out.append(f"{cid}: status {m.get('status')} but {name} missing")
            if store is not None and entry.get("solve_id"):
                sd = SolveFolder(store / entry["solve_id"])
                for p in entry.get("ports", [1]):
                    exc = sd.excitation(p)
                    st = exc.read_status()
                    if st is None or st.get("status") != "ok":
                        out.append(f"{cid}: status {m.get('status')} but its solve's {exc.label} is "
                                   f"{'missing' if st is None else st.get('status')}")
            out += verify_metrics(folder.dir, cid, m)
        elif not m.get("reason"):
            out.append(f"{cid}: status {m.get('status')!r} without a reason")
    return out


#: relative agreement of metrics.json with the files it was computed with: S at the case frequency is
#: computed twice from the same port signals (band and single frequency, float64); the SAR volumes in
#: result.h5 are float32 (relative rounding 6e-8)
METRICS_RTOL = 1e-6


def _close(a: complex | float, b: complex | float) -> bool:
    return bool(abs(a - b) <= METRICS_RTOL * max(abs(a), abs(b)) + 1e-300)


def verify_metrics(d, cid: str, m: dict) -> list[str]:
    """The figures of a finished case's ``metrics.json`` against its Touchstone file and ``result.h5``.

    S-parameters at the case frequency must equal the Touchstone point at that frequency; each peak
    averaged SAR must equal the maximum of its averaged volume in ``result.h5``; ``result.h5`` must carry
    the case's id. A file that cannot be read is reported as such.
    """
    out = []
    folder = CaseFolder(d)
    ts = folder.touchstone_file()
    mj, rh = folder.metrics_file.name, folder.result_file.name
    f0 = m.get("frequency_Hz")
    if ts is not None and f0:
        from .collect import touchstone2arrays

        try:
            f, S = touchstone2arrays(ts)
        except Exception as exc:
            out.append(f"{cid}: {ts.name} unreadable ({' '.join(str(exc).split())[:200]})")
        else:
            k = int(np.argmin(np.abs(f - float(f0)))) if len(f) else -1
            if k >= 0 and abs(f[k] - float(f0)) <= 1e-9 * float(f0):
                for i in range(S.shape[1]):
                    for j in range(S.shape[2]):
                        v = m.get(f"S{i + 1}{j + 1}")
                        if v is None or not np.isfinite(S[k, i, j]):
                            continue
                        if not _close(complex(v[0], v[1]), complex(S[k, i, j])):
                            out.append(f"{cid}: {mj} S{i + 1}{j + 1} = {complex(v[0], v[1]):.6g} differs from "
                                       f"{ts.name} at {float(f0) / 1e6:g} MHz ({complex(S[k, i, j]):.6g})")
    if folder.has_result():
        try:
            owner = folder.read_result_case_id()
            if owner is not None and owner != cid:
                out.append(f"{cid}: {rh} belongs to case {owner!r}")
            names = folder.sar_volume_names()
            for row in m.get("sar") or []:
                name = f"avg_{float(row['mass_kg']) * 1e3:g}g"
                peak = row.get("peak_W_per_kg_per_W")
                if "grid_peak_W_per_kg_per_W" not in row:  # written before post-processing version 3
                    row = {**row, "grid_peak_W_per_kg_per_W": peak}
                grid = row.get("grid_peak_W_per_kg_per_W")
                flush = row.get("flush_peak_W_per_kg_per_W")
                # the reported peak is the larger of the voxel-grid peak and the best flush cube
                larger = max((v for v in (grid, flush) if v is not None), default=None)
                if peak is not None and (larger is None or not _close(float(peak), float(larger))):
                    out.append(f"{cid}: {mj} peak SAR {row['mass_kg'] * 1e3:g} g = {peak:.6g} W/kg per W "
                               f"is not the larger of its grid ({grid}) and flush ({flush}) peaks")
                if grid is None or name not in names:
                    continue
                top = float(np.nanmax(folder.read_sar(name)["values"]))
                if not _close(float(grid), top):
                    out.append(f"{cid}: {mj} grid peak SAR {row['mass_kg'] * 1e3:g} g = {grid:.6g} W/kg "
                               f"per W differs from the maximum of {rh} sar/{name} ({top:.6g})")
        except Exception as exc:
            out.append(f"{cid}: {rh} unreadable ({' '.join(str(exc).split())[:200]})")
    return out


def _same(a: pd.Series, b: pd.Series) -> bool:
    an, bn = pd.to_numeric(a, errors="coerce"), pd.to_numeric(b, errors="coerce")
    if an.notna().sum() == a.notna().sum() and bn.notna().sum() == b.notna().sum():
        x, y = an.to_numpy(float), bn.to_numpy(float)
        return bool(np.all((np.isnan(x) & np.isnan(y)) | np.isclose(x, y, rtol=1e-9, atol=0.0, equal_nan=True)))
    return bool((a.fillna("").astype(str).to_numpy() == b.fillna("").astype(str).to_numpy()).all())


def _compare_csv(path, fresh: pd.DataFrame) -> list[str]:
    """The CSV copy of a table against the table collected afresh (written with 10 significant digits)."""
    try:
        stored = pd.read_csv(path, dtype=str, keep_default_na=False)
    except Exception as exc:
        return [f"tables: {path.name} unreadable ({' '.join(str(exc).split())[:200]})"]
    if list(stored.columns) != [str(c) for c in fresh.columns]:
        return [f"tables: {path.name} columns differ from the case files"]
    if len(stored) != len(fresh):
        return [f"tables: {path.name} has {len(stored)} rows, the case files give {len(fresh)}"]
    def text(v) -> str:
        return "" if v is None or (isinstance(v, float) and v != v) else str(v)

    out = []
    for c in fresh.columns:
        a = stored[str(c)].replace("", np.nan).reset_index(drop=True)
        b = fresh[c].reset_index(drop=True)
        an, bn = pd.to_numeric(a, errors="coerce"), pd.to_numeric(b, errors="coerce")
        if an.notna().sum() == a.notna().sum() and bn.notna().sum() == b.notna().sum():
            x, y = an.to_numpy(float), bn.to_numpy(float)
            # %.10g keeps 10 significant digits: relative rounding at most 5e-10
            match = (np.isnan(x) & np.isnan(y)) | np.isclose(x, y, rtol=1e-9, atol=0.0)
        else:
            match = a.fillna("").astype(str).to_numpy() == b.map(text).to_numpy()
        if not match.all():
            rows = [int(k) for k in np.nonzero(~match)[0]]
            out.append(f"tables: {path.name} column {c} differs from the case files (rows {rows[:5]}; collect again)")
    return out


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
        csv = layout.tables_dir / f"{name}.csv"
        if not csv.exists():
            out.append(f"tables: {name}.csv missing")
        else:
            out += _compare_csv(csv, df)
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
    from .layout import is_budget_run

    ids = set(e["case_id"] for e in entries if not is_budget_run(e))  # component runs are only in the budget
    if "summary" in fresh and (layout.tables_dir / "summary.parquet").exists():
        stored_ids = set(pd.read_parquet(layout.tables_dir / "summary.parquet", columns=["case_id"])["case_id"])
        if stored_ids != ids:
            out.append(f"tables: summary case ids differ from the plan ({len(stored_ids ^ ids)} ids)")
    return out


def verify_study(layout: StudyLayout, store=None) -> tuple[list[str], int]:
    """All problems of a study's outputs and of its solves in the store, and the number of cases checked.

    ``store``: the store folder (default :func:`.store.store_root` of the study's results folder).
    """
    from pathlib import Path

    from .store import store_root, verify_solve

    store = Path(store) if store is not None else store_root(layout.root.parent)
    entries = read_plan(layout)["cases"]
    problems: list[str] = []
    for e in entries:
        problems += verify_case(layout, e, store)
    ports: dict[str, list] = {}
    for e in entries:
        if e.get("solve_id"):
            ports.setdefault(e["solve_id"], e.get("ports", [1]))
    for sid, p in sorted(ports.items()):
        problems += verify_solve(store, sid, p)
    problems += verify_tables(layout, entries)
    return problems, len(entries)

