"""The study report: ``results/<study>/report/report.md`` with its pictures (:mod:`.report_plots`).

The report carries the study's description, how to read it, the cautions that apply (simulation
estimate, coarse mesh), the exposure limits applied with their sources and which one decided, the
ranking by the study's figure of merit, per-case mesh, cells, runtime and warnings, and, when the study
names a baseline, each case's difference from it (also as ``report/baseline_comparison.csv``).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from .atomic import atomic_path, write_text
from .casefolder import CaseFolder
from .collect import WARNING_SEPARATOR
from .layout import StudyLayout, read_plan
from .report_plots import (FINISHED, MAX_BARS, MAX_IMPEDANCE_CASES, finished, plot_cases_overview,  # noqa: F401
                           plot_impedance, plot_peak_sar, plot_sar_sections, plot_vs_parameter, rank_column,
                           read_sar_volume)

SAFETY_NOTE = ("Results are simulation estimates from a simplified model of tissue and antennas. Exposure "
               "compliance is decided under the applicable standards, local regulations and licensed practice.")

HOW_TO_READ = (
    "Each case is one arrangement at one frequency, solved by FDTD. S11 and S21 are at the case frequency "
    "(port 1 = external antenna, port 2 = implant antenna, reference impedance 50 ohm unless the scene says "
    "otherwise). Peak SAR is given per watt *accepted* at port 1; the SAR-limited accepted power is the "
    "largest power port 1 may accept so that every SAR limit below holds (it is not the transmitter's output "
    "power). The implant power at that limit is given for three matching variants: no matching network at "
    "either end, port 1 conjugate-matched, and both ends conjugate-matched (needs the implant port excited); "
    "a real design with lossy matching networks lands below the matched figures. Cases are ranked by the "
    "study's figure of merit (higher is better). The README's data dictionary defines every column.")

COARSE_NOTE = (
    "**Coarse mesh.** {what}. Coarse meshes overstate peak SAR (on the cases measured in the README's mesh "
    "economy table by 45-81 % against a finer reference), so the SAR-limited powers and the implant powers here "
    "are low and the ranking may change with the mesh. Use these cases to compare arrangements; rerun the "
    "candidates with the `standard` or `fine` preset and check convergence before quoting a number.")

ESTIMATE_NOTE = (
    "**Simulation estimates.** Every figure here comes from a simplified model of tissue (Gabriel 1996 "
    "properties, idealised shapes) and antennas. It is not a compliance assessment: exposure compliance is "
    "decided under the applicable standards (for example IEC/IEEE 62704-1, IEC/IEEE 62209), the local "
    "regulations and licensed professional practice, with measurements where those require them. The band's own "
    "emission limits (transmitter power, bandwidth, duty cycle) are not checked here.")

#: |X|/R of a port above which the report cautions about the lossless-matching assumption (own choice)
HIGH_Q = 20.0

#: cells per wavelength of the standard preset (below it a mesh is called coarse)
STANDARD_CELLS_PER_WAVELENGTH = 20.0


def _fmt(v, spec: str = ".3g") -> str:
    try:
        if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
            return "-"
        return format(float(v), spec)
    except (TypeError, ValueError):
        return str(v)


def _safe(name: str) -> str:
    import re

    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_")


def swept_parameters(summary: pd.DataFrame, parameter_columns: list[str]) -> list[str]:
    """The parameter columns that take more than one value in the study."""
    return [c for c in parameter_columns if c in summary and summary[c].nunique(dropna=False) > 1]


def best_case(summary: pd.DataFrame) -> pd.Series | None:
    """The finished case with the highest ranking value (figure of merit; SAR-only: SAR-limited power)."""
    ok = finished(summary)
    if ok.empty:
        return None
    col = rank_column(ok)
    if col:
        return ok.loc[pd.to_numeric(ok[col], errors="coerce").idxmax()]
    return ok.iloc[0]


def _case_solver(layout: StudyLayout, cid: str) -> dict:
    try:
        return CaseFolder(layout.case_dir(cid)).read_case_strict().get("solver") or {}
    except (OSError, ValueError):
        return {}


def _zin(r, p: int = 1) -> str:
    re_, im = r.get(f"Zin{p}_re_ohm"), r.get(f"Zin{p}_im_ohm")
    if re_ is None or im is None or not (np.isfinite(re_) and np.isfinite(im)):
        return "-"
    return f"{re_:.3g} {'+' if im >= 0 else '-'} j{abs(im):.3g}"


def baseline_rows(summary: pd.DataFrame, baseline, paths: dict[str, str]) -> pd.DataFrame:
    """Each finished case's difference from its baseline case.

    Parameters
    ----------
    summary : DataFrame
        The summary table.
    baseline : str or dict
        A case id, or ``{parameter name: value}``: the baseline of a case has these values and the case's
        values of every other parameter (and the same frequency).
    paths : dict
        Parameter name -> summary column (its dotted path).

    Returns
    -------
    DataFrame
        ``case_id``, ``baseline_case_id``, ``delta_S21_dB``, ``delta_peak_SAR_<m>g_dB`` (10 log10 of the
        ratio), ``delta_sar_limited_accepted_dB``, ``delta_figure_of_merit_dB``; cases without a baseline
        are left out, the baseline cases themselves too.
    """
    ok = finished(summary)
    sar_cols = [c for c in summary.columns if c.startswith("peak_SAR_") and c.endswith("_W_per_kg_per_W")]
    rows = []
    if isinstance(baseline, str):
        match = ok[ok["case_id"] == baseline]
        pairs = [(r, match.iloc[0]) for _, r in ok.iterrows() if not match.empty and r["case_id"] != baseline]
    else:
        cols = {paths.get(n, n): v for n, v in baseline.items()}
        keys = [c for c in summary.columns if c in set(paths.values()) | {"frequency_MHz"}]
        pairs = []
        for _, r in ok.iterrows():
            if all(str(r.get(c)) == str(v) or _num_eq(r.get(c), v) for c, v in cols.items()):
                continue  # a baseline case itself
            m = ok
            for c in keys:
                want = cols.get(c, r.get(c))
                m = m[m[c].map(lambda x, w=want: str(x) == str(w) or _num_eq(x, w))]
            if len(m):
                pairs.append((r, m.iloc[0]))
    for r, b in pairs:
        d = {"case_id": r["case_id"], "label": r["label"], "baseline_case_id": b["case_id"],
             "delta_S21_dB": _num(r.get("S21_dB")) - _num(b.get("S21_dB"))}
        for c in sar_cols:
            d[f"delta_{c[:-len('_W_per_kg_per_W')]}_dB"] = _db_ratio(r.get(c), b.get(c))
        d["delta_sar_limited_accepted_dB"] = _num(r.get("sar_limited_accepted_dBm")) - _num(b.get("sar_limited_accepted_dBm"))
        d["delta_figure_of_merit_dB"] = _num(r.get("figure_of_merit_value")) - _num(b.get("figure_of_merit_value"))
        rows.append(d)
    return pd.DataFrame(rows)


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _num_eq(a, b) -> bool:
    x, y = _num(a), _num(b)
    return x == x and y == y and x == y


def _db_ratio(a, b) -> float:
    x, y = _num(a), _num(b)
    return 10 * math.log10(x / y) if x > 0 and y > 0 else math.nan


def _limits_section(settings: dict, summary: pd.DataFrame) -> list[str]:
    lims = settings.get("limits") or []
    ok = finished(summary)
    lines = ["## Exposure limits applied", ""]
    if settings.get("limits_are_defaults"):
        lines += ["The study sets no limits of its own (`sar.limits`): bodysweep's default limits were applied. "
                  "Check that they are the ones that apply to your device, body region and jurisdiction.", ""]
    lines += ["| averaging mass | limit | source | decided in |", "|---|---|---|---|"]
    decided = ok["deciding_limit"].value_counts() if "deciding_limit" in ok else pd.Series(dtype=int)
    for lim in lims:
        tag = f"{float(lim['mass_g']):g}g_{float(lim['limit_W_per_kg']):g}W_per_kg"
        lines.append(f"| {float(lim['mass_g']):g} g | {float(lim['limit_W_per_kg']):g} W/kg | {lim['source']} | "
                     f"{int(decided.get(tag, 0))} of {len(ok)} finished cases |")
    lines += ["", "The most restrictive limit of each case decides its SAR-limited accepted power (column "
              "`deciding_limit`).", ""]
    return lines


def _best_section(best, settings: dict, summary: pd.DataFrame) -> list[str]:
    basis = str(best.get("figure_of_merit") or "") or rank_column(finished(summary))
    lines = ["## Best case", "",
             f"Ranked by `{basis}` (study key `figure_of_merit: {settings.get('figure_of_merit', 'implant_power')}`).", "",
             f"`{best['case_id']}` ({best['label']}):", ""]
    items = [f"S11 {_fmt(best.get('S11_dB'), '.2f')} dB, input impedance at port 1 {_zin(best)} ohm, "
             f"mismatch loss {_fmt(best.get('mismatch_loss_port1_dB'), '.2f')} dB",
             f"SAR-limited accepted power {_fmt(best.get('sar_limited_accepted_dBm'), '.1f')} dBm "
             f"(decided by `{best.get('deciding_limit') or '-'}`)"]
    if np.isfinite(_num(best.get("S21_dB"))):
        items += [f"S21 {_fmt(best.get('S21_dB'), '.2f')} dB",
                  "implant power at the SAR limit: "
                  f"{_fmt(best.get('implant_power_unmatched_dBm'), '.1f')} dBm without matching, "
                  f"{_fmt(best.get('implant_power_tx_matched_dBm'), '.1f')} dBm with port 1 matched, "
                  f"{_fmt(best.get('implant_power_both_matched_dBm'), '.1f')} dBm with both ends matched"]
        if np.isfinite(_num(best.get("Zin2_re_ohm"))):
            items.append(f"input impedance at port 2 {_zin(best, 2)} ohm, Rollett K {_fmt(best.get('rollett_K'))}")
    lines += [f"- {t}" for t in items] + [""]
    qs = [abs(_num(best.get(f"Zin{p}_im_ohm"))) / _num(best.get(f"Zin{p}_re_ohm")) for p in (1, 2)
          if _num(best.get(f"Zin{p}_re_ohm")) > 0]
    if qs and max(qs) > HIGH_Q:
        lines += [f"The matched figures assume lossless matching networks; here a port has |X|/R = {max(qs):.0f}. "
                  "Matching such a port takes a narrowband network whose component losses (and the tolerance of "
                  "its values) take away much of the gain over the unmatched figure.", ""]
    reason = str(best.get("port2_reason") or "")
    if reason and np.isfinite(_num(best.get("S21_dB"))):
        lines += [f"Both-ends matching, Z at port 2 and K are missing: {reason}. Exciting port 2 solves each case "
                  "a second time (about twice the solver time).", ""]
    elif reason:
        lines += [f"This is a SAR study: {reason}; the ranking is by the SAR-limited accepted power "
                  "(lower peak SAR ranks higher).", ""]
    return lines


def _cases_table(summary: pd.DataFrame, layout: StudyLayout) -> list[str]:
    head = ["case_id", "label", "status", "cells per wavelength", "cells", "runtime s", "S11 dB", "Z in 1 (ohm)",
            "S21 dB", "SAR-limited accepted dBm", "deciding limit", "implant dBm unmatched / port 1 matched / both"]
    lines = ["## Cases", "", "| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for _, r in summary.iterrows():
        sv = _case_solver(layout, str(r["case_id"]))
        powers = " / ".join(_fmt(r.get(f"implant_power_{v}_dBm"), ".1f") for v in ("unmatched", "tx_matched", "both_matched"))
        cells = r.get("cells")
        lines.append("| " + " | ".join([
            f"`{r['case_id']}`", str(r["label"]), str(r["status"]), _fmt(sv.get("cells_per_wavelength"), "g"),
            "-" if cells is None or cells is pd.NA or _num(cells) != _num(cells) else f"{int(cells):,}",
            _fmt(r.get("runtime_s"), ".0f"), _fmt(r.get("S11_dB"), ".2f"), _zin(r), _fmt(r.get("S21_dB"), ".2f"),
            _fmt(r.get("sar_limited_accepted_dBm"), ".1f"), str(r.get("deciding_limit") or "-"), powers]) + " |")
    return lines + [""]


def _warnings_section(summary: pd.DataFrame) -> list[str]:
    out = []
    for _, r in finished(summary).iterrows():
        w = [x for x in str(r.get("warnings") or "").split(WARNING_SEPARATOR) if x]
        if r.get("decay_reached") is False:
            w.append("the field energy did not decay to the end criterion: S-parameters and SAR may be inaccurate")
        out += [f"- `{r['case_id']}` ({r['label']}): {x}" for x in w]
    return (["## Warnings", ""] + out + [""]) if out else []


def _coarse(summary: pd.DataFrame, settings: dict, layout: StudyLayout) -> str | None:
    cpw = [_num(_case_solver(layout, str(c)).get("cells_per_wavelength")) for c in finished(summary)["case_id"]]
    cpw = [c for c in cpw if c == c]
    preset = settings.get("solver_preset", "standard")
    if preset == "draft" or (cpw and min(cpw) < STANDARD_CELLS_PER_WAVELENGTH):
        low = f", down to {min(cpw):g} cells per wavelength" if cpw else ""
        return COARSE_NOTE.format(what=f"This study uses the `{preset}` solver preset{low} (the `standard` preset "
                                        f"has {STANDARD_CELLS_PER_WAVELENGTH:g})")
    return None


def write_report(layout: StudyLayout) -> Path:
    """Plots and ``report.md`` of a study from its tables and case files; returns the path of ``report.md``."""
    summary = pd.read_parquet(layout.tables_dir / "summary.parquet")
    plan = read_plan(layout)
    settings = plan.get("settings") or {}
    pkeys: list[str] = list(dict.fromkeys(k for e in plan["cases"] for k in e.get("parameters", {})))
    pcols = [k if k == "frequency_MHz" else (f"param.{k}" if f"param.{k}" in summary.columns else k) for k in pkeys]
    rdir = layout.report_dir
    rdir.mkdir(parents=True, exist_ok=True)
    for stale in [*rdir.glob("s21_vs_*.png"), *rdir.glob("vs_*.png"), *rdir.glob("sar_section_*.png"),
                  rdir / "baseline_comparison.csv", rdir / "impedance.png"]:  # from an earlier report
        stale.unlink(missing_ok=True)
    swept = swept_parameters(summary, pcols)
    ok = finished(summary)
    failed = summary[~summary["status"].isin(FINISHED)]
    lines = [f"# Study `{plan['study']}`", ""]
    if settings.get("description"):
        lines += [str(settings["description"]).strip(), ""]
    lines += [f"> **Safety note.** {SAFETY_NOTE}", "",
              f"{len(summary)} cases: {len(ok)} finished, {len(failed)} failed or missing. "
              f"Tables: `../tables/summary.parquet`, `sparams.parquet`, `sar.parquet` (and `.csv`).", "",
              f"Mesh: solver preset `{settings.get('solver_preset', 'standard')}` with the study's overrides; cells "
              "per wavelength, cells and solver runtime of each case are in the Cases table.", "",
              "## How to read this", "", HOW_TO_READ, "", "## Cautions", "", ESTIMATE_NOTE, ""]
    coarse = _coarse(summary, settings, layout)
    if coarse:
        lines += [coarse, ""]
    lines += _limits_section(settings, summary)
    figures: list[tuple[str, Path]] = []
    best = best_case(summary)
    if best is not None:
        lines += _best_section(best, settings, summary)
    if not ok.empty:
        overview = plot_cases_overview(summary, rdir / "cases_overview.png")
        if overview:
            figures.append(("All finished cases, best first", overview))
        for p in swept:
            others = [o for o in swept if o != p]
            png = plot_vs_parameter(summary, p, others, rdir / f"vs_{_safe(p)}.png")
            if png:
                figures.append((f"Against `{p}`", png))
        sar_png = plot_peak_sar(summary, rdir / "peak_sar.png")
        if sar_png:
            figures.append(("Peak averaged SAR per watt accepted at port 1", sar_png))
        ranked = ok.assign(_r=pd.to_numeric(ok[rank_column(ok)], errors="coerce") if rank_column(ok) else 0.0)
        ranked = ranked.sort_values("_r", ascending=False).head(MAX_IMPEDANCE_CASES)
        ts = [(next(iter(sorted(layout.case_dir(str(c)).glob("sparams.s*p"))), Path("-")), str(lab))
              for c, lab in zip(ranked["case_id"], ranked["label"])]
        try:
            imp = plot_impedance(ts, rdir / "impedance.png")
            if imp:
                figures.append((f"Input impedance over the band, the {len(ts)} best cases", imp))
        except (OSError, ValueError) as exc:
            lines += [f"(no impedance plot: {exc})", ""]
    baseline = settings.get("baseline")
    base_pair = None
    if baseline and not ok.empty:
        delta = baseline_rows(summary, baseline, settings.get("parameter_paths") or {})
        lines += ["## Against the baseline", ""]
        what = f"case `{baseline}`" if isinstance(baseline, str) else ", ".join(f"`{k}` = {v}" for k, v in baseline.items())
        if delta.empty:
            lines += [f"No finished case has a finished baseline ({what}).", ""]
        else:
            with atomic_path(rdir / "baseline_comparison.csv") as tmp:
                delta.to_csv(tmp, index=False, float_format="%.10g")
            dcols = [c for c in delta.columns if c.startswith("delta_")]
            lines += [f"Baseline: {what}, other parameters and frequency equal. Differences case minus baseline, in dB "
                      "(SAR: 10 log10 of the ratio). Table: `baseline_comparison.csv`.", "",
                      "| case | baseline | " + " | ".join(dcols) + " |", "|---|---|" + "---|" * len(dcols)]
            for _, r in delta.iterrows():
                lines.append(f"| `{r['case_id']}` ({r['label']}) | `{r['baseline_case_id']}` | "
                             + " | ".join(_fmt(r[c], "+.2f") for c in dcols) + " |")
            lines.append("")
            # the best-ranked case that has a baseline, beside its baseline (the best case may be a baseline)
            col = rank_column(ok)
            rankv = dict(zip(ok["case_id"], pd.to_numeric(ok[col], errors="coerce"))) if col else {}
            top = max(delta["case_id"], key=lambda c: (rankv.get(c, -math.inf) == rankv.get(c, -math.inf),
                                                       rankv.get(c, -math.inf)))
            base_pair = (str(top), str(delta.loc[delta["case_id"] == top, "baseline_case_id"].iloc[0]))
    if best is not None:
        def lab(cid):
            return summary.loc[summary["case_id"] == cid, "label"].iloc[0]

        shown = [(str(best["case_id"]), "best case")]
        if base_pair:
            shown = [(base_pair[0], "case"), (base_pair[1], "its baseline")]
            if str(best["case_id"]) not in base_pair:
                shown.insert(0, (str(best["case_id"]), "best case"))
        rows = [(CaseFolder(layout.case_dir(c)).result_file, f"{what_} {c} ({lab(c)})") for c, what_ in shown]
        caption = f"SAR through the peak of the best case `{best['case_id']}`"
        if base_pair:
            caption = (f"SAR through the peak: `{base_pair[0]}` beside its baseline `{base_pair[1]}`"
                       + (f", after the best case `{best['case_id']}`" if len(shown) == 3 else ""))
        try:
            figures.append((caption, plot_sar_sections(rows, rdir / f"sar_section_{best['case_id']}.png")))
        except (OSError, KeyError, ValueError) as exc:
            lines += [f"(no SAR cross-section: {exc})", ""]
    lines += _warnings_section(summary)
    lines += ["## Plots", ""]
    for caption, png in figures:
        lines += [f"### {caption}", "", f"![{caption}]({png.name})", ""]
    lines += _cases_table(summary, layout)
    from .report_checks import budget_lines

    lines += budget_lines(layout, summary, None if best is None else str(best["case_id"]))
    if not failed.empty:
        lines += ["## Failed cases", ""]
        lines += [f"- `{r['case_id']}` ({r['label']}): {r['status']}: {r['reason']}" for _, r in failed.iterrows()]
    lines.append("")
    write_text(layout.report_file, "\n".join(lines))
    return layout.report_file
