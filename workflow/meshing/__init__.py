"""Solver-neutral meshing, solver settings and cost estimate (pure numpy; no engine import).

Modules: ``settings`` (:class:`SolverSettings`, presets), ``mesh`` (domain, fixed lines and their merging,
mesh checks, ``checked_mesh``), ``mesh_fill`` (size field, filling the gaps, grading repair), ``cost``
(``CostEstimate``, the one cost-estimate type). A backend (:mod:`bodysweep.workflow.solver`) uses them;
they never import a backend.
"""
