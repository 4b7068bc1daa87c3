"""Real openEMS runs on coarse meshes (seconds each), through the adapter's own entry points."""
import json
import math
import multiprocessing as mp
from pathlib import Path

import h5py
import numpy as np
import pytest

from bodysweep.geometry.model import SceneModel
from bodysweep.workflow.solver import ADAPTER_VERSION
from bodysweep.workflow.finish import finish_case
from bodysweep.workflow.solver.run import solve_excitation

from solver_scenes import PEC, dipole, lossy_slab_scene, poynting_flux_run, uniform_plan, write_case

pytestmark = pytest.mark.solver

C0 = 299_792_458.0  # m/s, SI definition
F0 = 2.45e9
SAR = {"masses_kg": [0.001, 0.01], "max_air_fraction": 0.1,
       "limits": [{"mass_kg": 0.01, "limit_W_per_kg": 2.0, "source": "test limit"}]}


def _slab_plan(model):
    # 5 mm air cells, 2.5 mm inside and around the phantom (about 8 cells per wavelength in the liquid)
    return uniform_plan(model, (-0.045, -0.045, -0.045), (0.045, 0.045, 0.04), 0.005,
                        fine=((-0.035, -0.035, -0.035), (0.035, 0.035, 0.005), 0.0025))


def _speed(st):
    return st["cells"] * st["timesteps"] / st["engine_runtime_s"] / 1e6


@pytest.fixture(scope="module")
def two_port_case(tmp_path_factory):
    """External dipole above a lossy box with an implant dipole inside; both ports excited."""
    model = lossy_slab_scene(F0, with_implant=True)
    case = write_case(tmp_path_factory.mktemp("two_port") / "case_2p", model, _slab_plan(model), F0,
                      {"excite_ports": [1, 2], "n_band_points": 21, "threads": 1}, SAR)
    statuses = [solve_excitation(case, p) for p in (1, 2)]
    return case, statuses


def test_two_port_case_is_passive_and_reciprocal(two_port_case):
    case, statuses = two_port_case
    for st in statuses:
        assert st["status"] == "ok", st["reason"]
        assert st["decay_reached"] and st["timesteps"] < st["max_timesteps"]
        print(f"port {st['port']}: {st['cells']} cells, {st['timesteps']} timesteps, "
              f"{_speed(st):.1f} MC/s")
    m = finish_case(case)
    assert m["status"] in ("ok", "warning")
    S = np.array([[complex(*m["S11"]), complex(*m["S12"])], [complex(*m["S21"]), complex(*m["S22"])]])
    # a passive network: sum_i |S_ij|^2 <= 1 for every driven port (Pozar, Microwave Engineering,
    # 4th ed., sec. 4.3, lossless/lossy network power balance); 1 % slack for the DFT of a finite record
    assert np.all(np.sum(np.abs(S) ** 2, axis=0) <= 1.01)
    assert m["passivity_band_max"] <= 1.01
    # reciprocity of a network of linear isotropic media: S21 = S12 (Pozar sec. 4.3)
    assert abs(S[1, 0]) > 0.03  # the two dipoles do couple (otherwise the next check says nothing)
    assert abs(S[1, 0] - S[0, 1]) <= 0.02 * abs(S[1, 0])
    # the lossy liquid absorbs a part, not all, of the accepted power (energy conservation)
    assert 0.05 < m["absorbed_fraction_tissue"] < 1.0


def test_finish_writes_touchstone_result_and_metrics(two_port_case):
    import skrf

    case, _ = two_port_case
    m = finish_case(case)
    ntw = skrf.Network(str(case / "sparams.s2p"))  # read back through scikit-rf
    with h5py.File(case / "result.h5", "r") as h5:
        S_band = h5["sparams/S"][()]
        f_band = h5["sparams/f_Hz"][()]
        avg10 = h5["sar/avg_10g"][()]
        local = h5["sar/local"][()]
        rho = h5["sar/density_kg_m3"][()]
        assert json.loads(h5.attrs["versions"])["adapter"] == ADAPTER_VERSION
        assert "materials" in json.loads(h5.attrs["scene"])
    assert np.allclose(ntw.f, f_band) and np.allclose(ntw.s, S_band, atol=1e-9)
    # the finish step transforms the stored time signals at its own band points; at the solve's points it
    # gives the solve's stored phasors (the same discrete Fourier sum, sparams.dft)
    from bodysweep.workflow.finish import read_excitation

    stored = read_excitation(case / "excite_1")
    again = read_excitation(case / "excite_1", stored["f_band_Hz"])
    assert np.allclose(again["V_band"], stored["V_band"], rtol=1e-12, atol=0)
    assert np.allclose(again["I_band"], stored["I_band"], rtol=1e-12, atol=0)
    assert f_band[0] == pytest.approx(F0 * 0.85) and f_band[-1] == pytest.approx(F0 * 1.15)
    # the averaged SAR can never exceed the largest local SAR, and the 10 g average is positive in tissue
    # (a mass average of non-negative values lies between their min and max: analytic)
    assert np.nanmax(avg10) <= np.max(local[rho > 0]) * (1 + 1e-6)
    peaks = {r["mass_kg"]: r["peak_W_per_kg_per_W"] for r in m["sar"]}
    grid10 = m["sar"][1]["grid_peak_W_per_kg_per_W"]
    assert grid10 == pytest.approx(np.nanmax(avg10), rel=1e-5)  # the voxel-grid procedure's volume
    assert peaks[0.01] == max(grid10, m["sar"][1]["flush_peak_W_per_kg_per_W"] or 0.0)  # the larger is reported
    assert peaks[0.001] >= peaks[0.01] > 0
    assert peaks[0.01] <= np.max(local[rho > 0]) * (1 + 1e-6)  # a mass average of non-negative values (analytic)
    loc = m["sar"][1]["voxel_centre_m"]
    assert -0.03 <= loc[2] <= 0.0  # inside the phantom
    cube, side = m["sar"][1]["cube_centre_m"], m["sar"][1]["cube_side_m"]
    assert all(abs(c - v) <= side / 2 + 1e-9 for c, v in zip(cube, loc))  # the peak voxel touches its cube
    # link budget: the SAR-limited accepted power is limit / peak; port-1-matched implant power
    # = accepted |S21|^2 / (1 - |S11|^2) (operating power gain with a Z0 load, Pozar sec. 12.1)
    lim = m["limits"][0]
    assert lim["sar_limited_accepted_W"] == pytest.approx(2.0 / peaks[0.01])
    s11, s21 = complex(*m["S11"]), complex(*m["S21"])
    p = lim["implant_power_W"]
    assert p["tx_matched"] == pytest.approx(lim["sar_limited_accepted_W"] * abs(s21) ** 2 / (1 - abs(s11) ** 2))
    # maximum available gain >= operating gain with a Z0 load >= transducer gain with Z0 at both ends
    assert p["unmatched"] <= p["tx_matched"] <= p["both_matched"] * (1 + 1e-9)
    assert m["max_available_gain"] >= abs(s21) ** 2 * (1 - 1e-9)
    assert m["decay_reached"] is True and m["cells"] > 0 and m["timesteps"] > 0


def _resonance(f, Z):
    """Frequency where the reactance crosses zero from below (linear interpolation) and R there."""
    X = Z.imag
    k = np.nonzero((X[:-1] < 0) & (X[1:] >= 0))[0][0]
    t = -X[k] / (X[k + 1] - X[k])
    return f[k] + t * (f[k + 1] - f[k]), Z.real[k] + t * (Z.real[k + 1] - Z.real[k])


def test_thin_wire_dipole_resonates_near_half_a_wavelength(tmp_path):
    L = 0.058
    arms, port = dipole("dip", 1, (0.0, 0.0, 0.0), L, 0.002)
    model = SceneModel(F0, (PEC,), arms, (port,))
    plan = uniform_plan(model, (-0.04, -0.04, -0.05), (0.04, 0.04, 0.05), 0.004)
    case = write_case(tmp_path / "dipole", model, plan, F0,
                      {"band_fraction": 1.0, "n_band_points": 101, "end_criterion_dB": -40.0, "threads": 1})
    st = solve_excitation(case, 1)
    assert st["status"] == "ok", st["reason"]
    print(f"dipole: {st['cells']} cells, {st['timesteps']} timesteps, {_speed(st):.1f} MC/s")
    with h5py.File(case / "excite_1" / "signals.h5", "r") as h5:
        f = h5["f_band_Hz"][()]
        Z = h5["port1/V_band"][()] / h5["port1/I_band"][()]
    f_res, R_res = _resonance(f, Z)
    # a thin dipole resonates a little below L = lambda/2 with R about 73 ohm at L = lambda/2 (Balanis,
    # Antenna Theory, 3rd ed., sec. 4.6: Z = 73 + j42.5 ohm); the resonant length shrinks with wire
    # thickness (Balanis sec. 8.4 / fig. 8.16). The thin wire on a 4 mm mesh acts like a thick wire and the
    # 2 mm feed gap adds capacitance: coarse bounds here (the validation suite refines the mesh).
    assert 0.40 <= L / (C0 / f_res) <= 0.50
    assert 50.0 <= R_res <= 90.0
    # at L = lambda/2 the dipole is inductive (X > 0), as in Balanis' 73 + j42.5 ohm
    Zh = Z[np.argmin(np.abs(f - C0 / (2 * L)))]
    assert Zh.imag > 0 and Zh.real > R_res
    s11 = (Z - 50) / (Z + 50)
    assert np.min(np.abs(s11)) < 0.35  # a resonant dipole near 50-73 ohm is fairly matched to 50 ohm


def test_accepted_power_is_radiated_plus_absorbed(tmp_path):
    """Poynting's theorem on a closed box in air around a dipole over a lossy liquid."""
    model = lossy_slab_scene(F0)
    with mp.get_context("spawn").Pool(1) as pool:
        r = pool.apply(poynting_flux_run, (model, _slab_plan(model), F0, (-0.04, -0.04, -0.04),
                                           (0.04, 0.04, 0.035), str(tmp_path / "sim")))
    balance = (r["radiated_W"] + r["absorbed_W"]) / r["accepted_W"]
    print(f"energy balance (radiated + absorbed) / accepted = {balance:.3f}, absorbed share "
          f"{r['absorbed_W'] / r['accepted_W']:.3f}")
    # Poynting's theorem (Pozar, Microwave Engineering, 4th ed., sec. 1.6): P_accepted = P_radiated (flux
    # through a closed surface) + P_absorbed (0.5 sigma |E|^2 dV inside it). The absorbed part uses the raw
    # SAR dump's cell-centred field; averaging the Yee edges to cell centres underestimates |E|^2 where the
    # field varies over a cell (here ~8 cells per wavelength in the liquid); the flux through the 5 mm-meshed
    # surface was 2.5 % low in a loss-free check. A mesh effect: scripts/energy_balance_refinement.py gives for
    # this scene 0.696 / 0.933 / 0.971 / 0.984 at 5 / 2.5 / 1.67 / 1.25 mm cells in the liquid, a gap
    # shrinking as h^2 (Richardson extrapolation of the last two: 1.001). Measured 0.932-0.933 here (2.5 mm); tolerance
    # 0.90 ... 1.02: the expected second-order gap of this mesh plus margin, a balance above 1 is not physical.
    assert 0.90 <= balance <= 1.02
    assert r["absorbed_W"] > 0.1 * r["accepted_W"]


def _read_status(case, port=1):
    return json.loads((case / f"excite_{port}" / "status.json").read_text())


def test_broken_cases_give_failure_records_not_exceptions(tmp_path):
    arms, port = dipole("dip", 1, (0.0, 0.0, 0.0), 0.05, 0.002)
    model = SceneModel(F0, (PEC,), arms, (port,))
    plan = uniform_plan(model, (-0.03, -0.03, -0.04), (0.03, 0.03, 0.04), 0.005)

    # a NaN material property in the built scene
    nan_case = write_case(tmp_path / "nan_material", model, plan, F0, {"threads": 1})
    d = json.loads((nan_case / "scene.json").read_text())
    d["materials"].append({"name": "bad", "kind": "dielectric", "eps_r": float("nan"), "sigma_S_per_m": 0.0,
                           "density_kg_m3": 0.0, "is_tissue": False})
    d["primitives"].append({"kind": "box", "name": "blob", "material": "bad", "start": [0.01, 0.01, 0.01],
                            "stop": [0.02, 0.02, 0.02], "priority": 10})
    (nan_case / "scene.json").write_text(json.dumps(d))
    st = solve_excitation(nan_case, 1)
    assert st["status"] == "failed" and "eps_r" in st["reason"]

    # a mesh the builder refuses (lines not increasing)
    bad_mesh = write_case(tmp_path / "bad_mesh", model, plan, F0, {"threads": 1})
    p = json.loads((bad_mesh / "mesh_plan.json").read_text())
    p["lines_y"] = p["lines_y"][::-1]
    (bad_mesh / "mesh_plan.json").write_text(json.dumps(p))
    st = solve_excitation(bad_mesh, 1)
    assert st["status"] == "failed" and "lines_y" in st["reason"]

    # a port that is not in the scene
    st = solve_excitation(bad_mesh, 2)
    assert st["status"] == "failed" and "port 2" in st["reason"]

    # energy that cannot decay far enough within the timestep cap
    slow = write_case(tmp_path / "no_decay", model, plan, F0,
                      {"threads": 1, "max_timesteps": 1000, "end_criterion_dB": -120.0})
    st = solve_excitation(slow, 1)
    assert st["status"] == "failed" and "decay" in st["reason"] and st["timesteps"] == 1000
    assert (slow / "excite_1" / "signals.h5").exists()  # the signals are kept for inspection
    assert (slow / "excite_1" / "solver.log").read_text().count("Max. number of timesteps was reached") == 1

    # finishing a case whose excitation failed gives a failure record with the reason
    m = finish_case(slow)
    assert m["status"] == "failed" and "decay" in m["reason"]
    assert json.loads((slow / "metrics.json").read_text())["status"] == "failed"
    for c in (nan_case, bad_mesh, slow):  # the scratch folder of the engine is gone
        assert not (c / "excite_1" / ".engine_run").exists()


def test_slurm_job_id_is_recorded(tmp_path, monkeypatch):
    arms, port = dipole("dip", 1, (0.0, 0.0, 0.0), 0.05, 0.002)
    model = SceneModel(F0, (PEC,), arms, (port,))
    plan = uniform_plan(model, (-0.03, -0.03, -0.04), (0.03, 0.03, 0.04), 0.005)
    case = write_case(tmp_path / "slurm", model, plan, F0, {"threads": 1, "end_criterion_dB": -30.0})
    monkeypatch.setenv("SLURM_JOB_ID", "4242")
    st = solve_excitation(case, 1)
    assert st["slurm_job_id"] == "4242" and _read_status(case)["slurm_job_id"] == "4242"
    assert st["status"] == "ok", st["reason"]
    # one-port scene: an s1p file and no coupling figures
    m = finish_case(case)
    assert m["status"] in ("ok", "warning") and m["S21"] is None and m["max_available_gain"] is None
    assert m["ports"]["port2_reason"] == "no implant port (one-port scene)"
    assert (case / "sparams.s1p").exists()
    assert m["sar"] == [] or all(r["peak_W_per_kg_per_W"] is None for r in m["sar"])


def _read_touchstone_strictly(path):
    """scikit-rf reading a Touchstone file with every warning an error; returns the Network."""
    import warnings

    import skrf

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ntw = skrf.Network(str(path))
    assert np.all(np.isfinite(ntw.s)), f"{path.name} holds NaN or inf"
    assert "nan" not in path.read_text().lower()
    return ntw


def test_port_figures_match_scikit_rf_on_the_case_touchstone(two_port_case):
    case, _ = two_port_case
    m = finish_case(case)
    ntw = _read_touchstone_strictly(case / "sparams.s2p")  # the case's own Touchstone file
    k = int(np.argmin(np.abs(ntw.f - m["frequency_Hz"])))
    assert ntw.f[k] == pytest.approx(m["frequency_Hz"], rel=1e-9)
    # input impedance of each port with the other on Z0: scikit-rf one-port z of S11 / S22
    for p, sub in ((1, ntw.s11), (2, ntw.s22)):
        z = complex(*m["ports"][f"Zin{p}_ohm"])
        assert z == pytest.approx(complex(sub.z[k, 0, 0]), rel=1e-6)
        # mismatch loss -10 log10(1 - |S|^2) (Pozar sec. 2.3) from scikit-rf's |S|
        assert m["ports"][f"mismatch_loss_port{p}_dB"] == pytest.approx(-10 * np.log10(1 - sub.s_mag[k, 0, 0] ** 2),
                                                                         rel=1e-6)
    # Rollett K and maximum available gain: scikit-rf Network.stability and Network.max_gain
    assert m["ports"]["rollett_K"] == pytest.approx(ntw.stability[k], rel=1e-6)
    assert m["max_available_gain"] == pytest.approx(ntw.max_gain[k], rel=1e-6)
    lim = m["limits"][0]
    p_lim = lim["sar_limited_accepted_W"]
    p = lim["implant_power_W"]
    assert p["both_matched"] == pytest.approx(p_lim * ntw.max_gain[k], rel=1e-6)
    assert p["unmatched"] == pytest.approx(p_lim * ntw.s_mag[k, 1, 0] ** 2, rel=1e-6)  # transducer gain, Z0 ends
    assert p["tx_matched"] == pytest.approx(p_lim * ntw.s_mag[k, 1, 0] ** 2 / (1 - ntw.s_mag[k, 0, 0] ** 2), rel=1e-6)
    assert m["ports"]["port2_reason"] is None
    # same file mode as the other outputs (the process umask, not a temporary file's 0600)
    assert (case / "sparams.s2p").stat().st_mode & 0o777 == (case / "metrics.json").stat().st_mode & 0o777


def test_only_port1_excited_gives_a_one_port_touchstone(two_port_case, tmp_path):
    import shutil

    src, _ = two_port_case
    case = tmp_path / "port1_only"
    shutil.copytree(src, case, ignore=shutil.ignore_patterns("excite_2", "sparams.*", "metrics.json", "result.h5"))
    cj = json.loads((case / "case.json").read_text())
    cj["solver"]["excite_ports"] = [1]
    (case / "case.json").write_text(json.dumps(cj))
    m = finish_case(case)
    assert m["status"] in ("ok", "warning")
    assert not (case / "sparams.s2p").exists()
    ntw = _read_touchstone_strictly(case / "sparams.s1p")
    assert ntw.nports == 1 and "only port 1 was excited" in ntw.comments
    assert complex(*m["S11"]) == pytest.approx(complex(ntw.s[int(np.argmin(np.abs(ntw.f - F0))), 0, 0]), rel=1e-6)
    # S21 is computed, S22 is not: port-1 figures present, both-ends matching missing with its reason
    assert m["S21"] is not None and m["S22"] is None and m["ports"]["rollett_K"] is None
    assert "excite: [1, 2]" in m["ports"]["port2_reason"]
    lim = m["limits"][0]
    assert lim["implant_power_W"]["both_matched"] is None and lim["implant_power_W"]["tx_matched"] > 0
    assert "port 2" in lim["implant_power_reason"]["both_matched"]


def test_strongly_coupled_case_is_flagged_not_silently_ok(two_port_case, monkeypatch):
    from bodysweep.workflow.post import portfigures

    case, _ = two_port_case
    m = finish_case(case)
    assert m["status"] == ("warning" if m["max_available_gain"] > portfigures.STRONG_COUPLING else "ok")
    monkeypatch.setattr(portfigures, "STRONG_COUPLING", 0.0)  # every coupled link is now "strong"
    m = finish_case(case)
    assert m["status"] == "warning" and any("strong coupling" in w for w in m["warnings"])
    monkeypatch.undo()
    finish_case(case)  # leave the fixture's files as the other tests expect them
