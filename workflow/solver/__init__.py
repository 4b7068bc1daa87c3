"""Solver adapter: the only part of bodysweep that imports openEMS (in :mod:`.engine`).

Modules: ``engine`` (engine access, log parsing), ``build`` (scene + mesh -> CSXCAD structure),
``ports`` (own lumped ports and probe reading), ``run`` (one excitation in a child process).
The solver-neutral meshing, settings and cost estimate live in :mod:`bodysweep.workflow.meshing`. Finishing a case
(S-matrix, SAR, link budget) reads only the case folder and lives in :mod:`bodysweep.workflow.finish`.
"""

#: bump when a change here alters results (part of every case identity)
ADAPTER_VERSION = "5"  # 5: one material per cell (openEMS CellConstantMaterial), as the SAR dump assumes
# 4: round conductors (cylinders, wires with a radius) count their surface nodes; a run
#   counts as past its pulse once the energy still to come is below the end criterion (was: the envelope)
# 3: solves live in the shared store (solve.json), the band is taken at the finish step
# 2: runs judged on their energy trace and length (diverged / truncated fail); half-domain PML thickness fix
