"""Pieces of the openEMS adapter that need no engine run: phasors, log facts, dump grids, CSX building."""
import math

import numpy as np
import pytest

from bodysweep.geometry.model import SceneModel
from bodysweep.geometry.primitives import Box, Cylinder, Material, Polygon, Port, Wire
from bodysweep.workflow.solver import build, engine, ports, run


def _gauss_cos(t, t0, tau, fc):
    return np.exp(-(((t - t0) / tau) ** 2)) * np.cos(2 * np.pi * fc * (t - t0))


def _gauss_cos_ft_one_sided(f, t0, tau, fc):
    # analytic: FT of exp(-(t/tau)^2) is tau sqrt(pi) exp(-(pi tau f)^2); the cosine splits it to +-fc;
    # the delay t0 multiplies by exp(-j 2 pi f t0); one-sided spectrum doubles it
    g = tau * math.sqrt(math.pi) * 0.5 * (np.exp(-((math.pi * tau * (f - fc)) ** 2)) + np.exp(-((math.pi * tau * (f + fc)) ** 2)))
    return 2 * g * np.exp(-2j * np.pi * f * t0)


def test_phasors_of_half_step_shifted_samples_match_the_analytic_transform():
    # a Gaussian-modulated 2.45 GHz carrier sampled like openEMS samples V (n dt) and I ((n + 1/2) dt)
    dt, n = 4e-12, 4000
    t0, tau, fc = 3e-9, 0.6e-9, 2.45e9
    tv = np.arange(n) * dt
    ti = (np.arange(n) + 0.5) * dt
    f = np.array([1.8e9, 2.45e9, 3.1e9])
    V, I = ports.signals2phasors(tv, _gauss_cos(tv, t0, tau, fc), ti, _gauss_cos(ti, t0, tau, fc), f)
    ref = _gauss_cos_ft_one_sided(f, t0, tau, fc)  # analytic
    assert np.allclose(V, ref, rtol=1e-6)
    assert np.allclose(I, ref, rtol=1e-6)
    # using n dt for the current record instead would rotate it by w dt / 2 (analytic)
    I_naive = ports.signals2phasors(tv, _gauss_cos(tv, t0, tau, fc), tv, _gauss_cos(ti, t0, tau, fc), f)[1]
    assert np.allclose(np.angle(I_naive / ref), 2 * np.pi * f * dt / 2, atol=1e-6)


def test_probe_reader_reads_the_engine_text_format(tmp_path):
    # header as written by openEMS 0.0.35 (comment lines start with %)
    p = tmp_path / "port1_ut"
    p.write_text("% time-domain voltage integration by openEMS v0.0.35\n% t/s\tvoltage\n0\t-0\n"
                 "3.5e-12\t1.5e-3\n7e-12\t-2e-3\n")
    t, v = ports.read_probe(p)
    assert np.allclose(t, [0, 3.5e-12, 7e-12]) and np.allclose(v, [0, 1.5e-3, -2e-3])
    (tmp_path / "bad").write_text("% nothing\n")
    with pytest.raises(ValueError, match="bad"):
        ports.read_probe(tmp_path / "bad")


LOG_OK = """FDTD simulation size: 35x35x35 --> 42875 FDTD cells
[@        4s] Timestep:         2120 || Speed:   22.7 MC/s (1.890e-03 s/TS) || Energy: ~2.05e-16 (- 6.70dB)
Time for 1650 iterations with 42875.00 cells : 4.01 sec
Speed: 17.63 MCells/s
"""
LOG_CAP = """FDTD simulation size: 35x35x35 --> 42875 FDTD cells
[@     4m32s] Timestep:        99740 || Speed:   15.9 MC/s (2.691e-03 s/TS) || Energy: ~1.80e-19 (-37.25dB)
RunFDTD: Warning: Max. number of timesteps was reached before the end-criteria of -50dB was reached...
Time for 100000 iterations with 42875.00 cells : 273.17 sec
Speed: 15.70 MCells/s
"""


def test_engine_log_facts():
    # lines copied from openEMS 0.0.35 console output of our own runs
    ok = engine.parse_engine_log(LOG_OK)
    assert ok["cells"] == 42875 and ok["timesteps"] == 1650 and ok["finished"]
    assert not ok["max_timesteps_reached"] and ok["speed_MC_per_s"] == pytest.approx(17.63)
    cap = engine.parse_engine_log(LOG_CAP)
    assert cap["max_timesteps_reached"] and cap["last_energy_dB"] == pytest.approx(-37.25)
    assert engine.parse_engine_log("Segmentation fault")["finished"] is False


def test_dump_centres_map_back_to_mesh_edges():
    lines = np.array([-0.02, -0.01, -0.004, 0.0, 0.003, 0.01])
    centres = np.float32(0.5 * (lines[2:5] + lines[1:4]))  # the engine stores float32 centres
    assert np.allclose(run.centres2edges(centres, lines), lines[1:5])  # analytic
    with pytest.raises(ValueError, match="consecutive"):
        run.centres2edges([-0.015, 0.0065], lines)


def test_pulse_covers_the_band():
    f0, fc = run.excitation_pulse(403e6, 0.3)
    # the -20 dB band of the openEMS Gaussian is f0 +- fc; it must contain f0 (1 +- 0.15) and exclude DC
    assert f0 - fc <= 403e6 * 0.85 and f0 + fc >= 403e6 * 1.15 and fc < f0


class _Plan:
    def __init__(self, lines, interior):
        self.lines_x = self.lines_y = self.lines_z = lines
        self.interior_bounds = interior


def _props(csx):
    return {p.GetName(): p for p in csx.GetAllProperties()}


def test_build_clips_tissue_to_the_interior_and_keeps_properties():
    tissue = Material("muscle_like", eps_r=50.0, sigma_S_per_m=1.2, density_kg_m3=1040.0, is_tissue=True)
    pec = Material("pec_wire", kind="pec")
    cu = Material("copper", kind="conductor", sigma_S_per_m=5.8e7)
    slab = Box("slab", tissue.name, (-0.2, -0.2, -0.2), (0.2, 0.2, 0.0))  # reaches into the absorber
    rod = Cylinder("rod", tissue.name, (0, 0, -0.3), (0, 0, -0.01), 0.005, priority=12)  # too
    wire = Wire("arm", pec.name, ((0, 0, 0.01), (0, 0, 0.03)))
    trace = Polygon("trace", cu.name, "z", 0.005, ((0, 0), (0.01, 0), (0.01, 0.002)))
    thin_cu = Wire("cu_wire", cu.name, ((0.01, 0, 0.01), (0.01, 0, 0.02)))
    model = SceneModel(1e9, (tissue, pec, cu), (slab, rod, wire, trace, thin_cu),
                       (Port("p", 1, (0, 0, -0.001), (0, 0, 0.001), "z"),))
    lines = np.linspace(-0.1, 0.1, 21)
    plan = _Plan(lines, ((-0.08, -0.08, -0.08), (0.08, 0.08, 0.08)))
    csx, rep = build.build_csx(model, plan, None)
    assert rep.cells == 20 ** 3
    assert "slab" in rep.clipped
    props = _props(csx)
    box = [props["muscle_like"].GetPrimitive(i) for i in range(props["muscle_like"].GetQtyPrimitives())]
    starts = [np.asarray(b.GetStart()) for b in box if b.GetTypeName() == "Box"]
    assert np.allclose(starts[0], (-0.08, -0.08, -0.08))  # cut back to the interior (analytic)
    # the rod is not a box: air slabs with a priority above every tissue cover the absorber
    assert rep.air_slabs == 6
    assert props["absorber_air"].GetPrimitive(0).GetPriority() == 13
    assert props["muscle_like"].GetMaterialProperty("density") == pytest.approx(1040.0)
    assert props["muscle_like"].GetMaterialProperty("kappa") == pytest.approx(1.2)
    assert "copper__sheet" in props  # zero-thickness finite conductor -> conducting sheet
    assert any("cu_wire" in n for n in rep.notes)  # thin finite conductor wire -> PEC, and said so


def test_build_refuses_a_bad_mesh_and_a_flat_dielectric():
    model = SceneModel(1e9, (Material("plastic", eps_r=3.0),),
                       (Polygon("film", "plastic", "z", 0.0, ((0, 0), (0.01, 0), (0, 0.01))),), ())
    with pytest.raises(ValueError, match="film"):
        build.build_csx(model, _Plan(np.linspace(-0.05, 0.05, 11), None), None)
    with pytest.raises(ValueError, match="lines_x"):
        build.build_csx(model, _Plan(np.array([0.0, 0.01, 0.005]), None), None)


def test_excitation_pulse_keeps_dc_out_of_the_spectrum():
    """The Gaussian pulse's spectrum falls as -20 (df / fc)^2 dB from its centre (analytic: fc is the -20 dB
    half-bandwidth of a Gaussian); DC lies f0 away and must stay >= 50 dB down for every allowed band_fraction
    (0.01 ... 1.5, workflow/schema/solver.schema.json), else static fields survive the run."""
    from bodysweep.workflow.solver import run

    for bf in (0.01, 0.3, 0.6, 0.9, 1.0, 1.5):
        f0, fc = run.excitation_pulse(403e6, bf)
        assert f0 == 403e6
        assert -20.0 * (f0 / fc) ** 2 <= -50.0, bf
        assert fc >= 0.5 * f0  # at least half the case frequency: a short pulse
