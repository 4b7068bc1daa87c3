"""The declared solver-backend interface (workflow/solver/backend.py) and its openEMS implementation.

Structural typing as PEP 544 (Protocols) defines it: a backend is anything with the three methods and
the name; ``runtime_checkable`` checks presence, the signatures are compared here with ``inspect``.
"""
import inspect
import subprocess
import sys

import pytest

from bodysweep.workflow.solver.backend import BACKENDS, OpenEMSBackend, SolverBackend, get_backend
from bodysweep.workflow.meshing.cost import CostEstimate, estimate
from bodysweep.workflow.meshing.mesh import MeshPlan, auto_mesh
from bodysweep.workflow.meshing.settings import SolverSettings
from test_mesh import muscle_block

METHODS = ("mesh", "estimate", "solve_excitation")


@pytest.mark.parametrize("name", sorted(BACKENDS))
def test_every_registered_backend_has_the_declared_methods_and_signatures(name):
    b = get_backend(name)
    assert isinstance(b, SolverBackend) and b.name == name
    for m in METHODS:
        want = list(inspect.signature(getattr(SolverBackend, m)).parameters)
        assert list(inspect.signature(getattr(type(b), m)).parameters) == want, m


def test_a_class_without_solve_is_not_a_backend():
    class MeshOnly:
        name = "mesh only"

        def mesh(self, model, settings):
            return None

        def estimate(self, plan, model, settings):
            return None

    assert not isinstance(MeshOnly(), SolverBackend)


def test_unknown_backend_is_named_with_the_known_ones():
    with pytest.raises(ValueError, match="'nec'.*openEMS"):
        get_backend("nec")


def test_openems_backend_meshes_and_estimates_as_its_modules():
    # the backend is the openEMS adapter's mesher and cost model (tests/solver/test_mesh.py and
    # test_cost.py check those against the Courant limit and hand-counted lines)
    model, s = muscle_block(915e6), SolverSettings(excite_ports=(1,))
    b = OpenEMSBackend()
    plan = b.mesh(model, s)
    assert isinstance(plan, MeshPlan)
    ref = auto_mesh(model, s)
    assert all((plan.lines(i) == ref.lines(i)).all() for i in range(3))
    est = b.estimate(plan, model, s)
    assert isinstance(est, CostEstimate) and est == estimate(ref, model, s)


def test_importing_the_interface_loads_no_engine_and_no_mesher():
    code = ("import sys, bodysweep.workflow.solver.backend\n"
            "bad = [m for m in ('openEMS', 'CSXCAD', 'bodysweep.workflow.meshing.mesh', 'bodysweep.workflow.solver.run')"
            " if m in sys.modules]\nprint(bad)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"
