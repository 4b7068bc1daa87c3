"""The JSON Schema (draft 2020-12) of the ``scene:`` section of a study file, in edge units (mm, MHz).

``data/scene.schema.json`` is generated from :func:`scene_schema` (run this module to rewrite it; a test
checks that the file and the function agree). Every part with a ``type`` key is checked against the
variant that ``type`` names (``if``/``then``), each variant with ``additionalProperties: false``.
"""
from __future__ import annotations

import json
from pathlib import Path
from typing import Any

SCHEMA_PATH = Path(__file__).with_name("data") / "scene.schema.json"
SCHEMA_ID = "bodysweep/scene.schema.json"

AXIS3 = ["x", "y", "z"]


def _num(desc: str, default: Any = None, minimum: float | None = None, exclusive: float | None = None,
         integer: bool = False, **extra) -> dict:
    d: dict[str, Any] = {"description": desc, "type": "integer" if integer else "number"}
    if minimum is not None:
        d["minimum"] = minimum
    if exclusive is not None:
        d["exclusiveMinimum"] = exclusive
    if default is not None:
        d["default"] = default
    d.update(extra)
    return d


def _len(desc: str, default: Any = None, zero_ok: bool = False) -> dict:
    return _num(desc + " (mm).", default, minimum=0 if zero_ok else None, exclusive=None if zero_ok else 0)


def _str(desc: str, default: Any = None, enum: list | None = None) -> dict:
    d: dict[str, Any] = {"description": desc, "type": "string"}
    if enum:
        d["enum"] = enum
    else:
        d["minLength"] = 1
    if default is not None:
        d["default"] = default
    return d


def _vec(desc: str, n: int, default: list | None = None) -> dict:
    d: dict[str, Any] = {"description": desc, "type": "array", "items": {"type": "number"},
                         "minItems": n, "maxItems": n}
    if default is not None:
        d["default"] = default
    return d


def _obj(desc: str, props: dict, required: list[str], **extra) -> dict:
    return {"description": desc, "type": "object", "additionalProperties": False, "required": required,
            "properties": props, **extra}


def _typed(kind: str, desc: str) -> dict:
    return {"description": desc, "const": kind}


def _dispatch(desc: str, variants: dict[str, str]) -> dict:
    """An object whose ``type`` picks one of ``variants`` ($defs names)."""
    return {"description": desc, "type": "object", "required": ["type"],
            "properties": {"type": {"description": "Kind of this part.", "type": "string",
                                    "enum": sorted(variants)}},
            "allOf": [{"if": {"properties": {"type": {"const": k}}, "required": ["type"]},
                       "then": {"$ref": f"#/$defs/{v}"}} for k, v in sorted(variants.items())]}


DIELECTRIC_PROPS = {
    "eps_r": _num("Relative permittivity.", minimum=1),
    "loss_tangent": _num("Loss tangent tan(delta); sigma = 2 pi f eps0 eps_r tan(delta). Give this or "
                         "sigma_S_per_m.", minimum=0),
    "sigma_S_per_m": _num("Conductivity in S/m. Give this or loss_tangent.", minimum=0),
}
NOT_BOTH_LOSSES = {"not": {"required": ["loss_tangent", "sigma_S_per_m"]}}

LAYER = _obj("One tissue layer.", {
    "tissue": _str("Material name: a built-in tissue (skin_dry, skin_wet, fat_not_infiltrated, fat_infiltrated, "
                   "muscle, bone_cortical, blood) or a material declared under materials."),
    "thickness_mm": _len("Layer thickness"),
}, ["tissue", "thickness_mm"])

LAYERS = {"description": "Tissue layers from the surface (z = 0) inward; the last may be thick.",
          "type": "array", "minItems": 1, "items": {"$ref": "#/$defs/layer"}}

CONDUCTOR = _str("Metal: 'pec' or a conductor declared under materials.", "pec")


def _dipole_props(external: bool) -> dict:
    return {
        "type": _typed("dipole", "Centre-fed straight dipole."),
        "length_mm": _len("Tip-to-tip length including the feed gap"),
        "feed_gap_mm": _len("Gap between the arms where the port sits"),
        "axis": _str("Direction of the dipole.", "x", ["x", "y"] if external else AXIS3),
        "wire_radius_mm": _len("Wire radius; 0 is a thin wire on the mesh", 0.0, zero_ok=True),
        "strip_width_mm": _len("Width of a flat strip instead of a wire; 0 for a wire", 0.0, zero_ok=True),
        "conductor": CONDUCTOR,
    }


LOOP_PROPS = {
    "type": _typed("loop", "Planar loop, single turn or spiral, fed through a small gap."),
    "shape": _str("Outline of the loop.", "circular", ["circular", "square"]),
    "radius_mm": _len("Circular loops: centre-line radius of the outer turn", zero_ok=True),
    "side_mm": _len("Square loops: centre-line side of the outer turn", zero_ok=True),
    "trace_width_mm": _len("Width of the flat trace"),
    "feed_gap_mm": _len("Width of the feed gap"),
    "turns": _num("Number of turns; >= 2 makes a spiral returning over a raised bridge.", 1, minimum=1,
                  integer=True),
    "pitch_mm": _len("Spirals: centre-line spacing between turns (> trace width)", 0.0, zero_ok=True),
    "normal": _str("Normal of the loop's plane.", "z", AXIS3),
    "segments_per_turn": _num("Polyline segments per turn of a circular loop.", 48, minimum=8, integer=True),
    "bridge_height_mm": _len("Spirals: height of the return bridge above the trace plane", 1.0),
    "conductor": CONDUCTOR,
}

BOARD_LAYER_PROPS = {"thickness_mm": _len("Layer thickness"), **DIELECTRIC_PROPS}


CAD_PROPS = {
    "type": _typed("cad", "A conductor read from a closed triangle mesh (STL file)."),
    "file": _str("Path of the STL file, relative to the study file's folder (or absolute)."),
    "unit": _str("Length of one unit in the file.", "mm", ["m", "mm", "um"]),
    "feed_start_mm": _vec("One end of the feed gap in the part's own coordinates (mm, before rotation and "
                          "offset).", 3),
    "feed_stop_mm": _vec("Other end of the feed gap in the part's own coordinates (mm).", 3),
    "feed_axis": _str("Direction of the port voltage in the scene, after rotation.", None, AXIS3),
    "offset_mm": _vec("Shift (x, y, z) of the part after rotation (mm).", 3, [0.0, 0.0, 0.0]),
    "rotation_deg": _vec("Rotation about x, then y, then z (degrees, about the file's origin).", 3, [0.0, 0.0, 0.0]),
    "conductor": CONDUCTOR,
    "sha256": _str("Content hash of the file; filled in when the study is expanded (give it to pin a version)."),
}
CAD_REQUIRED = ["type", "file", "feed_start_mm", "feed_stop_mm", "feed_axis"]


def _board_props(kind: str, desc: str) -> dict:
    return {
        "type": _typed(kind, desc),
        "board_size_mm": _vec("Size (x, y) of the substrate and its ground plane, centred on the implant (mm).", 2),
        "substrate": _obj("Dielectric substrate between the ground plane and the radiator.", BOARD_LAYER_PROPS,
                          ["thickness_mm", "eps_r"], **NOT_BOTH_LOSSES),
        "superstrate": _obj("Optional dielectric cover on top of the radiator, board-sized.", BOARD_LAYER_PROPS,
                            ["thickness_mm", "eps_r"], **NOT_BOTH_LOSSES),
        "feed_distance_mm": _len("Distance of the feed probe from the trace's start (where the shorting pin "
                                 "stands), along the first straight run"),
        "shorting_pin": {"description": "A pin from the trace's start down to the ground plane.", "type": "boolean",
                         "default": True},
        "conductor": CONDUCTOR,
    }


INVERTED_F_PROPS = {
    **_board_props("inverted_f", "Planar inverted-F: rectangular patch over a grounded substrate, shorting pin "
                                 "on its x-minimum edge, probe feed."),
    "patch_length_mm": _len("Patch length along x"),
    "patch_width_mm": _len("Patch width along y"),
    "pin_position_mm": _len("Shorting pin position along the shorted edge, from the patch's y-minimum corner",
                            0.0, zero_ok=True),
}
MEANDER_PROPS = {
    **_board_props("meander", "Meandered trace over a grounded substrate: a lead along x, then legs along y."),
    "legs": _num("Number of legs along y.", minimum=1, integer=True),
    "leg_pitch_mm": _len("Centre-line spacing of the legs (> 2 trace widths)"),
    "meander_height_mm": _len("Centre-line distance between the top and bottom joins"),
    "trace_width_mm": _len("Trace width"),
    "lead_length_mm": _len("Length of the lead before the first leg; 0 takes one leg pitch", 0.0, zero_ok=True),
}
SPIRAL_PROPS = {
    **_board_props("spiral", "Single-arm spiral over a grounded substrate, winding inward from its outer start."),
    "shape": _str("Outline of the spiral.", "square", ["square", "circular"]),
    "turns": _num("Number of turns (square spirals: quarter steps).", exclusive=0),
    "outer_half_size_mm": _len("Half side (square) or radius (circular) of the outer turn's centre line"),
    "turn_pitch_mm": _len("Centre-line spacing between turns (> 2 trace widths)"),
    "trace_width_mm": _len("Trace width"),
    "segments_per_turn": _num("Polyline segments per turn of a circular spiral.", 48, minimum=8, integer=True),
}


def _shell_file_props(what: str, origin: str) -> dict:
    """Keys of a capsule or casing read from an STL file (``shape: cad``)."""
    return {
        "file": _str(f"Cad {what}s: path of the STL file (a closed solid that encloses the antenna's conductors and "
                     "feed), relative to the study file's folder (or absolute)."),
        "unit": _str(f"Cad {what}s: length of one unit in the file.", "mm", ["m", "mm", "um"]),
        "offset_mm": _vec(f"Cad {what}s: shift (x, y, z) of the part after rotation, from {origin} (mm).", 3,
                          [0.0, 0.0, 0.0]),
        "rotation_deg": _vec(f"Cad {what}s: rotation about x, then y, then z (degrees, about the file's origin).",
                             3, [0.0, 0.0, 0.0]),
        "sha256": _str(f"Cad {what}s: content hash of the file; filled in when the study is expanded."),
    }


CASING = _obj("Dielectric casing around the external antenna: a box this much larger than the conductors on "
              "every side, or (shape cad) a solid read from an STL file.", {
                  "shape": _str("Casing shape: leave out (or box) for the box of thickness_mm, cad for an STL file.",
                                None, ["box", "cad"]),
                  "thickness_mm": _len("Box casings: wall thickness"),
                  **_shell_file_props("casing", "the antenna element's own origin"), **DIELECTRIC_PROPS},
              ["eps_r"], allOf=[NOT_BOTH_LOSSES,
                                {"if": {"properties": {"shape": {"const": "cad"}}, "required": ["shape"]},
                                 "then": {"required": ["file"], "not": {"required": ["thickness_mm"]}},
                                 "else": {"required": ["thickness_mm"],
                                          "not": {"anyOf": [{"required": [k]} for k in
                                                            ("file", "unit", "offset_mm", "rotation_deg",
                                                             "sha256")]}}}])

CAPSULE = _obj("Dielectric capsule around the implant antenna, centred on it.", {
    "shape": _str("Capsule shape (cad: a solid read from an STL file).", "cylinder", ["box", "cylinder", "cad"]),
    "size_mm": _vec("Box capsules: size along x, y, z (mm).", 3),
    "radius_mm": _len("Cylinder capsules: radius", zero_ok=True),
    "length_mm": _len("Cylinder capsules: length", zero_ok=True),
    "axis": _str("Cylinder capsules: axis direction.", "x", AXIS3),
    **_shell_file_props("capsule", "the implant's centre"),
    **DIELECTRIC_PROPS,
}, ["shape", "eps_r"], allOf=[NOT_BOTH_LOSSES,
                              {"if": {"properties": {"shape": {"const": "cad"}}, "required": ["shape"]},
                               "then": {"required": ["file"]},
                               "else": {"not": {"anyOf": [{"required": [k]} for k in
                                                          ("file", "unit", "offset_mm", "rotation_deg", "sha256")]}}}])

EXTERNAL_PLACE = {
    "position_mm": _vec("Lateral position (x, y) of the antenna centre (mm).", 2, [0.0, 0.0]),
    "standoff_mm": _num("Gap between the body surface and the lowest point of the antenna or its casing (mm); "
                        "must keep the antenna at z >= 0.", 0.0),
    "impedance_ohm": _num("Port reference impedance in ohm.", 50.0, exclusive=0),
    "casing": CASING,
}
IMPLANT_PLACE = {
    "depth_mm": _len("Depth of the implant centre below the body surface"),
    "position_mm": _vec("Lateral position (x, y) of the implant centre (mm).", 2, [0.0, 0.0]),
    "impedance_ohm": _num("Port reference impedance in ohm.", 50.0, exclusive=0),
    "capsule": CAPSULE,
}

ANCHOR = _str("Point the position is relative to: the implant centre, the body-surface origin (0, 0, 0) or the "
              "external antenna's feed.", "implant", ["implant", "surface", "external_feed"])
SECTION = {
    "radius_mm": _len("Round rod radius; 0 with side_mm 0 is a thin wire", 0.0, zero_ok=True),
    "side_mm": _len("Square rod side (rods along x or y only); excludes radius_mm", 0.0, zero_ok=True),
}
OFFSET = _vec("Offset (x, y, z) from the anchor (mm).", 3, [0.0, 0.0, 0.0])
INSULATION = _obj("Optional dielectric sleeve around each round rod (radius_mm > 0), its ends included, as rods in "
                  "tissue would be insulated; absent: bare metal in tissue.", {
    "thickness_mm": _len("Sleeve thickness over the rod's surface and beyond each end; the gap must exceed twice it"),
    "eps_r": _num("Relative permittivity of the sleeve.", minimum=1),
    "loss_tangent": _num("Loss tangent of the sleeve.", 0.0, minimum=0),
}, ["thickness_mm", "eps_r"])
AZIMUTH = _num("Rod direction in the plane parallel to the surface, degrees from the x axis.", 0.0)

CONCENTRATORS = {
    "rod": _obj("A single straight metal rod.", {
        "type": _typed("rod", "Single rod."), "anchor": ANCHOR,
        "start_mm": _vec("Start point relative to the anchor (mm).", 3),
        "stop_mm": _vec("End point relative to the anchor (mm).", 3), **SECTION, "conductor": CONDUCTOR,
    }, ["type", "start_mm", "stop_mm"]),
    "rod_pair": _obj("Two collinear rods with a gap centred on anchor + offset.", {
        "type": _typed("rod_pair", "Collinear rod pair."), "anchor": ANCHOR, "offset_mm": OFFSET,
        "azimuth_deg": AZIMUTH, "rod_length_mm": _len("Length of each rod"),
        "gap_mm": _len("Gap between the rods"), **SECTION, "conductor": CONDUCTOR, "insulation": INSULATION,
    }, ["type", "rod_length_mm", "gap_mm"]),
    "crossed_pairs": _obj("Two rod pairs sharing one centre, crossed at an angle.", {
        "type": _typed("crossed_pairs", "Crossed rod pairs."), "anchor": ANCHOR, "offset_mm": OFFSET,
        "azimuth_deg": AZIMUTH, "angle_deg": _num("Angle between the two pairs in degrees.", 90.0),
        "rod_length_mm": _len("Length of each rod"), "gap_mm": _len("Gap between the rods of a pair"),
        **SECTION, "conductor": CONDUCTOR, "insulation": INSULATION,
    }, ["type", "rod_length_mm", "gap_mm"]),
    "rod_array": _obj("Parallel rods (or gapped pairs) side by side, centred on anchor + offset.", {
        "type": _typed("rod_array", "Parallel rod array."), "anchor": ANCHOR, "offset_mm": OFFSET,
        "azimuth_deg": AZIMUTH, "count": _num("Number of rods.", 2, minimum=1, integer=True),
        "spacing_mm": _len("Centre-to-centre spacing"), "rod_length_mm": _len("Length of each rod"),
        "gap_mm": _len("Gap in each rod; 0 for continuous rods", 0.0, zero_ok=True),
        **SECTION, "conductor": CONDUCTOR,
    }, ["type", "count", "spacing_mm", "rod_length_mm"]),
    "ring": _obj("A flat metal ring, closed or split, centred on anchor + offset.", {
        "type": _typed("ring", "Ring."), "anchor": ANCHOR, "offset_mm": OFFSET,
        "radius_mm": _len("Centre-line radius"), "trace_width_mm": _len("Trace width"),
        "normal": _str("Normal of the ring's plane.", "z", AXIS3),
        "split_gap_mm": _len("Width of the cut; 0 for a closed ring", 0.0, zero_ok=True),
        "split_angle_deg": _num("Where the cut is, degrees in the ring's plane from its first axis.", -90.0),
        "thickness_mm": _len("Metal thickness; 0 for a sheet", 0.0, zero_ok=True),
        "segments": _num("Polygon segments around the ring.", 48, minimum=8, integer=True),
        "conductor": CONDUCTOR,
    }, ["type", "radius_mm", "trace_width_mm"]),
    "cad": _obj("A passive part read from an STL file (closed solid), metal or dielectric, placed by anchor + "
                "offset + rotation.", {
        "type": _typed("cad", "Part read from an STL file."), "anchor": ANCHOR,
        "file": _str("Path of the STL file, relative to the study file's folder (or absolute)."),
        "unit": _str("Length of one unit in the file.", "mm", ["m", "mm", "um"]),
        "offset_mm": _vec("Shift (x, y, z) of the part after rotation, from the anchor (mm).", 3, [0.0, 0.0, 0.0]),
        "rotation_deg": _vec("Rotation about x, then y, then z (degrees, about the file's origin).", 3,
                             [0.0, 0.0, 0.0]),
        "conductor": _str("Metal: 'pec' or a conductor declared under materials; default pec unless eps_r is "
                          "given."),
        "eps_r": _num("A dielectric part: relative permittivity (excludes conductor).", minimum=1),
        "loss_tangent": _num("A dielectric part: loss tangent tan(delta). Give this or sigma_S_per_m.", minimum=0),
        "sigma_S_per_m": _num("A dielectric part: conductivity in S/m. Give this or loss_tangent.", minimum=0),
        "sha256": _str("Content hash of the file; filled in when the study is expanded (give it to pin a version)."),
    }, ["type", "file"], allOf=[NOT_BOTH_LOSSES, {"not": {"required": ["conductor", "eps_r"]}}]),
}

MATERIALS = {
    "fixed_tissue": _obj("A tissue with fixed properties at every frequency.", {
        "type": _typed("fixed_tissue", "Fixed tissue."), "name": _str("Name the parts refer to."),
        "eps_r": _num("Relative permittivity.", minimum=1), "sigma_S_per_m": _num("Conductivity in S/m.", minimum=0),
        "density_kg_m3": _num("Mass density in kg/m^3 (for SAR).", exclusive=0),
    }, ["type", "name", "eps_r", "sigma_S_per_m", "density_kg_m3"]),
    "liquid": _obj("A tissue-simulating liquid given at a few frequencies (linear interpolation between them, "
                   "no extrapolation).", {
        "type": _typed("liquid", "Liquid."), "name": _str("Name the parts refer to."),
        "frequencies_MHz": {"description": "Strictly increasing frequencies of the data (MHz).", "type": "array",
                            "items": {"type": "number", "exclusiveMinimum": 0}, "minItems": 1},
        "eps_r": {"description": "Relative permittivity at each frequency.", "type": "array",
                  "items": {"type": "number", "minimum": 1}, "minItems": 1},
        "sigma_S_per_m": {"description": "Conductivity in S/m at each frequency.", "type": "array",
                          "items": {"type": "number", "minimum": 0}, "minItems": 1},
        "density_kg_m3": _num("Mass density in kg/m^3 (for SAR).", 1000.0, exclusive=0),
    }, ["type", "name", "frequencies_MHz", "eps_r", "sigma_S_per_m"]),
    "dielectric": _obj("A non-tissue dielectric (no SAR).", {
        "type": _typed("dielectric", "Dielectric."), "name": _str("Name the parts refer to."),
        **DIELECTRIC_PROPS,
    }, ["type", "name", "eps_r"], **NOT_BOTH_LOSSES),
    "conductor": _obj("A metal: finite conductivity, or a perfect conductor when sigma_S_per_m is left out.", {
        "type": _typed("conductor", "Conductor."), "name": _str("Name the parts refer to."),
        "sigma_S_per_m": _num("Conductivity in S/m; leave out for a perfect conductor.", exclusive=0),
    }, ["type", "name"]),
}


def scene_schema() -> dict:
    """The schema as a dict."""
    defs: dict[str, Any] = {"layer": LAYER}
    defs["layered_slab"] = _obj("Flat layers, finite in x and y, centred on x = y = 0.", {
        "type": _typed("layered_slab", "Layered slab."), "layers": LAYERS,
        "size_x_mm": _len("Lateral size along x"), "size_y_mm": _len("Lateral size along y"),
    }, ["type", "layers", "size_x_mm", "size_y_mm"])
    defs["layered_cylinder"] = _obj("A limb: concentric layers around a core; top of the skin at z = 0, axis at "
                                    "z = -outer radius.", {
        "type": _typed("layered_cylinder", "Layered cylinder."), "layers": LAYERS,
        "core": _obj("Innermost part of the limb.", {
            "tissue": _str("Material name of the core."), "radius_mm": _len("Core radius")},
            ["tissue", "radius_mm"]),
        "axis": _str("Direction of the cylinder axis.", "y", ["x", "y"]),
        "length_mm": _len("Length along the axis, centred on 0", 80.0),
    }, ["type", "layers", "core"])
    defs["liquid_box"] = _obj("Tissue-simulating liquid in a box with a dielectric shell on its top face "
                              "(depths are measured from the shell's outer face).", {
        "type": _typed("liquid_box", "Liquid box."),
        "liquid": _str("Material name of the liquid (usually a declared liquid)."),
        "size_x_mm": _len("Size along x"), "size_y_mm": _len("Size along y"),
        "depth_mm": _len("Depth of the box including the shell"),
        "shell": _obj("Shell on the exposed face.", {"thickness_mm": _len("Shell thickness"), **DIELECTRIC_PROPS},
                      ["thickness_mm", "eps_r"], **NOT_BOTH_LOSSES),
    }, ["type", "liquid", "size_x_mm", "size_y_mm", "depth_mm", "shell"])
    defs["label_volume"] = _obj("A segmented label volume (NumPy .npy or NIfTI .nii / .nii.gz): each voxel's integer "
                                "label stands for a tissue. The array's axes are x, y, z as stored; the tissue's "
                                "bounding box is centred on x = y = 0 with its top face at z = 0, then moved by "
                                "offset_mm.", {
        "type": _typed("label_volume", "Label volume."),
        "file": _str("Path of the .npy, .nii or .nii.gz file, relative to the study file's folder (or absolute)."),
        "voxel_size_mm": _vec("Voxel size along x, y, z (mm); taken from a NIfTI header when left out "
                              "(required for .npy).", 3),
        "labels": {"description": "Label -> tissue (a built-in tissue, a declared material, or air). Label 0 not "
                                  "listed is air; every other label in the volume must be listed.",
                   "type": "array", "minItems": 1,
                   "items": _obj("One label.", {
                       "label": _num("Integer label in the volume.", minimum=0, integer=True),
                       "tissue": _str("Material name, or air for background.")}, ["label", "tissue"])},
        "offset_mm": _vec("Shift (x, y, z) of the volume from its default place (mm).", 3, [0.0, 0.0, 0.0]),
        "crop_from_mm": _vec("Box of interest, lower corner, in the volume's own frame (mm from the first voxel's "
                             "corner); voxels whose centre lies in the box are kept.", 3),
        "crop_to_mm": _vec("Box of interest, upper corner, in the volume's own frame (mm).", 3),
        "sha256": _str("Content hash of the file; filled in when the study is expanded (give it to pin a version)."),
    }, ["type", "file", "labels"])
    defs["none"] = _obj("No phantom: the antennas, the implant antenna too, sit in air (checks against "
                        "free-space antenna theory); z = 0 is only the reference plane; no SAR.", {
        "type": _typed("none", "No phantom."),
    }, ["type"])
    defs["external_dipole"] = _obj("External dipole above the body.", {**_dipole_props(True), **EXTERNAL_PLACE},
                                   ["type", "length_mm", "feed_gap_mm"])
    defs["external_loop"] = _obj("External loop above the body.", {**LOOP_PROPS, **EXTERNAL_PLACE},
                                 ["type", "trace_width_mm", "feed_gap_mm"])
    defs["implant_dipole"] = _obj("Implanted dipole.", {**_dipole_props(False), **IMPLANT_PLACE},
                                  ["type", "length_mm", "feed_gap_mm", "depth_mm"])
    defs["implant_loop"] = _obj("Implanted loop.", {**LOOP_PROPS, **IMPLANT_PLACE},
                                ["type", "trace_width_mm", "feed_gap_mm", "depth_mm"])
    defs["external_cad"] = _obj("External antenna read from an STL file.", {**CAD_PROPS, **EXTERNAL_PLACE},
                                CAD_REQUIRED)
    defs["implant_cad"] = _obj("Implant antenna read from an STL file.", {**CAD_PROPS, **IMPLANT_PLACE},
                               CAD_REQUIRED + ["depth_mm"])
    board_req = ["type", "board_size_mm", "substrate", "feed_distance_mm", "depth_mm"]
    defs["implant_inverted_f"] = _obj("Implanted planar inverted-F antenna.", {**INVERTED_F_PROPS, **IMPLANT_PLACE},
                                      board_req + ["patch_length_mm", "patch_width_mm"])
    defs["implant_meander"] = _obj("Implanted meandered-line antenna.", {**MEANDER_PROPS, **IMPLANT_PLACE},
                                   board_req + ["legs", "leg_pitch_mm", "meander_height_mm", "trace_width_mm"])
    defs["implant_spiral"] = _obj("Implanted spiral antenna.", {**SPIRAL_PROPS, **IMPLANT_PLACE},
                                  board_req + ["turns", "outer_half_size_mm", "turn_pitch_mm", "trace_width_mm"])
    for k, v in CONCENTRATORS.items():
        defs[f"concentrator_{k}"] = v
    for k, v in MATERIALS.items():
        defs[f"material_{k}"] = v
    return {
        "$schema": "https://json-schema.org/draft/2020-12/schema",
        "$id": SCHEMA_ID,
        "title": "bodysweep scene section",
        "description": "The physical arrangement of a case in edge units: lengths in mm (keys ending _mm), "
                       "frequencies in MHz (_MHz). The body surface nearest the external antenna is z = 0, tissue "
                       "at z < 0. Converted to SI by bodysweep.geometry.units.from_edge_units and loaded by "
                       "bodysweep.geometry.scene.Scene.from_dict.",
        "type": "object",
        "additionalProperties": False,
        "required": ["phantom", "external"],
        "properties": {
            "phantom": _dispatch("The tissue phantom; type none leaves every antenna in air (free-space "
                                 "checks).", {k: k for k in ("layered_slab", "layered_cylinder", "liquid_box",
                                                             "label_volume", "none")}),
            "external": _dispatch("The external antenna (port 1).", {"dipole": "external_dipole",
                                                                    "loop": "external_loop",
                                                                    "cad": "external_cad"}),
            "implant": _dispatch("The implant antenna (port 2); leave out for a scene without implant.",
                                 {"dipole": "implant_dipole", "loop": "implant_loop",
                                  "inverted_f": "implant_inverted_f", "meander": "implant_meander",
                                  "spiral": "implant_spiral", "cad": "implant_cad"}),
            "concentrators": {"description": "Passive metal (or, cad parts, dielectric) parts in tissue, placed "
                                             "relative to an anchor.",
                              "type": "array", "default": [],
                              "items": _dispatch("One concentrator.",
                                                 {k: f"concentrator_{k}" for k in CONCENTRATORS})},
            "materials": {"description": "Declared materials the parts refer to by name (besides the built-in "
                                         "tissues and 'pec').", "type": "array", "default": [],
                          "items": _dispatch("One material.", {k: f"material_{k}" for k in MATERIALS})},
            "min_clearance_mm": _num("Smallest allowed distance between a concentrator and the implant's capsule "
                                     "(mm).", 0.5, minimum=0),
        },
        "$defs": defs,
    }


def schema2text(schema: dict) -> str:
    return json.dumps(schema, indent=2, sort_keys=False) + "\n"


if __name__ == "__main__":  # pragma: no cover
    SCHEMA_PATH.write_text(schema2text(scene_schema()), encoding="utf-8")
    print(f"wrote {SCHEMA_PATH}")
