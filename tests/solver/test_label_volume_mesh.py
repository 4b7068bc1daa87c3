"""The mesh of a label-volume scene: a line at every voxel face where the tissue changes, no layer rule per box.

The synthetic forearm (2 mm voxels) under the example study's settings but ``min_cells_per_layer: 3``;
the faces are found by hand from the labels (analytic: a face is a tissue change when the labels on its
two sides differ). A box one voxel thick is not a layer: were it treated as one, cells of 2/3 mm would
appear. The antennas' feed lines at odd millimetres fall between the voxel faces, and the grading
spreads the 1 mm cells they make over the body (measured: 1 mm cells along x across the limb).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import yaml

from bodysweep.geometry.anatomy import change_faces
from bodysweep.geometry.scene import Scene
from bodysweep.geometry.units import from_edge_units
from bodysweep.workflow.meshing.mesh import auto_mesh, check_mesh
from bodysweep.workflow.meshing.settings import settings_from_dict

STUDIES = Path(__file__).resolve().parents[2] / "studies"


def test_lines_at_every_tissue_change_and_cells_not_below_the_voxel():
    study = yaml.safe_load((STUDIES / "segmented_forearm.yaml").read_text())
    scene = study["scene"]
    scene["phantom"]["file"] = str(STUDIES / scene["phantom"]["file"])
    model = Scene.from_dict(from_edge_units(scene)).build(study["frequencies_MHz"][0] * 1e6)
    settings = settings_from_dict(from_edge_units({**study["solver"], "min_cells_per_layer": 3}))
    plan = auto_mesh(model, settings)
    check_mesh(plan, model, settings)
    ph = Scene.from_dict(from_edge_units(scene)).phantom
    labels = np.load(STUDIES / "parts" / "segmented_forearm.npy").astype(int)
    edges = ph.voxel_edges()
    body_lo, body_hi = model.body_bounds
    for i, a in enumerate("xyz"):
        faces = edges[i][change_faces(np.where(labels == 0, -1, labels), i)]
        lines = plan.lines(a)
        gaps = np.min(np.abs(lines[None, :] - faces[:, None]), axis=1)
        assert np.all(gaps < 1e-12), (a, faces[gaps >= 1e-12])
        inside = lines[(lines >= body_lo[i] - 1e-12) & (lines <= body_hi[i] + 1e-12)]
        # inside the body no cell of 2 mm / 3 (a layer rule per box); half a voxel comes from the feed lines
        # (the implant's feed gap asks for finer cells along its own axis, y)
        if a != "y":
            assert np.diff(inside).min() > 0.75e-3, (a, np.diff(inside).min())  # measured 1 mm (x), 0.93 mm (z)
