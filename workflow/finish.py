"""Finish a case: S-matrix, SAR, link budget and the case's output files (solver-neutral post-processing).

:func:`finish_case` reads what the excitations left in ``excite_<p>/`` of the case's solve folder (through
:mod:`bodysweep.workflow.casefolder`; any backend writes them as :mod:`bodysweep.workflow.solver.backend`
says) and writes, in the case folder,

``sparams.s2p`` (``.s1p`` for a one-port scene or when only port 1 was excited)
    the S-matrix over the band, only the entries that were computed (Touchstone, through :func:`bodysweep.workflow.post.sparams.write_touchstone`);
``result.h5``
    local SAR and the mass-averaged SAR volumes per watt accepted at port 1 (compressed), the SAR
    grid (cell edges), the S-matrix over the band; attributes: case id, scene, settings, versions;
``metrics.json``
    the small summary the collectors read (status, S-parameters at the case frequency as [re, im],
    passivity, reciprocity, peak SAR per mass: the larger of the voxel-grid procedure's peak and the best
    cube flush with a tissue surface, both with cube centre and peak voxel; limits with allowed input power and
    implant power per matching variant, port impedances, mismatch losses, Rollett K, maximum available
    gain, warnings, runtime, cells, timesteps, decay, the solver's own
    averaged SAR beside ours when it was run).

All SAR figures are normalised to 1 W *accepted* at port 1 (``0.5 Re{V conj(I)}`` at the case
frequency, current into the antenna), so they do not depend on the source amplitude or on the
match of the external antenna.
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from .casefolder import CaseFolder, Excitation, SolveFolder
from .post import sparams

__all__ = ["finish_case", "read_excitation", "smatrix_from_excitations", "sar_per_watt", "link_budget_rows"]


def _c2pair(z) -> list | None:
    z = complex(z)
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        return None
    return [z.real, z.imag]


def _finite_or_none(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def read_excitation(exc: Excitation | str | Path, f_band_Hz=None) -> dict:
    """Port phasors of one excitation from its port signals (:meth:`.casefolder.Excitation.read_signals`).

    ``exc``: the excitation folder (an :class:`~.casefolder.Excitation` or the path of ``excite_<p>/``).

    With ``f_band_Hz`` (nf,) the band phasors are transformed afresh from the stored port time signals
    at those frequencies (the finish step's own band points); otherwise the stored band is used.

    Returns
    -------
    dict
        ``f_band_Hz`` (nf,), ``frequency_Hz``, ``excited_port`` (int), ``timesteps``, ``decay_reached`` and,
        with ports ordered by number, ``ports`` (n_ports,), ``z0_ohm`` (n_ports,), ``V_band``,
        ``I_band`` (n_ports, nf), ``V_f0``, ``I_f0`` (n_ports,).
    """
    if not isinstance(exc, Excitation):
        d = Path(exc)
        exc = Excitation(d, int(d.name.rpartition("_")[2]) if d.name.rpartition("_")[2].isdigit() else 0)
    sig = exc.read_signals()
    g = sig.pop("ports")
    out = {**sig, "ports": np.array([x["number"] for x in g])}
    out["z0_ohm"] = np.array([x["impedance_ohm"] for x in g])
    if f_band_Hz is None:
        out["V_band"] = np.array([x["V_band"] for x in g])
        out["I_band"] = np.array([x["I_band"] for x in g])
    else:
        from .solver.ports import signals2phasors

        pairs = [signals2phasors(x["t_voltage_s"], x["voltage_V"], x["t_current_s"], x["current_A"], f_band_Hz)
                 for x in g]
        out["f_band_Hz"] = np.asarray(f_band_Hz, float)
        out["V_band"] = np.array([v for v, _ in pairs])
        out["I_band"] = np.array([i for _, i in pairs])
    out["V_f0"] = np.array([x["V_f0"] for x in g])
    out["I_f0"] = np.array([x["I_f0"] for x in g])
    return out


def smatrix_from_excitations(excitations: list[dict], key: str = "band") -> np.ndarray:
    """S-matrix from one or more excitations of the same scene.

    Parameters
    ----------
    excitations : list of dict
        From :func:`read_excitation`, same ports in each.
    key : {"band", "f0"}
        The band (``V_band``, ``I_band``) or the case frequency (``V_f0``, ``I_f0``).

    Returns
    -------
    S : numpy.ndarray, complex, shape (nf, n_ports, n_ports)
        ``nf = 1`` for ``"f0"``. Columns of ports never excited are NaN.
    """
    ports = excitations[0]["ports"]
    for e in excitations:
        if not np.array_equal(e["ports"], ports):
            raise ValueError(f"excitations disagree on the ports: {ports.tolist()} vs {e['ports'].tolist()}")
    if key == "band":
        V = np.stack([e["V_band"] for e in excitations])
        I = np.stack([e["I_band"] for e in excitations])
    else:
        V = np.stack([e["V_f0"][:, None] for e in excitations])
        I = np.stack([e["I_f0"][:, None] for e in excitations])
    z0 = excitations[0]["z0_ohm"][None, :, None]
    a, b = sparams.power_waves(V, I, z0)  # (n_exc, n_ports, nf)
    index = {int(p): i for i, p in enumerate(ports)}
    return sparams.smatrix_from_waves(a, b, exc_ports=[index[e["excited_port"]] for e in excitations])


def read_raw_fields(exc: Excitation | str | Path) -> dict:
    """The raw SAR arrays of port 1's excitation (:meth:`.casefolder.Excitation.read_fields`); ``exc`` is
    the excitation or the path of its field file."""
    if not isinstance(exc, Excitation):
        exc = Excitation(Path(exc).parent, 1)
    return exc.read_fields()


def sar_per_watt(raw: dict, p_accepted_W: float) -> dict:
    """Local SAR and absorbed power of a raw dump, normalised to 1 W accepted.

    Parameters
    ----------
    raw : dict
        ``E_V_per_m`` (3, nx, ny, nz), ``sigma_S_per_m``, ``density_kg_m3``, ``volume_m3`` (nx, ny, nz).
    p_accepted_W : float
        Power accepted at the driven port for the same excitation (same spectral scaling).

    Returns
    -------
    dict
        ``local`` (nx, ny, nz) W/kg per W; ``absorbed_tissue_W_per_W`` (tissue cells, ``rho > 0``) and
        ``absorbed_all_W_per_W`` (every lossy cell: ``sum 0.5 sigma |E|^2 dV``), both per W accepted.
    """
    from bodysweep.workflow.post.sar import local_sar

    if not (p_accepted_W > 0 and math.isfinite(p_accepted_W)):
        raise ValueError(f"accepted power at port 1 must be > 0 W to normalise SAR, got {p_accepted_W} W")
    E = raw["E_V_per_m"]
    sigma, rho, dv = raw["sigma_S_per_m"], raw["density_kg_m3"], raw["volume_m3"]
    e2 = np.sum(np.abs(E) ** 2, axis=0)
    loss = 0.5 * sigma * e2 * dv  # W per cell, (nx, ny, nz)
    local = local_sar(E, sigma, rho) / p_accepted_W
    return {"local": local, "absorbed_tissue_W_per_W": float(np.sum(loss[rho > 0]) / p_accepted_W),
            "absorbed_all_W_per_W": float(np.sum(loss) / p_accepted_W)}


def link_budget_rows(limits: list[dict], peaks: dict[float, float], S0: np.ndarray) -> list[dict]:
    """SAR-limited accepted power per exposure limit and the implant power per matching variant.

    The numbers come from :func:`bodysweep.workflow.post.linkbudget.max_input_power` and
    :func:`bodysweep.workflow.post.portfigures.implant_power_variants` (the one implementation); a value
    they refuse (no peak, one-port scene, port 2 not excited) is ``None`` with its reason.

    Parameters
    ----------
    limits : list of dict
        ``mass_kg``, ``limit_W_per_kg``, ``source``.
    peaks : dict of float to float
        Peak averaged SAR per W accepted, by averaging mass (kg, rounded to 9 digits).
    S0 : numpy.ndarray, complex, shape (n, n)
        S-matrix at the case frequency.

    Returns
    -------
    list of dict
        Each limit plus ``sar_limited_accepted_W`` (accepted at port 1, = limit / peak),
        ``implant_power_W`` (``{variant: W or None}``, variants ``unmatched``, ``tx_matched``,
        ``both_matched``) and ``implant_power_reason`` (``{variant: why missing}``).
    """
    from bodysweep.workflow.post.linkbudget import max_input_power
    from bodysweep.workflow.post.portfigures import VARIANTS, implant_power_variants

    S0 = np.asarray(S0, dtype=complex)
    out = []
    for lim in limits:
        peak = peaks.get(round(float(lim["mass_kg"]), 9), np.nan)
        try:
            p_in = max_input_power(peak, lim["limit_W_per_kg"])
            why = None
        except ValueError:
            p_in, why = None, "no finite peak SAR for this averaging mass"
        powers = {v: None for v in VARIANTS}
        reasons = {v: why for v in VARIANTS} if why else {}
        if p_in is not None:
            if S0.shape[0] >= 2:
                r = implant_power_variants(p_in, S0[:2, :2])
                powers = {v: _finite_or_none(r[v]) if r[v] is not None else None for v in VARIANTS}
                reasons = r["reason"]
            else:
                reasons = {v: "no implant port (one-port scene)" for v in VARIANTS}
        out.append({"mass_kg": float(lim["mass_kg"]), "limit_W_per_kg": float(lim["limit_W_per_kg"]),
                    "source": str(lim.get("source", "")), "sar_limited_accepted_W": p_in,
                    "implant_power_W": powers, "implant_power_reason": reasons})
    return out


def _versions() -> dict:
    from bodysweep.geometry import BUILDER_VERSION

    from .post import POST_VERSION
    from .solver import ADAPTER_VERSION
    from .solver.engine import engine_versions

    return {"builder": BUILDER_VERSION, "adapter": ADAPTER_VERSION, "post": POST_VERSION, **engine_versions()}


def _solver_sar_comparison(exc: Excitation, ours: dict, p_acc: float) -> dict:  # port 1's excitation
    """The engine's own averaged SAR peaks (if it was run) beside ours, per W accepted at port 1.

    ``ours`` maps mass (kg) to our peak of the same voxel-grid procedure (W/kg per W), not the flush-cube
    peak. Per mass: the engine's peak and its location, ours and the relative difference ``(engine - ours) / ours``, or the reason it is missing.
    """
    st = exc.read_engine_sar_status()
    if st is None:
        return {"status": "not run"}
    out = {"status": st.get("status"), "reason": st.get("reason"), "method": "openEMS IEEE_62704",
           "note": "the engine's own average, recorded beside ours as information, not used", "by_mass": []}
    for m, our_peak in ours.items():
        entry = (st.get("by_mass") or {}).get(repr(float(m)), {"status": "failed", "reason": "not in the record"})
        row = {"mass_kg": float(m), "our_peak_W_per_kg_per_W": _finite_or_none(our_peak)}
        if entry.get("status") != "ok" or not exc.engine_sar_file.exists():
            row.update(status="failed", reason=entry.get("reason") or f"{exc.engine_sar_file.name} missing")
        else:
            data, centres = exc.read_engine_sar(entry["dataset"])
            i = np.unravel_index(int(np.nanargmax(data)), data.shape)
            peak = float(data[i]) / p_acc
            rel = (peak - our_peak) / our_peak if our_peak and math.isfinite(our_peak) else None
            row.update(status="ok", solver_peak_W_per_kg_per_W=peak,
                       solver_peak_location_m=[float(c[k]) for c, k in zip(centres, i)],
                       relative_difference=_finite_or_none(rel) if rel is not None else None)
        out["by_mass"].append(row)
    return out


def finish_case(case_dir, solve_dir=None) -> dict:
    """S-matrix, SAR and link budget of a case; writes ``sparams.s2p``, ``result.h5``, ``metrics.json``.

    Parameters
    ----------
    case_dir : path-like
        Case folder with ``case.json`` (its post-processing settings: SAR masses, limits,
        ``max_air_fraction``, ``solver.n_band_points``).
    solve_dir : path-like, optional
        Folder with ``scene.json`` and the ``excite_<p>/`` folders of the excitations (the case's solve
        in the store); default ``case_dir``.

    Returns
    -------
    dict
        What was written to ``metrics.json``. A failed or missing excitation gives
        ``{"status": "failed", "reason": ...}`` (also written).
    """
    from .post.sar_average import average_sar
    from .post.sar_flush import flush_cube_peak, reported_peak
    from .meshing.settings import settings_from_dict

    folder = CaseFolder(case_dir)
    solve = SolveFolder(solve_dir if solve_dir is not None else folder.dir)
    case = folder.read_case_strict()
    f0 = float(case["frequency_Hz"])
    settings = settings_from_dict(case.get("solver") or {})
    sar_cfg = case.get("sar") or {}
    base = {"case_id": case.get("case_id"), "frequency_Hz": f0}

    exc_ports = list(settings.excite_ports)
    statuses = {}
    for p in exc_ports:
        x = solve.excitation(p)
        # removed a moment ago by another study's rerun of the solve job: the kept copy
        statuses[p] = x.read_status() or x.read_outcome() or {"status": "failed", "reason": f"{x.label} missing"}
    runtime = sum(float(s.get("runtime_s") or 0.0) for s in statuses.values())
    bad = [p for p, s in statuses.items() if s.get("status") != "ok"]
    if bad:
        p = bad[0]
        out = {**base, "status": "failed", "reason": f"excitation of port {p}: {statuses[p].get('reason')}",
               "runtime_s": runtime}
        folder.write_metrics(out)
        return out

    exc = [read_excitation(solve.excitation(p), settings.band_frequencies_Hz(f0)) for p in exc_ports]
    f_band = exc[0]["f_band_Hz"]
    S_band = smatrix_from_excitations(exc, "band")
    S0 = smatrix_from_excitations(exc, "f0")[0]
    n_ports = S0.shape[0]
    z0 = float(exc[0]["z0_ohm"][0])
    pas = sparams.passivity(S0[None])[0]
    rec = sparams.reciprocity(S0[None])[0] if set(exc_ports) >= set(int(p) for p in exc[0]["ports"]) else np.nan
    pas_band = sparams.passivity(S_band)
    all_ports = set(exc_ports) >= set(int(p) for p in exc[0]["ports"])
    comments = [f"bodysweep case {case.get('case_id')}", f"current into each port, reference impedance {z0:g} ohm"]
    if all_ports or n_ports == 1:
        ts_S = S_band
    else:  # only what was computed: the reflection at port 1 (S21 over the band stays in result.h5)
        ts_S = S_band[:, :1, :1]
        comments.append(f"only port 1 was excited: one-port file of S11; S21 over the band is in {folder.result_file.name} "
                        "(sparams/S), S12 and S22 were not computed")
    keep = np.all(np.isfinite(ts_S.reshape(len(f_band), -1)), axis=1)
    band_warnings = []
    if not keep.all():  # an ill-conditioned excitation matrix leaves a band point undetermined
        band_warnings.append(f"{int((~keep).sum())} of {len(f_band)} band points have no S-matrix "
                             "(ill-conditioned excitations) and are left out of the Touchstone file")
        comments.append(band_warnings[-1])
    if not keep.any():
        out = {**base, "status": "failed", "reason": "no band point has a finite S-matrix", "runtime_s": runtime}
        folder.write_metrics(out)
        return out
    written = sparams.write_touchstone(folder.touchstone_target(), f_band[keep], ts_S[keep], z0, comments=comments)
    folder.remove_other_touchstones(written)  # a file of another port count from an earlier run

    def s(i, j):
        return _c2pair(S0[i, j]) if i < n_ports and j < n_ports else None

    metrics = {**base, "status": "ok", "reason": None, "S11": s(0, 0), "S21": s(1, 0), "S12": s(0, 1),
               "S22": s(1, 1), "passivity": _finite_or_none(pas), "passivity_band_max": _finite_or_none(np.nanmax(pas_band)),
               "reciprocity": _finite_or_none(rec)}

    # SAR per watt accepted at port 1
    e1 = exc[exc_ports.index(1)] if 1 in exc_ports else None
    sar_rows, peaks, volumes = [], {}, {}
    if e1 is not None:
        i1 = int(np.nonzero(e1["ports"] == 1)[0][0])
        p_acc = float(sparams.accepted_power(e1["V_f0"][i1], e1["I_f0"][i1]))
        raw = solve.excitation(1).read_fields()
        sp = sar_per_watt(raw, p_acc)
        edges = (raw["x_edges_m"], raw["y_edges_m"], raw["z_edges_m"])
        volumes["local"] = sp["local"]
        grid_peaks = {}
        for m in sar_cfg.get("masses_kg", [0.001, 0.01]):
            m = float(m)
            air = float(sar_cfg.get("max_air_fraction", 0.1))
            r = average_sar(sp["local"], raw["density_kg_m3"], *edges, m, max_air_fraction=air)
            flush = flush_cube_peak(sp["local"], raw["density_kg_m3"], *edges, m, max_air_fraction=air)
            rep = reported_peak(r, flush)  # the larger of the voxel-grid peak and the best flush cube
            peaks[round(m, 9)] = rep["peak_W_per_kg"] if rep["peak_W_per_kg"] is not None else float("nan")
            grid_peaks[m] = float(r.peak)
            volumes[f"avg_{m * 1e3:g}g"] = r.avg
            sar_rows.append({"mass_kg": m, **{k.replace("_W_per_kg", "_W_per_kg_per_W"): v for k, v in rep.items()}})
        metrics["accepted_power_port1_W"] = p_acc
        metrics["absorbed_fraction_tissue"] = sp["absorbed_tissue_W_per_W"]
        metrics["absorbed_fraction_all"] = sp["absorbed_all_W_per_W"]
        metrics["solver_sar"] = _solver_sar_comparison(solve.excitation(1), grid_peaks, p_acc)
    metrics["sar"] = sar_rows
    metrics["limits"] = link_budget_rows(sar_cfg.get("limits", []), peaks, S0)
    from .post.portfigures import STRONG_COUPLING, port_figures

    metrics["ports"] = port_figures(S0, z0, exc_ports)
    mag = None
    if n_ports >= 2 and np.all(np.isfinite(S0[:2, :2])):
        from .post.twoport import max_available_gain

        g, is_mag = max_available_gain(S0[None, :2, :2], return_flag=True)
        mag = _finite_or_none(g[0]) if bool(is_mag[0]) else None
    metrics["max_available_gain"] = mag
    warnings = list(band_warnings)
    # only the both-ends-matched figure changes the implant load from the Z0 the SAR was computed with
    if mag is not None and mag > STRONG_COUPLING:
        warnings.append(f"strong coupling: with both ends matched the implant takes {mag:.0%} of the accepted "
                        "power, but SAR was computed with the implant port on the reference impedance, so the "
                        "both-ends-matched implant power is less certain")
    metrics["runtime_s"] = runtime
    metrics["cells"] = statuses[exc_ports[0]].get("cells")
    metrics["timesteps"] = int(sum(int(s.get("timesteps") or 0) for s in statuses.values()))
    metrics["decay_reached"] = all(bool(s.get("decay_reached")) for s in statuses.values())
    tails = [float(s["pulse_tail_dB"]) for s in statuses.values() if s.get("pulse_tail_dB") is not None]
    if tails:
        metrics["pulse_tail_dB"] = max(tails)
    from .post import flags

    metrics["energy_balance"] = flags.energy_balance(metrics.get("absorbed_fraction_all"), S0[0, 0],
                                                     S0[1, 0] if n_ports >= 2 else None)
    bounds = [(float(e[0]), float(e[-1])) for e in edges] if volumes else None
    warnings += flags.warning_lines(flags.case_warnings(metrics, case.get("scene") or {}, bounds))
    metrics["warnings"] = warnings
    if warnings:
        metrics["status"] = "warning"

    versions = _versions()
    scene_file = solve.scene_file
    attrs = {"case_id": str(case.get("case_id")), "solve_id": str(case.get("solve_id")),
             "scene": scene_file.read_text() if scene_file.exists() else json.dumps(case.get("scene")),
             "settings": json.dumps(settings.to_dict()), "versions": json.dumps(versions), "frequency_Hz": f0}
    sar = {"edges": edges, "density_kg_m3": raw["density_kg_m3"], "volumes": volumes} if volumes else None
    folder.write_result(attrs, f_band, S_band, sar)
    metrics["versions"] = versions
    folder.write_metrics(metrics)
    return metrics
