"""Merge per-case results into tidy tables (Parquet and CSV) under ``results/<study>/tables/``.

Three tables, every row carrying the ``case_id`` (see the data dictionary in README.md):

``sparams``  long form: one row per case, band frequency and S-matrix entry ``(i, j)``;
``sar``      one row per case and averaging mass: peak averaged SAR per watt of input power, which cube gave
             it (voxel grid or flush with a surface), its cube centre and side and the peak voxel;
``summary``  one row per case (one case = one frequency): parameters, S11/S21/S22 in dB, port impedances,
             mismatch losses, peak SAR, SAR-limited accepted power per exposure limit, implant power per
             matching variant, the study's figure of merit, status and warnings.

Inputs are the files of the case-folder contract (``metrics.json``, ``sparams.s2p``) and the study's
``plan.json`` (case ids, labels and swept parameters), so nothing is re-expanded and no ``case.json``
has to be opened: merging 10,000 cases takes seconds (``benchmarks/collect_scale.py``).
"""
from __future__ import annotations

import json
import math
import re
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pandas as pd

from .atomic import atomic_path
from .casefolder import METRICS_FILE, CaseFolder
from .layout import TABLE_NAMES, StudyLayout, read_plan
from .post.flags import WARNING_SEPARATOR  # between the warnings of one case in the ``warnings`` column

#: columns every summary row has, in this order (parameter and per-limit columns are added)
SUMMARY_FIXED = ("case_id", "label", "status", "reason", "frequency_MHz", "S11_dB", "S21_dB", "S22_dB")
#: port and matching figures (after S22_dB)
PORT_COLUMNS = ("Zin1_re_ohm", "Zin1_im_ohm", "Zin2_re_ohm", "Zin2_im_ohm", "mismatch_loss_port1_dB",
                "mismatch_loss_port2_dB", "rollett_K", "max_available_gain_dB", "port2_reason")
#: implant power at the SAR limit per matching variant (see workflow/post/portfigures.py)
IMPLANT_VARIANTS = ("unmatched", "tx_matched", "both_matched")
LINK_COLUMNS = (("sar_limited_accepted_W", "sar_limited_accepted_dBm", "deciding_limit")
                + tuple(f"implant_power_{v}_{u}" for v in IMPLANT_VARIANTS for u in ("W", "dBm"))
                + ("figure_of_merit", "figure_of_merit_value"))
SUMMARY_TAIL = ("warnings", "runtime_s", "cells", "timesteps", "decay_reached", "energy_balance")
SPARAMS_FIXED = ("case_id", "frequency_MHz", "i", "j", "re", "im", "mag_dB", "phase_deg")
SAR_COLUMNS = ("case_id", "frequency_MHz", "mass_g", "peak_W_per_kg_per_W", "peak_from",
               "cube_x_mm", "cube_y_mm", "cube_z_mm", "cube_side_mm", "voxel_x_mm", "voxel_y_mm", "voxel_z_mm",
               "grid_peak_W_per_kg_per_W", "flush_peak_W_per_kg_per_W", "flush_face", "flush_search_converged")


# -- small conversions ------------------------------------------------------------------------------
def complex2db(z: complex | np.ndarray) -> float | np.ndarray:
    """``20 log10 |z|`` in dB (``-inf`` for 0, NaN for NaN); works element-wise on arrays."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(np.abs(z))


def ratio2db(r: float | None) -> float:
    """Power ratio to dB (``10 log10 r``); NaN for missing or non-positive ratios."""
    if r is None or not isinstance(r, (int, float)) or not r > 0:
        return math.nan
    return 10.0 * math.log10(r)


def watt2dbm(p_W: float | None) -> float:
    """Power in W to dBm (``10 log10 (P / 1 mW)``); NaN for missing or non-positive powers."""
    if p_W is None or not isinstance(p_W, (int, float)) or not p_W > 0:
        return math.nan
    return 10.0 * math.log10(p_W / 1e-3)


def _pair2complex(v: Any) -> complex:
    if isinstance(v, (list, tuple)) and len(v) == 2 and all(isinstance(x, (int, float)) for x in v):
        return complex(float(v[0]), float(v[1]))
    return complex(math.nan, math.nan)


def _num(v: Any) -> float:
    return float(v) if isinstance(v, (int, float)) and not isinstance(v, bool) else math.nan


def _g(mass_kg: float) -> str:
    """Averaging mass as a column-name fragment: 0.001 kg -> ``1g``, 0.01 kg -> ``10g``."""
    g = round(float(mass_kg) * 1e3, 6)
    return f"{g:g}g"


def limit_tag(limit: dict) -> str:
    """Column-name fragment naming one exposure limit: ``10g_2W_per_kg`` (mass, limit value)."""
    return f"{_g(limit.get('mass_kg', math.nan))}_{_num(limit.get('limit_W_per_kg')):g}W_per_kg"


# -- Touchstone --------------------------------------------------------------------------------------
_TS_UNITS = {"hz": 1.0, "khz": 1e3, "mhz": 1e6, "ghz": 1e9}


def touchstone2arrays(path: str | Path) -> tuple[np.ndarray, np.ndarray]:
    """Read a version-1 Touchstone file of ``n`` ports (``.s<n>p``) quickly with numpy.

    Supports the option line ``# <Hz|kHz|MHz|GHz> S <RI|MA|DB> R <z0>``; network data are read in
    the order Touchstone v1 defines (two-port: S11 S21 S12 S22; otherwise row by row).

    Returns
    -------
    f_Hz : ndarray, shape (nf,)
    S : ndarray of complex, shape (nf, n, n)
    """
    path = Path(path)
    m = re.search(r"\.s(\d+)p$", path.name, re.IGNORECASE)
    if not m:
        raise ValueError(f"Touchstone file {path}: name must end in .s<n>p to give the port count")
    n = int(m.group(1))
    unit, fmt = "ghz", "ma"
    values: list[str] = []
    for line in path.read_text(encoding="ISO-8859-1").splitlines():
        line = line.split("!", 1)[0].strip()
        if not line:
            continue
        if line.startswith("#"):
            tok = line[1:].lower().split()
            for t in tok:
                if t in _TS_UNITS:
                    unit = t
                elif t in ("ri", "ma", "db"):
                    fmt = t
            continue
        values.extend(line.split())
    per_f = 1 + 2 * n * n
    data = np.array(values, dtype=float)
    if data.size % per_f:
        raise ValueError(f"Touchstone file {path}: {data.size} numbers is not a multiple of {per_f} for {n} ports")
    data = data.reshape(-1, per_f)
    f_Hz = data[:, 0] * _TS_UNITS[unit]
    a, b = data[:, 1::2], data[:, 2::2]
    if fmt == "ri":
        z = a + 1j * b
    elif fmt == "ma":
        z = a * np.exp(1j * np.deg2rad(b))
    else:
        z = 10.0 ** (a / 20.0) * np.exp(1j * np.deg2rad(b))
    S = z.reshape(-1, n, n)
    if n == 2:  # Touchstone v1 two-port order is S11 S21 S12 S22 (column-major)
        S = np.transpose(S, (0, 2, 1))
    return f_Hz, S


LEGACY_NOTE = (f"{METRICS_FILE} written before port figures existed: input impedances, mismatch losses and K are "
               f"empty; remove the case's {METRICS_FILE} and run the study again (only the finish step reruns)")


def _legacy_metrics(m: dict, S: dict):
    """For a finished case's ``metrics.json`` of the earlier format (``max_input_power_W``, ``delivered_power_W``,
    ``matched_link_efficiency``): a function mapping each limit row to the current keys, else None.

    The earlier figures are the same quantities: ``delivered_power_W`` was P_lim |S21|^2 / (1 - |S11|^2) (port 1
    matched), ``matched_link_efficiency`` the maximum available gain; the unmatched figure is P_lim |S21|^2.
    """
    if m.get("status") not in ("ok", "warning") or "ports" in m or "matched_link_efficiency" not in m:
        return None
    mag = _num(m.get("matched_link_efficiency"))

    def convert(lim: dict) -> dict:
        p = _num(lim.get("max_input_power_W"))
        s21 = abs(S["S21"])
        return {**lim, "sar_limited_accepted_W": p, "implant_power_W": {
            "unmatched": p * s21 ** 2 if s21 == s21 else None, "tx_matched": lim.get("delivered_power_W"),
            "both_matched": p * mag if mag == mag else None}}
    return convert


# -- reading the case folders -------------------------------------------------------------------------
def read_metrics(case_dir: Path) -> dict:
    """``metrics.json`` of a case, or a record saying it is missing / unreadable."""
    folder = CaseFolder(case_dir)
    name = folder.metrics_file.name
    try:
        return folder.read_metrics_strict()
    except FileNotFoundError:
        return {"status": "missing", "reason": f"no {name} yet (case not run or still running)"}
    except (OSError, ValueError) as exc:
        return {"status": "failed", "reason": f"{name} unreadable: {exc}"}


#: the case frequency is a parameter of every case; in the summary it is the ``frequency_MHz`` column
#: itself, in the long S-parameter table (where ``frequency_MHz`` is the band frequency) this column
CASE_FREQUENCY = "case_frequency_MHz"


def parameter_columns(entries: list[dict], taken: Iterable[str]) -> dict[str, str]:
    """Map each parameter (dotted path) to its column name; a clash with a fixed column gets ``param.``.

    The case frequency (``frequency_MHz``) is left out: every table has it under a fixed name.
    """
    taken = set(taken)
    names: dict[str, str] = {}
    for e in entries:
        for k in e.get("parameters", {}):
            if k not in names and k != "frequency_MHz":
                names[k] = f"param.{k}" if k in taken else k
    return names


def _param_value(v: Any) -> Any:
    # tables hold scalars; a list or dict parameter is kept as its canonical JSON text
    if isinstance(v, (list, dict)):
        return json.dumps(v, sort_keys=True)
    return v


#: figures of merit a study may rank by (key ``figure_of_merit``), each the summary column(s) it reads;
#: ``implant_power`` is the both-ends-matched implant power where port 2 was excited, else port-1-matched
MERITS = {
    "implant_power": ("implant_power_both_matched_dBm", "implant_power_tx_matched_dBm"),
    "implant_power_both_matched": ("implant_power_both_matched_dBm",),
    "implant_power_tx_matched": ("implant_power_tx_matched_dBm",),
    "implant_power_unmatched": ("implant_power_unmatched_dBm",),
    "S21": ("S21_dB",),
    "sar_limited_accepted_power": ("sar_limited_accepted_dBm",),
}
DEFAULT_MERIT = "implant_power"


def figure_of_merit(summary: pd.DataFrame, merit: str = DEFAULT_MERIT) -> str:
    """The one column the whole study is ranked by (higher is better); ``""`` when none has a value.

    Of the merit's candidate columns the first one that every case with any candidate value has is
    taken, so that all cases are ranked on the same basis (one case without a both-ends match puts the
    study on the port-1-matched figure rather than mixing the two).
    """
    cands = [c for c in MERITS[merit] if c in summary]
    if not cands:
        return ""
    vals = summary[cands].apply(pd.to_numeric, errors="coerce")
    anyv = vals.notna().any(axis=1)
    for c in cands:
        if anyv.any() and vals.loc[anyv, c].notna().all():
            return c
    return next((c for c in cands if vals[c].notna().any()), "")


def collect_frames(layout: StudyLayout, entries: list[dict] | None = None, *,
                   band: bool = True, merit: str | None = None) -> dict[str, pd.DataFrame]:
    """Build the three tables of a study in memory.

    Parameters
    ----------
    layout : StudyLayout
        Where the study's case folders are.
    entries : list of dict, optional
        Plan entries (``case_id``, ``label``, ``parameters``); default: the study's ``plan.json``.
    band : bool
        Read each case's ``sparams.s2p`` for the band in the ``sparams`` table (default). If False or
        the file is missing, the ``sparams`` table holds the case frequency from ``metrics.json`` only.
    merit : str, optional
        The figure of merit (one of :data:`MERITS`); default: the study's ``figure_of_merit`` from
        ``plan.json``, else :data:`DEFAULT_MERIT`.

    Returns
    -------
    dict of str to DataFrame
        ``{"summary": ..., "sparams": ..., "sar": ...}``.
    """
    from .collect_uncertainty import add_budget, split_entries

    plan = None
    if entries is None:
        plan = read_plan(layout)
        entries = plan["cases"]
    entries, budget_runs = split_entries(entries)  # uncertainty component runs: only in the budget
    if merit is None:
        if plan is None and layout.plan_file.exists():
            plan = read_plan(layout)
        merit = ((plan or {}).get("settings") or {}).get("figure_of_merit", DEFAULT_MERIT)
    pcols = parameter_columns(entries, set(SUMMARY_FIXED) | set(SUMMARY_TAIL) | set(SPARAMS_FIXED) | {CASE_FREQUENCY}
                              | set(PORT_COLUMNS) | set(LINK_COLUMNS))
    summary_rows: list[dict] = []
    sar_rows: list[dict] = []
    sp_blocks: list[dict[str, np.ndarray]] = []
    limit_cols: dict[str, None] = {}
    mass_cols: dict[str, None] = {}
    for e in entries:
        cid = e["case_id"]
        cdir = layout.case_dir(cid)
        m = read_metrics(cdir)
        params = {pcols[k]: _param_value(v) for k, v in e.get("parameters", {}).items() if k in pcols}
        f_Hz = _num(m.get("frequency_Hz", e.get("frequency_Hz")))
        row: dict[str, Any] = {"case_id": cid, "label": e.get("label", ""), **params,
                               "status": str(m.get("status", "missing")), "reason": str(m.get("reason", "") or ""),
                               "frequency_MHz": f_Hz * 1e-6}
        S = {k: _pair2complex(m.get(k)) for k in ("S11", "S21", "S12", "S22")}
        for k in ("S11", "S21", "S22"):
            row[f"{k}_dB"] = float(complex2db(S[k]))
        for s in m.get("sar", []) or []:
            tag = _g(s.get("mass_kg", math.nan))
            col = f"peak_SAR_{tag}_W_per_kg_per_W"
            mass_cols[col] = None
            row[col] = _num(s.get("peak_W_per_kg_per_W"))
            cube = s.get("cube_centre_m") or [math.nan] * 3
            vox = s.get("voxel_centre_m") or s.get("location_m") or [math.nan] * 3  # location_m: before version 3
            sar_rows.append({"case_id": cid, "frequency_MHz": f_Hz * 1e-6,
                             "mass_g": _num(s.get("mass_kg")) * 1e3,
                             "peak_W_per_kg_per_W": _num(s.get("peak_W_per_kg_per_W")),
                             "peak_from": str(s.get("peak_from") or ""),
                             **{f"cube_{a}_mm": _num(v) * 1e3 for a, v in zip("xyz", cube)},
                             "cube_side_mm": _num(s.get("cube_side_m")) * 1e3,
                             **{f"voxel_{a}_mm": _num(v) * 1e3 for a, v in zip("xyz", vox)},
                             "grid_peak_W_per_kg_per_W": _num(s.get("grid_peak_W_per_kg_per_W")),
                             "flush_peak_W_per_kg_per_W": _num(s.get("flush_peak_W_per_kg_per_W")),
                             "flush_face": str(s.get("flush_face") or ""),
                             "flush_search_converged": s.get("flush_search_converged") is not False})
        ports = m.get("ports") or {}
        for p in (1, 2):
            z = _pair2complex(ports.get(f"Zin{p}_ohm"))
            row[f"Zin{p}_re_ohm"], row[f"Zin{p}_im_ohm"] = z.real, z.imag
            row[f"mismatch_loss_port{p}_dB"] = _num(ports.get(f"mismatch_loss_port{p}_dB"))
        row["rollett_K"] = _num(ports.get("rollett_K"))
        row["max_available_gain_dB"] = ratio2db(m.get("max_available_gain"))
        row["port2_reason"] = str(ports.get("port2_reason") or "")
        allowed = []
        legacy = _legacy_metrics(m, S)
        for lim in m.get("limits", []) or []:
            tag = limit_tag(lim)
            if legacy:
                lim = legacy(lim)
            p_in = _num(lim.get("sar_limited_accepted_W"))
            row[f"sar_limited_accepted_W_{tag}"] = p_in
            row[f"sar_limited_accepted_dBm_{tag}"] = watt2dbm(p_in)
            row[f"limit_source_{tag}"] = str(lim.get("source", ""))
            limit_cols[tag] = None
            allowed.append((p_in, tag, lim.get("implant_power_W") or {}))
        # the most restrictive limit decides the usable accepted power
        finite = [x for x in allowed if x[0] == x[0]]
        p_in, tag, powers = min(finite, key=lambda x: x[0]) if finite else (math.nan, "", {})
        row["sar_limited_accepted_W"], row["sar_limited_accepted_dBm"] = p_in, watt2dbm(p_in)
        row["deciding_limit"] = tag
        for v in IMPLANT_VARIANTS:
            pv = _num(powers.get(v))
            row[f"implant_power_{v}_W"], row[f"implant_power_{v}_dBm"] = pv, watt2dbm(pv)
        row["warnings"] = WARNING_SEPARATOR.join(str(w) for w in (m.get("warnings") or []) + (
            [LEGACY_NOTE] if legacy else []))
        row["runtime_s"] = _num(m.get("runtime_s"))
        row["cells"] = _num(m.get("cells"))
        row["timesteps"] = _num(m.get("timesteps"))
        dr = m.get("decay_reached")
        row["decay_reached"] = bool(dr) if isinstance(dr, bool) else None
        row["energy_balance"] = _num(m.get("energy_balance"))
        summary_rows.append(row)

        # S-parameters: the band from the Touchstone file, else the case frequency from metrics.json
        block = None
        folder = CaseFolder(cdir)
        ts = folder.touchstone_file()  # a scene without implant is a one-port
        if band and row["status"] in ("ok", "warning") and ts is not None:
            try:
                if ts.suffix == ".s1p" and S["S21"] == S["S21"]:
                    # only port 1 excited: the one-port file holds S11, result.h5 the computed S21 too
                    block = folder.read_result_band()
                else:
                    block = touchstone2arrays(ts)
            except (OSError, ValueError, KeyError):
                block = None
        if block is None and f_Hz == f_Hz:
            Sm = np.array([[S["S11"], S["S12"]], [S["S21"], S["S22"]]], dtype=complex)[None]
            block = (np.array([f_Hz]), Sm)
        if block is not None:
            fb, Sb = block
            nf, n, _ = Sb.shape
            ii, jj = np.meshgrid(np.arange(1, n + 1), np.arange(1, n + 1), indexing="ij")
            z = Sb.reshape(nf, n * n)
            keep = ~np.all(np.isnan(z), axis=0)  # an entry never computed (port not excited) is left out
            z = z[:, keep]
            k = int(keep.sum())
            sp_blocks.append({"case_id": np.full(nf * k, cid, dtype=object),
                              "frequency_MHz": np.repeat(fb * 1e-6, k),
                              "i": np.tile(ii.ravel()[keep], nf), "j": np.tile(jj.ravel()[keep], nf),
                              "z": z.ravel(), "params": params, "f_case_MHz": f_Hz * 1e-6})

    # summary: fixed columns, parameters, per-mass SAR, per-limit columns, the rest
    summary = pd.DataFrame(summary_rows)
    lim_order = []
    for tag in limit_cols:
        lim_order += [f"sar_limited_accepted_W_{tag}", f"sar_limited_accepted_dBm_{tag}", f"limit_source_{tag}"]
    order = (["case_id", "label"] + list(dict.fromkeys(pcols.values()))
             + ["status", "reason", "frequency_MHz", "S11_dB", "S21_dB", "S22_dB"] + list(PORT_COLUMNS)
             + list(mass_cols) + list(LINK_COLUMNS) + lim_order + list(SUMMARY_TAIL))
    summary = summary.reindex(columns=order)
    basis = figure_of_merit(summary, merit)
    summary["figure_of_merit"] = basis
    summary["figure_of_merit_value"] = pd.to_numeric(summary[basis], errors="coerce") if basis else math.nan
    for c in ("cells", "timesteps"):
        summary[c] = summary[c].astype("Float64").round().astype("Int64")

    # sparams, long form
    if sp_blocks:
        z = np.concatenate([b["z"] for b in sp_blocks])
        sp = pd.DataFrame({"case_id": np.concatenate([b["case_id"] for b in sp_blocks])})
        sp[CASE_FREQUENCY] = np.concatenate([np.full(b["z"].size, b["f_case_MHz"]) for b in sp_blocks])
        for col in dict.fromkeys(pcols.values()):
            sp[col] = np.concatenate([np.full(b["z"].size, b["params"].get(col), dtype=object) for b in sp_blocks])
            sp[col] = pd.Series(sp[col]).infer_objects()
        sp["frequency_MHz"] = np.concatenate([b["frequency_MHz"] for b in sp_blocks])
        sp["i"] = np.concatenate([b["i"] for b in sp_blocks]).astype(np.int16)
        sp["j"] = np.concatenate([b["j"] for b in sp_blocks]).astype(np.int16)
        sp["re"], sp["im"] = z.real, z.imag
        sp["mag_dB"] = complex2db(z)
        sp["phase_deg"] = np.rad2deg(np.angle(z))
    else:
        sp = pd.DataFrame(columns=["case_id", CASE_FREQUENCY, *dict.fromkeys(pcols.values()), *SPARAMS_FIXED[1:]])
    sar = pd.DataFrame(sar_rows, columns=list(SAR_COLUMNS))
    frames = {"summary": summary, "sparams": sp, "sar": sar}
    if plan is None and layout.plan_file.exists():
        plan = read_plan(layout)
    return add_budget(frames, layout, entries, budget_runs, ((plan or {}).get("settings") or {}).get("uncertainty"),
                      read_metrics)


def arrow_safe(df: pd.DataFrame) -> pd.DataFrame:
    """Object columns holding a mix of types (e.g. an option name in one case, a number in another)
    become text, so that Parquet can store them; other columns are left as they are."""
    out = df
    for c in df.columns:
        if df[c].dtype == object:
            kinds = {type(v) for v in df[c] if v is not None and not (isinstance(v, float) and math.isnan(v))}
            if len(kinds) > 1:
                if out is df:
                    out = df.copy()
                out[c] = df[c].map(lambda v: None if v is None else str(v))
    return out


def write_frames(layout: StudyLayout, frames: dict[str, pd.DataFrame]) -> dict[str, Path]:
    """Write each table as ``tables/<name>.parquet`` and ``tables/<name>.csv`` (atomically).

    Returns
    -------
    dict of str to Path
        ``{"summary.parquet": path, "summary.csv": path, ...}``.
    """
    out: dict[str, Path] = {}
    for name, df in frames.items():
        df = arrow_safe(df)
        pq = layout.tables_dir / f"{name}.parquet"
        with atomic_path(pq) as tmp:
            df.to_parquet(tmp, index=False)
        csv = layout.tables_dir / f"{name}.csv"
        with atomic_path(csv) as tmp:
            df.to_csv(tmp, index=False, float_format="%.10g")
        out[f"{name}.parquet"], out[f"{name}.csv"] = pq, csv
    return out


def collect_study(layout: StudyLayout, entries: list[dict] | None = None) -> dict[str, Path]:
    """Collect a study's case folders into its tables and write them; returns the written paths."""
    return write_frames(layout, collect_frames(layout, entries))
