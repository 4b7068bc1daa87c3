"""Example scenes in edge units (mm), as they would appear under ``scene:`` in a study file.

Our own invented scenario: a capsule sensor a few millimetres under the skin of a forearm-like
layered cylinder, read by a wrist-worn loop; and a flat layered-slab variant read by a short dipole.
Everything fits in roughly 80 x 80 x 80 mm so that coarse FDTD runs are cheap.

Convert with :func:`bodysweep.geometry.units.from_edge_units` and load with
:meth:`bodysweep.geometry.scene.Scene.from_dict`.
"""
from __future__ import annotations

import copy


def forearm_capsule_scene(depth_mm: float = 10.0) -> dict:
    """Layered-cylinder forearm (axis along y), wrist-worn circular loop, capsule with a small loop.

    Parameters
    ----------
    depth_mm : float
        Depth of the capsule centre below the skin surface; meant for 5 ... 15 mm
        (the muscle layer spans 5 ... 19 mm below the surface).

    Returns
    -------
    dict
        Edge-unit scene section. A passive rod pair beside the capsule (parallel to its axis) is
        anchored to the implant, so it moves with it
        when ``depth_mm`` is swept.
    """
    return copy.deepcopy({
        "phantom": {
            "type": "layered_cylinder",
            "axis": "y",
            "length_mm": 50.0,
            "layers": [
                {"tissue": "skin_wet", "thickness_mm": 2.0},
                {"tissue": "fat_not_infiltrated", "thickness_mm": 3.0},
                {"tissue": "muscle", "thickness_mm": 14.0},
            ],
            "core": {"tissue": "bone_cortical", "radius_mm": 6.0},
        },
        "external": {
            "type": "loop",
            "shape": "circular",
            "radius_mm": 12.0,
            "trace_width_mm": 2.0,
            "feed_gap_mm": 2.0,
            "turns": 1,
            "normal": "z",
            "position_mm": [0.0, 0.0],
            "standoff_mm": 3.0,
            "conductor": "copper",
            "casing": {"thickness_mm": 1.0, "eps_r": 3.0, "loss_tangent": 0.01},
        },
        "implant": {
            "type": "loop",
            "shape": "circular",
            "radius_mm": 3.0,
            "trace_width_mm": 1.0,
            "feed_gap_mm": 1.0,
            "turns": 1,
            "normal": "z",
            "position_mm": [0.0, 0.0],
            "depth_mm": float(depth_mm),
            "conductor": "pec",
            "capsule": {"shape": "cylinder", "axis": "y", "radius_mm": 4.0, "length_mm": 14.0,
                        "eps_r": 2.9, "loss_tangent": 0.005},
        },
        "concentrators": [
            {"type": "rod_pair", "anchor": "implant", "offset_mm": [6.0, 0.0, 0.0], "azimuth_deg": 90.0,
             "rod_length_mm": 8.0, "gap_mm": 2.0, "radius_mm": 0.5, "conductor": "pec"},
        ],
        "materials": [
            {"type": "conductor", "name": "copper", "sigma_S_per_m": 5.8e7},
        ],
        "min_clearance_mm": 0.5,
    })


def slab_dipole_scene(depth_mm: float = 10.0) -> dict:
    """Flat three-layer slab, external short dipole along x, capsule with a short dipole.

    Parameters
    ----------
    depth_mm : float
        Depth of the capsule centre below the skin surface (muscle spans 6 ... 36 mm).

    Returns
    -------
    dict
        Edge-unit scene section without concentrators.
    """
    return copy.deepcopy({
        "phantom": {
            "type": "layered_slab",
            "size_x_mm": 80.0,
            "size_y_mm": 80.0,
            "layers": [
                {"tissue": "skin_dry", "thickness_mm": 2.0},
                {"tissue": "fat_not_infiltrated", "thickness_mm": 4.0},
                {"tissue": "muscle", "thickness_mm": 30.0},
            ],
        },
        "external": {
            "type": "dipole",
            "length_mm": 60.0,
            "feed_gap_mm": 1.0,
            "strip_width_mm": 2.0,
            "axis": "x",
            "position_mm": [0.0, 0.0],
            "standoff_mm": 5.0,
            "conductor": "pec",
        },
        "implant": {
            "type": "dipole",
            "length_mm": 10.0,
            "feed_gap_mm": 0.5,
            "wire_radius_mm": 0.0,
            "axis": "x",
            "position_mm": [0.0, 0.0],
            "depth_mm": float(depth_mm),
            "conductor": "pec",
            "capsule": {"shape": "box", "size_mm": [13.0, 4.0, 4.0], "eps_r": 2.9, "loss_tangent": 0.005},
        },
        "concentrators": [],
        "materials": [],
        "min_clearance_mm": 0.5,
    })


def liquid_box_scene(depth_mm: float = 10.0) -> dict:
    """Tissue-simulating liquid in a box with a 2 mm shell, external loop, implant dipole.

    The liquid's values are invented round numbers near muscle, given at three frequencies.
    """
    return copy.deepcopy({
        "phantom": {
            "type": "liquid_box",
            "liquid": "muscle_like_liquid",
            "size_x_mm": 70.0,
            "size_y_mm": 70.0,
            "depth_mm": 40.0,
            "shell": {"thickness_mm": 2.0, "eps_r": 3.7, "loss_tangent": 0.002},
        },
        "external": {
            "type": "loop",
            "shape": "square",
            "side_mm": 20.0,
            "trace_width_mm": 1.0,
            "feed_gap_mm": 1.0,
            "turns": 2,
            "pitch_mm": 3.0,
            "normal": "z",
            "position_mm": [0.0, 0.0],
            "standoff_mm": 4.0,
            "conductor": "pec",
        },
        "implant": {
            "type": "dipole",
            "length_mm": 10.0,
            "feed_gap_mm": 0.5,
            "axis": "y",
            "position_mm": [0.0, 0.0],
            "depth_mm": float(depth_mm),
            "conductor": "pec",
            "capsule": {"shape": "cylinder", "axis": "y", "radius_mm": 2.5, "length_mm": 13.0,
                        "eps_r": 2.9, "loss_tangent": 0.005},
        },
        "concentrators": [],
        "materials": [
            {"type": "liquid", "name": "muscle_like_liquid", "frequencies_MHz": [400.0, 900.0, 2450.0],
             "eps_r": [57.0, 55.0, 52.7], "sigma_S_per_m": [0.80, 0.95, 1.75], "density_kg_m3": 1000.0},
        ],
        "min_clearance_mm": 0.5,
    })
