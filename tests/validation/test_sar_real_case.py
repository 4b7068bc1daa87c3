"""Mass-averaged SAR on the fields of a real openEMS run (lossy phantom, non-uniform mesh).

Reference: the averaging definition of IEC/IEEE 62704-1:2017 (cube of the target mass around each
tissue voxel, partial cells weighted by their overlap volume, at most 10 % background, faces touching
tissue; enclosed voxels; face-centred cubes for the rest). The brute-force search
(``exact_cube_average_bruteforce``: every voxel's cube by plain bisection, every box content by
direct summation of overlap volumes) is that definition applied literally; the fast
``average_sar`` (summed tables, vectorised root finding, box-stabbing maximum) must give the same
numbers on the same fields. The engine's own IEEE 62704 averaging is run beside it and recorded as
information.
"""
import json
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "solver"))

from solver_scenes import lossy_slab_scene, uniform_plan, write_case  # noqa: E402

from bodysweep.workflow.post.sar import local_sar  # noqa: E402
from bodysweep.workflow.post.sar_average import ENCLOSED, FACE, VALID, average_sar  # noqa: E402
from bodysweep.workflow.post.sar_flush import flush_cube_peak, reported_peak  # noqa: E402
from bodysweep.workflow.reference.sar_bruteforce import (exact_cube_average_bruteforce,  # noqa: E402
                                                         flush_cube_bruteforce)
from bodysweep.workflow.finish import finish_case  # noqa: E402
from bodysweep.workflow.solver.run import solve_excitation  # noqa: E402

pytestmark = [pytest.mark.solver, pytest.mark.validation]

F0 = 2.45e9
MASSES = (0.001, 0.01)


@pytest.fixture(scope="module")
def lossy_case(tmp_path_factory):
    """External dipole over a lossy box; 2.5 mm cells near the surface, 5 mm below z = -15 mm (about
    95 000 engine cells, some seconds); the engine's own averaging switched on (one more run)."""
    model = lossy_slab_scene(F0)
    plan = uniform_plan(model, (-0.045, -0.045, -0.045), (0.045, 0.045, 0.04), 0.005,
                        fine=((-0.035, -0.035, -0.015), (0.035, 0.035, 0.005), 0.0025))
    case = write_case(tmp_path_factory.mktemp("sar_real") / "lossy", model, plan, F0,
                      {"threads": 1, "n_band_points": 21, "engine_sar_average": True},
                      {"masses_kg": list(MASSES), "max_air_fraction": 0.1})
    st = solve_excitation(case, 1)
    assert st["status"] == "ok", st["reason"]
    with h5py.File(case / "excite_1" / "fields_raw.h5", "r") as h5:
        raw = {k: h5[k][()] for k in h5.keys()}
    sar = local_sar(raw["E_V_per_m"], raw["sigma_S_per_m"], raw["density_kg_m3"])
    edges = [raw[f"{a}_edges_m"] for a in "xyz"]
    return case, sar, raw["density_kg_m3"], edges


def _sub_grid(sar, rho, edges, half_width_m, z_low_m):
    """Cells whose centres lie within half_width_m (x, y) of the local SAR peak and above z_low_m (up to
    5 mm into the air above the surface)."""
    peak = np.unravel_index(np.argmax(np.where(rho > 0, sar, -1.0)), rho.shape)
    c = [0.5 * (e[1:] + e[:-1]) for e in edges]
    sel = [np.flatnonzero(np.abs(c[0] - c[0][peak[0]]) < half_width_m),
           np.flatnonzero(np.abs(c[1] - c[1][peak[1]]) < half_width_m),
           np.flatnonzero((c[2] > z_low_m) & (c[2] < 0.005))]
    sl = tuple(slice(s[0], s[-1] + 1) for s in sel)
    return sar[sl], rho[sl], [e[s[0]:s[-1] + 2] for e, s in zip(edges, sel)]


# 1 g cube side 10 mm, 10 g 21.5 mm at 1000 kg/m^3: the sub-grids are just large enough to hold valid
# centred cubes (brute force costs ~15-30 s each on the shared 2-core machine)
@pytest.mark.parametrize("mass_kg, half_width_m, z_low_m", [(0.001, 0.009, -0.021), (0.01, 0.0125, -0.031)])
def test_fast_average_equals_bruteforce_on_real_fields(lossy_case, mass_kg, half_width_m, z_low_m):
    _, sar, rho, edges = lossy_case
    s, r, e = _sub_grid(sar, rho, edges, half_width_m, z_low_m)
    # the sub-grid is non-uniform (feed-gap lines in x, 2.5 / 5 mm cells in z inside the tissue), so
    # partial-cell weighting of unequal cells is exercised
    assert np.ptp(np.diff(e[0])) > 1e-4 and np.ptp(np.diff(e[2])[:-2]) > 1e-3
    assert (r == 0).any() and (r > 0).any()  # surface with air above it
    fast = average_sar(s, r, *e, mass_kg, max_air_fraction=0.1)
    ref = exact_cube_average_bruteforce(s, r, *e, mass_kg, max_air_fraction=0.1)
    counts = fast.counts()
    print(f"{mass_kg * 1e3:g} g on {r.shape}: {counts}, peak fast {fast.peak:.6e} brute {ref.peak:.6e}")
    # every branch of the definition occurs on these real fields (otherwise the comparison is partial)
    assert counts["valid"] > 0 and counts["enclosed"] > 0 and counts["face"] > 0 and counts["unresolved"] == 0
    # same voxel classification and the same average in every tissue voxel; tolerance 1 % as asked for a
    # cube average (the two differ only by rounding: 1e-11 relative was observed)
    assert np.array_equal(fast.status, ref.status)
    t = r > 0
    assert np.all(np.isfinite(ref.avg[t]))
    assert np.max(np.abs(fast.avg[t] / ref.avg[t] - 1.0)) <= 0.01
    assert fast.peak == pytest.approx(ref.peak, rel=0.01)


@pytest.mark.parametrize("mass_kg, half_width_m, z_low_m", [(0.001, 0.009, -0.021), (0.01, 0.0125, -0.031)])
def test_flush_cube_search_equals_bruteforce_on_real_fields(lossy_case, mass_kg, half_width_m, z_low_m):
    """The best cube flush with the phantom's flat top (z = 0) on the real fields, against the direct search
    over positions (flush_cube_bruteforce: a 1 mm lattice over the whole sub-grid, then 0.1 mm around its
    best), within 1 %; the peak reported is the larger of the voxel-grid peak and this one."""
    _, sar, rho, edges = lossy_case
    s, r, e = _sub_grid(sar, rho, edges, half_width_m, z_low_m)
    assert np.any(np.isclose(e[2], 0.0, atol=1e-12))  # the surface is a mesh line of the sub-grid
    flush = flush_cube_peak(s, r, *e, mass_kg, max_air_fraction=0.1)
    coarse = flush_cube_bruteforce(s, r, *e, mass_kg, "+z", 0.0, (e[0][0], e[0][-1]), (e[1][0], e[1][-1]), 1e-3)
    assert np.isfinite(coarse[0])
    cu, cv = coarse[1][0], coarse[1][1]
    fine = flush_cube_bruteforce(s, r, *e, mass_kg, "+z", 0.0, (cu - 1e-3, cu + 1e-3), (cv - 1e-3, cv + 1e-3), 1e-4)
    best = max(coarse[0], fine[0])
    grid = average_sar(s, r, *e, mass_kg, max_air_fraction=0.1)
    print(f"{mass_kg * 1e3:g} g: flush {flush.peak:.6e} (face {flush.face}), brute force {best:.6e}, "
          f"voxel grid {grid.peak:.6e}")
    assert flush.face == "+z" and flush.surface_m == pytest.approx(0.0, abs=1e-12)
    assert flush.peak == pytest.approx(best, rel=0.01)  # the 1 % asked for
    assert flush.peak >= best * (1 - 1e-4)  # a continuous maximum is not below a lattice of positions
    rep = reported_peak(grid, flush)
    assert rep["peak_W_per_kg"] == max(grid.peak, flush.peak)


def test_full_grid_peak_cubes_equal_bruteforce(lossy_case):
    """The whole dump (all tissue and air cells): the 8 largest centred-cube averages, spot-checked."""
    _, sar, rho, edges = lossy_case
    for m in MASSES:
        fast = average_sar(sar, rho, *edges, m, max_air_fraction=0.1)
        v = np.argwhere(fast.status == VALID)
        top = v[np.argsort(fast.avg[tuple(v.T)])[-8:]]
        ref = exact_cube_average_bruteforce(sar, rho, *edges, m, max_air_fraction=0.1, centres=top)
        idx = tuple(top.T)
        assert np.all(ref.status[idx] == VALID)  # the literal definition also finds them valid
        assert np.max(np.abs(fast.avg[idx] / ref.avg[idx] - 1.0)) <= 0.01  # 1 %, as above
        # a mass average lies between the extremes of what it averages (analytic)
        assert fast.peak <= sar[rho > 0].max() and fast.status[fast.peak_index] in (VALID, ENCLOSED, FACE)


def test_engine_own_average_is_recorded_beside_ours(lossy_case):
    case, sar, rho, edges = lossy_case
    st = json.loads((case / "excite_1" / "solver_sar_status.json").read_text())
    # the record is written either way: per mass a value or the reason it is missing
    assert set(st["by_mass"]) == {repr(m) for m in MASSES}
    for entry in st["by_mass"].values():
        assert entry["status"] in ("ok", "failed")
        assert (entry["status"] == "ok") == (entry["dataset"] is not None)
        assert entry["status"] == "ok" or entry["reason"]
    assert st["status"] in ("ok", "partial", "failed") and (st["status"] == "ok" or st["reason"])
    assert (case / "excite_1" / "solver_sar.log").read_text().count("openEMS") > 0
    m = finish_case(case)
    assert m["status"] in ("ok", "warning")  # the engine's averaging never decides the case
    rows = {r["mass_kg"]: r for r in m["solver_sar"]["by_mass"]}
    ours = {r["mass_kg"]: r["grid_peak_W_per_kg_per_W"] for r in m["sar"]}  # the same voxel-grid procedure
    ok = [r for r in rows.values() if r["status"] == "ok"]
    # openEMS 0.0.35 gives 1 g here and ends its process in the 10 g averaging ("invalid averaging box
    # size"): a face-centred cube of an outer one-cell tissue layer of this 60 x 60 x 30 mm phantom cannot
    # reach 10 g. A 100 x 100 x 40 mm phantom (every outer layer above 10 g) ran both masses.
    assert ok, rows
    for r in ok:
        assert r["our_peak_W_per_kg_per_W"] == pytest.approx(ours[r["mass_kg"]])
        # Plausible range, not truth: observed +23 % for 1 g on this case, +20 % / +16 % for 1 g / 10 g on the
        # 100 x 100 x 40 mm phantom (+12 % / +19 % on a flat-phantom dipole at 900 MHz earlier). The difference comes from the face-centred cubes of the
        # surface voxels (step 2): the engine puts the cube face on the voxel's outer edge, the whole voxel
        # inside the cube (ours: voxel centre on the face), so its cube takes in the half cell of highest
        # SAR at the surface; on centred cubes the two agree (next test). Range -10 % ... +40 %.
        assert -0.10 <= r["relative_difference"] <= 0.40, r
        # both peaks come from the same fields: they lie within one cube side of each other
        side = (r["mass_kg"] / 1000.0) ** (1 / 3)
        ours_loc = next(s["grid_voxel_centre_m"] for s in m["sar"] if s["mass_kg"] == r["mass_kg"])
        assert np.linalg.norm(np.subtract(r["solver_peak_location_m"], ours_loc)) <= side
    for r in rows.values():
        if r["status"] != "ok":
            assert r["reason"]


def test_engine_average_agrees_on_centred_cubes(lossy_case):
    """openEMS's own IEEE 62704 averaging is an independent implementation of the same definition: where
    a voxel is the centre of a valid cube or enclosed in one, both must give the same average."""
    case, sar, rho, edges = lossy_case
    st = json.loads((case / "excite_1" / "solver_sar_status.json").read_text())
    compared = 0
    with h5py.File(case / "excite_1" / "solver_sar.h5", "r") as h5:
        for a, e in zip("xyz", edges):  # the engine's values sit on the cells of fields_raw.h5
            assert np.allclose(h5[f"{a}_m"][()], 0.5 * (e[1:] + e[:-1]), rtol=0, atol=1e-6)
        for m in MASSES:
            entry = st["by_mass"][repr(m)]
            if entry["status"] != "ok":
                continue
            engine = h5[entry["dataset"]][()]
            ours = average_sar(sar, rho, *edges, m, max_air_fraction=0.1)
            for code in (VALID, ENCLOSED):
                sel = (rho > 0) & (ours.status == code)
                ratio = engine[sel] / ours.avg[sel]
                print(f"{m * 1e3:g} g status {code}: {sel.sum()} voxels, engine / ours {ratio.min():.4f} ... "
                      f"{ratio.max():.4f}")
                # observed 0.9967 ... 1.0011 for 1 g (the engine works in float32); tolerance 1 %
                assert sel.sum() > 0 and np.all(np.abs(ratio - 1.0) <= 0.01)
            compared += 1
    assert compared >= 1
