"""The Touchstone writer's number forms and port counts, read back by scikit-rf (the outside reference
reader; Touchstone File Format Specification 1.1 for the entry order)."""
import numpy as np
import pytest
import skrf

from bodysweep.workflow.post.sparams import write_touchstone


@pytest.mark.parametrize("form", ["ri", "ma", "db"])
@pytest.mark.parametrize("n", [1, 2, 3])
def test_forms_and_ports_read_back(tmp_path, form, n):
    rng = np.random.default_rng(10 * n + len(form))
    f = np.linspace(900e6, 930e6, 4)
    S = (rng.normal(size=(4, n, n)) + 1j * rng.normal(size=(4, n, n))) * 0.3
    S[0, 0, 0] = 0.25  # a real entry (angle 0)
    out = write_touchstone(tmp_path / "x.snp", f, S, 50, comments="c", form=form)
    assert out.suffix == f".s{n}p"
    ntw = skrf.Network(str(out))
    np.testing.assert_allclose(ntw.f, f, rtol=1e-15)
    np.testing.assert_allclose(ntw.s, S, rtol=1e-12, atol=1e-15)


def test_z0_other_than_50(tmp_path):
    S = np.full((2, 1, 1), 0.1 + 0.2j)
    out = write_touchstone(tmp_path / "y.s1p", [1e9, 2e9], S, 75.0)
    np.testing.assert_allclose(skrf.Network(str(out)).z0, 75.0)
    assert "# HZ S RI R 75" in out.read_text()
