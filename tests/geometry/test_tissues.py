"""Tissue and material models against published tables and the model's analytic limits."""
import numpy as np
import pytest

from bodysweep.geometry import tissues as T
from bodysweep.geometry.primitives import Material

# Reference values: the Gabriel, Lau & Gabriel (1996) four-pole model as tabulated by the IFAC-CNR
# "Dielectric properties of body tissues" calculator / IT'IS database.
# (name, f_MHz, eps_r, sigma_S_per_m, source)
PUBLISHED = [
    # quoted in the geometry issue (IFAC-CNR tabulation at 433 MHz)
    ("muscle", 433, 56.9, 0.805, "issue / IFAC-CNR"),
    ("fat_not_infiltrated", 433, 5.57, 0.042, "issue / IFAC-CNR"),
    ("skin_dry", 433, 46.1, 0.70, "issue / IFAC-CNR"),
    # from memory (IFAC-CNR tabulation of the same model)
    ("muscle", 403, 57.1, 0.797, "from memory"),
    ("muscle", 915, 55.0, 0.948, "from memory"),
    ("muscle", 2450, 52.7, 1.74, "from memory"),
    ("fat_not_infiltrated", 403, 5.58, 0.0412, "from memory"),
    ("fat_not_infiltrated", 915, 5.46, 0.0514, "from memory"),
    ("fat_not_infiltrated", 2450, 5.28, 0.105, "from memory"),
    ("skin_dry", 403, 46.7, 0.689, "from memory"),
    ("skin_dry", 915, 41.3, 0.872, "from memory"),
    ("skin_dry", 2450, 38.0, 1.46, "from memory"),
    ("skin_wet", 2450, 42.85, 1.59, "from memory"),
    ("blood", 2450, 58.26, 2.54, "from memory"),
    ("bone_cortical", 2450, 11.38, 0.394, "from memory"),
    ("fat_infiltrated", 2450, 10.82, 0.268, "from memory"),
]


@pytest.mark.parametrize("name,f_MHz,eps_ref,sigma_ref,source", PUBLISHED)
def test_tissue_matches_published_table(name, f_MHz, eps_ref, sigma_ref, source):
    eps, sigma = T.tissue_properties(name, f_MHz * 1e6)
    # within 1 % (the tables are rounded to 3-4 significant figures)
    assert eps == pytest.approx(eps_ref, rel=0.01), source
    assert sigma == pytest.approx(sigma_ref, rel=0.01), source


def test_every_required_tissue_is_present_with_density():
    names = T.builtin_tissues()
    for n in ("skin_dry", "skin_wet", "fat_not_infiltrated", "fat_infiltrated", "muscle", "bone_cortical", "blood"):
        assert n in names
        # plausible soft-tissue / bone densities, 850 ... 2000 kg/m^3 (common practice)
        assert 850 < T.tissue_density(n) < 2000
    assert "Phys. Med. Biol. 41" in T.tissue_citation()


def test_low_and_high_frequency_limits_of_dispersive_part():
    # analytic: as w -> 0 each pole contributes d_eps, so eps -> eps_inf + sum d_eps;
    # as w -> inf the poles vanish and eps -> eps_inf.
    m = T.builtin_tissues()["muscle"].model
    no_ionic = T.ColeColeParams(m.eps_inf, m.poles, 0.0)
    low = T.cole_cole_permittivity(no_ionic, 1e-6)
    assert low.real == pytest.approx(m.eps_inf + sum(p[0] for p in m.poles), rel=1e-3)
    assert low.real == pytest.approx(no_ionic.static_dispersive_eps, rel=1e-3)
    high = T.cole_cole_permittivity(no_ionic, 1e17)
    assert high.real == pytest.approx(m.eps_inf, rel=1e-3)


def test_single_debye_pole_at_its_relaxation_frequency():
    # analytic: alpha = 0 is a Debye pole; at w tau = 1, eps = eps_inf + d/2 - j d/2
    tau = 1e-9
    p = T.ColeColeParams(2.0, ((10.0, tau, 0.0),), 0.0)
    e = T.cole_cole_permittivity(p, 1.0 / (2 * np.pi * tau))
    assert e.real == pytest.approx(7.0, rel=1e-12)
    assert e.imag == pytest.approx(-5.0, rel=1e-12)


def test_ionic_term_gives_its_conductivity_at_every_frequency():
    # analytic: -Im(sigma_i / (j w eps0)) w eps0 = sigma_i
    p = T.ColeColeParams(1.0, (), 0.37)
    f = np.array([1e3, 4.03e8, 2.45e9])
    e = T.cole_cole_permittivity(p, f)
    assert e.shape == (3,)
    assert np.allclose(T.permittivity2conductivity(e, f), 0.37, rtol=1e-12)
    assert np.allclose(e.real, 1.0)


def test_vectorised_properties_agree_with_scalar():
    f = np.array([403e6, 915e6])
    eps, sig = T.tissue_properties("skin_wet", f)
    assert eps.shape == (2,) and sig.shape == (2,)
    assert eps[1] == pytest.approx(T.tissue_properties("skin_wet", 915e6)[0])


def test_builtin_material_is_tissue_with_density():
    m = T.builtin_material("muscle", 433e6)
    assert isinstance(m, Material) and m.is_tissue and m.kind == "dielectric"
    assert m.density_kg_m3 == T.tissue_density("muscle")
    assert T.builtin_material("pec", 433e6).kind == "pec"


def test_unknown_tissue_and_bad_model_parameters():
    with pytest.raises(ValueError, match="unknown tissue 'liver'"):
        T.tissue_properties("liver", 433e6)
    with pytest.raises(ValueError, match="alpha must be in"):
        T.ColeColeParams(4.0, ((1.0, 1e-9, 1.0),), 0.0)
    with pytest.raises(ValueError, match="tau must be > 0"):
        T.ColeColeParams(4.0, ((1.0, 0.0, 0.1),), 0.0)
    with pytest.raises(ValueError, match="d_eps must be >= 0"):
        T.ColeColeParams(4.0, ((-1.0, 1e-9, 0.1),), 0.0)
    with pytest.raises(ValueError, match="eps_inf must be >= 1"):
        T.ColeColeParams(0.5, (), 0.0)
    with pytest.raises(ValueError, match="sigma_i must be >= 0"):
        T.ColeColeParams(2.0, (), -1.0)
    with pytest.raises(ValueError, match="frequencies must be > 0"):
        T.cole_cole_permittivity(T.ColeColeParams(2.0, (), 0.0), 0.0)


def test_fixed_tissue():
    t = T.FixedTissue("gel", 40.0, 0.5, 1020.0)
    m = t.to_material(915e6)
    assert (m.eps_r, m.sigma_S_per_m, m.density_kg_m3, m.is_tissue) == (40.0, 0.5, 1020.0, True)
    assert T.material_spec_from_dict(t.to_dict()) == t
    with pytest.raises(ValueError, match="tissue 'gel': eps_r must be >= 1, got 0.5"):
        T.FixedTissue("gel", 0.5, 0.5, 1020.0)
    with pytest.raises(ValueError, match="density_kg_m3 must be > 0, got 0"):
        T.FixedTissue("gel", 40.0, 0.5, 0.0)
    with pytest.raises(ValueError, match="sigma_S_per_m must be >= 0"):
        T.FixedTissue("gel", 40.0, -0.5, 1000.0)


def test_liquid_interpolates_linearly_and_refuses_to_extrapolate():
    liq = T.TissueLiquid("liq", (400e6, 900e6), (60.0, 50.0), (0.8, 1.0), 1000.0)
    # analytic: linear interpolation at the midpoint is the mean
    e, s = liq.properties(650e6)
    assert e == pytest.approx(55.0) and s == pytest.approx(0.9)
    assert liq.properties(400e6) == (60.0, 0.8)
    assert T.material_spec_from_dict(liq.to_dict()) == liq
    with pytest.raises(ValueError, match="liquid 'liq': no data at 2.45e\\+09 Hz; given from 4e\\+08 to 9e\\+08"):
        liq.to_material(2.45e9)
    with pytest.raises(ValueError, match="strictly increasing"):
        T.TissueLiquid("liq", (900e6, 400e6), (60.0, 50.0), (0.8, 1.0))
    with pytest.raises(ValueError, match="same length"):
        T.TissueLiquid("liq", (400e6, 900e6), (60.0,), (0.8, 1.0))
    with pytest.raises(ValueError, match="every eps_r must be >= 1"):
        T.TissueLiquid("liq", (400e6,), (0.2,), (0.8,))
    with pytest.raises(ValueError, match="every sigma_S_per_m must be >= 0"):
        T.TissueLiquid("liq", (400e6,), (2.0,), (-0.8,))


def test_dielectric_loss_tangent_to_conductivity():
    # analytic: sigma = w eps0 eps_r tan(delta)
    d = T.Dielectric("case", 3.0, loss_tangent=0.02)
    f = 433e6
    assert d.to_material(f).sigma_S_per_m == pytest.approx(2 * np.pi * f * 8.8541878128e-12 * 3.0 * 0.02)
    assert not d.to_material(f).is_tissue
    assert T.Dielectric("c2", 2.0, sigma_S_per_m=1e-3).to_material(f).sigma_S_per_m == 1e-3
    assert T.Dielectric("c3", 2.0).to_material(f).sigma_S_per_m == 0.0
    assert T.material_spec_from_dict(d.to_dict()) == d
    with pytest.raises(ValueError, match="not both"):
        T.Dielectric("case", 3.0, loss_tangent=0.02, sigma_S_per_m=0.1)
    with pytest.raises(ValueError, match="loss_tangent must be >= 0, got -0.1"):
        T.Dielectric("case", 3.0, loss_tangent=-0.1)


def test_conductor_pec_or_finite():
    assert T.Conductor("gold").to_material(1e9).kind == "pec"
    cu = T.Conductor("copper", 5.8e7).to_material(1e9)
    assert cu.kind == "conductor" and cu.sigma_S_per_m == 5.8e7
    assert T.material_spec_from_dict(T.Conductor("copper", 5.8e7).to_dict()) == T.Conductor("copper", 5.8e7)
    with pytest.raises(ValueError, match="conductor 'copper': sigma_S_per_m must be > 0"):
        T.Conductor("copper", 0.0)


def test_resolve_material_and_unknown_type():
    user = {"gel": T.FixedTissue("gel", 40.0, 0.5, 1020.0)}
    assert T.resolve_material("gel", 1e9, user).eps_r == 40.0
    assert T.resolve_material("muscle", 1e9, user).is_tissue
    with pytest.raises(ValueError, match="material 'wood' is neither declared"):
        T.resolve_material("wood", 1e9, user)
    with pytest.raises(ValueError, match="type must be one of"):
        T.material_spec_from_dict({"type": "plasma", "name": "x"})
    with pytest.raises(ValueError, match="unexpected keyword"):
        T.material_spec_from_dict({"type": "conductor", "name": "x", "colour": "red"})
