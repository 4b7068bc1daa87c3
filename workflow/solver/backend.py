"""What bodysweep asks of a field solver, and the openEMS backend that answers it.

A backend does three things for one case:

``mesh(model, settings) -> MeshPlan``
    The mesh lines of the built scene (:class:`~bodysweep.geometry.model.SceneModel`) under the solver
    settings (:class:`~bodysweep.workflow.meshing.settings.SolverSettings`); raises ``ValueError`` (e.g.
    :class:`~bodysweep.workflow.meshing.mesh.MeshRefused`) for a scene it cannot mesh.
``estimate(plan, model, settings) -> CostEstimate``
    Cells, timesteps, memory and CPU time of the case on that mesh, without solving
    (:class:`~bodysweep.workflow.meshing.cost.CostEstimate`).
``solve_excitation(case_dir, port, threads=None, timeout_s=None) -> dict``
    Drive one port of a prepared case folder and write ``excite_<port>/`` as the case-folder contract
    in DEVELOPERS.md says (``signals.h5``, ``fields_raw.h5`` for port 1, ``solver.log``,
    ``status.json``); returns the status written. A problem of the case is a ``failed`` status with
    its reason, not an exception.

Everything after the solve (S-matrix, SAR averaging, link budget) reads only those files, so a second
engine is one more module (or folder) with a class that has these three methods, registered in
:data:`BACKENDS`. Only the openEMS backend exists; its module ``engine.py`` stays the only importer of
openEMS, and importing this module imports no solver.
"""
from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Protocol, runtime_checkable

if TYPE_CHECKING:  # annotations only: importing the interface loads neither builders nor mesher
    from bodysweep.geometry.model import SceneModel

    from ..meshing.cost import CostEstimate
    from ..meshing.mesh import MeshPlan
    from ..meshing.settings import SolverSettings


@runtime_checkable
class SolverBackend(Protocol):
    """The interface of a field-solver backend (see the module docstring)."""

    #: name of the engine, as ``bodysweep --version`` and the logs spell it
    name: str

    def mesh(self, model: "SceneModel", settings: "SolverSettings") -> "MeshPlan": ...

    def estimate(self, plan: "MeshPlan", model: "SceneModel", settings: "SolverSettings") -> "CostEstimate": ...

    def solve_excitation(self, case_dir: str | Path, port: int, threads: int | None = None,
                         timeout_s: float | None = None) -> dict: ...


class OpenEMSBackend:
    """The openEMS FDTD backend: own graded mesher, Courant/energy-decay cost model, engine in a child process."""

    name = "openEMS"

    def mesh(self, model: "SceneModel", settings: "SolverSettings") -> "MeshPlan":
        from ..meshing.mesh import checked_mesh

        return checked_mesh(model, settings)  # a mesh the solve step would refuse is refused here already

    def estimate(self, plan: "MeshPlan", model: "SceneModel", settings: "SolverSettings") -> "CostEstimate":
        from ..meshing.cost import estimate

        return estimate(plan, model, settings)

    def solve_excitation(self, case_dir: str | Path, port: int, threads: int | None = None,
                         timeout_s: float | None = None) -> dict:
        from .run import solve_excitation

        return solve_excitation(case_dir, int(port), threads, timeout_s)


#: backends by name; the pipeline uses :data:`DEFAULT_BACKEND`
BACKENDS: dict[str, type] = {OpenEMSBackend.name: OpenEMSBackend}
DEFAULT_BACKEND = OpenEMSBackend.name


def get_backend(name: str = DEFAULT_BACKEND) -> SolverBackend:
    """The backend called ``name`` (``ValueError`` naming the known ones otherwise)."""
    try:
        return BACKENDS[name]()
    except KeyError:
        raise ValueError(f"solver backend {name!r} is not known; known: {', '.join(sorted(BACKENDS))}") from None
