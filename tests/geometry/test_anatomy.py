"""Label-volume phantoms: reading, checks, placement, cropping, the merge of voxels into boxes."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bodysweep.geometry.anatomy import LabelVolume, change_faces, fewest_boxes, merge_boxes
from bodysweep.geometry.phantoms import phantom_from_dict
from bodysweep.geometry.primitives import VoxelBox

TABLE = [{"label": 1, "tissue": "skin_wet"}, {"label": 2, "tissue": "muscle"}]


def slab_labels(nx=10, ny=8, nz=10, skin=1) -> np.ndarray:
    """A two-layer slab: top ``skin`` voxels label 1, the rest label 2 (z is the last axis, top = high z)."""
    a = np.full((nx, ny, nz), 2, dtype=np.uint8)
    a[:, :, nz - skin:] = 1
    return a


def write_npy(path: Path, arr) -> str:
    np.save(path, np.asarray(arr))
    return str(path)


def volume(path, voxel_m=(4e-3, 5e-3, 2e-3), labels=TABLE, **kw) -> LabelVolume:
    return phantom_from_dict({"type": "label_volume", "file": str(path), "voxel_size_m": list(voxel_m),
                              "labels": labels, **kw})


def _rebuild(shape, lo, hi, v, fill=-1):
    out = np.full(shape, fill)
    for a, b, val in zip(lo, hi, v):
        block = out[a[0]:b[0], a[1]:b[1], a[2]:b[2]]
        assert np.all(block == fill), "boxes overlap"
        out[a[0]:b[0], a[1]:b[1], a[2]:b[2]] = val
    return out


@pytest.mark.parametrize("order", [(0, 1, 2), (1, 2, 0), (2, 0, 1), (2, 1, 0)])
def test_merged_boxes_cover_every_voxel_exactly_once(order):
    rng = np.random.default_rng(3)
    ids = rng.integers(-1, 3, size=(7, 9, 6))
    ids[2:6, 1:8, :] = 1  # a block that merges
    lo, hi, v = merge_boxes(ids, -1, order)
    assert np.array_equal(_rebuild(ids.shape, lo, hi, v), ids)  # exact partition (analytic: each voxel once)


def test_a_slab_becomes_one_box_per_layer(tmp_path):
    """Hand count: a two-layer slab is two boxes whatever the voxel count; their size is the layer's."""
    ph = volume(write_npy(tmp_path / "slab.npy", slab_labels(skin=1)))
    b = ph.build()
    assert len(b.primitives) == 2 and all(isinstance(p, VoxelBox) for p in b.primitives)
    sizes = {p.material: np.subtract(p.bounds()[1], p.bounds()[0]) for p in b.primitives}
    np.testing.assert_allclose(sizes["skin_wet"], [40e-3, 40e-3, 2e-3])  # 10 x 4 mm, 8 x 5 mm, 1 x 2 mm
    np.testing.assert_allclose(sizes["muscle"], [40e-3, 40e-3, 18e-3])
    # placement: tissue centred on x = y = 0, top at z = 0 (the phantom convention)
    np.testing.assert_allclose(b.body_bounds, ((-0.02, -0.02, -0.02), (0.02, 0.02, 0.0)), atol=1e-15)
    # mesh lines at the faces where the tissue changes: z = -20, -2, 0 mm, x = +-20 mm, y = +-20 mm
    lines = {a: sorted(h.lo for h in b.hints if h.axis == a) for a in "xyz"}
    np.testing.assert_allclose(lines["z"], [-0.02, -0.002, 0.0], atol=1e-15)
    np.testing.assert_allclose(lines["x"], [-0.02, 0.02], atol=1e-15)


def test_box_count_and_tissue_volume_of_the_forearm():
    """The synthetic forearm: voxel count x voxel volume = summed box volume per tissue (analytic)."""
    path = Path(__file__).resolve().parents[2] / "studies" / "parts" / "segmented_forearm.npy"
    arr = np.load(path)
    labels = [{"label": 1, "tissue": "skin_wet"}, {"label": 2, "tissue": "fat_not_infiltrated"},
              {"label": 3, "tissue": "muscle"}, {"label": 4, "tissue": "bone_cortical"}]
    ph = volume(path, (2e-3, 2e-3, 2e-3), labels)
    b = ph.build()
    vox = 8e-9
    for row in labels:
        got = sum(np.prod(np.subtract(p.bounds()[1], p.bounds()[0])) for p in b.primitives if p.material == row["tissue"])
        assert got == pytest.approx(np.count_nonzero(arr == row["label"]) * vox, rel=1e-9)
    assert len(b.primitives) < 200  # the limb is extruded along y: runs along y make few boxes (measured 105)


def test_change_faces_of_a_single_voxel():
    ids = np.full((3, 3, 3), -1)
    ids[1, 1, 1] = 0
    assert change_faces(ids, 0).tolist() == [1, 2]  # its two faces along x (analytic)


def test_contains_and_tissue_at(tmp_path):
    ph = volume(write_npy(tmp_path / "slab.npy", slab_labels()))
    pts = [[0, 0, -1e-3], [0, 0, -3e-3], [0, 0, 1e-3], [0.03, 0, -5e-3]]
    assert ph.contains(pts).tolist() == [True, True, False, False]
    assert ph.tissue_at(pts) == ["skin_wet", "muscle", "air", "air"]


def test_crop_keeps_the_anatomy_in_place(tmp_path):
    f = write_npy(tmp_path / "slab.npy", slab_labels())
    full = volume(f)
    crop = volume(f, crop_from_m=[8e-3, 0, 0], crop_to_m=[32e-3, 40e-3, 20e-3])
    e_full, e_crop = full.voxel_edges(), crop.voxel_edges()
    assert len(e_crop[0]) == 7  # voxels 2..7 along x (centres 10 .. 30 mm inside 8 .. 32 mm)
    np.testing.assert_allclose(e_crop[0], e_full[0][2:9])  # the same faces: nothing moved
    assert crop.build().body_bounds[0][0] == pytest.approx(-0.012)


def test_offset_moves_the_volume(tmp_path):
    ph = volume(write_npy(tmp_path / "slab.npy", slab_labels()), offset_m=[1e-3, 0, -2e-3])
    assert ph.build().body_bounds[1][2] == pytest.approx(-2e-3)
    assert ph.build().body_bounds[0][0] == pytest.approx(-19e-3)


def test_round_trip_keeps_the_hash(tmp_path):
    ph = volume(write_npy(tmp_path / "slab.npy", slab_labels()))
    d = ph.to_dict()
    assert len(d["sha256"]) == 64
    again = phantom_from_dict(d)
    assert again == ph and again.to_dict() == d


def test_nifti_voxel_size_from_the_header(tmp_path):
    nib = pytest.importorskip("nibabel")
    img = nib.Nifti1Image(slab_labels().astype(np.int16), np.diag([4.0, 5.0, 2.0, 1.0]))
    img.header.set_xyzt_units("mm")
    for name in ("slab.nii", "slab.nii.gz"):
        nib.save(img, tmp_path / name)
        ph = phantom_from_dict({"type": "label_volume", "file": str(tmp_path / name), "labels": TABLE})
        np.testing.assert_allclose(ph.voxel_size_m, [4e-3, 5e-3, 2e-3])
        assert len(ph.build().primitives) == 2
    with pytest.raises(ValueError, match="differs from the file header"):
        volume(tmp_path / "slab.nii", voxel_m=(2e-3, 2e-3, 2e-3))


@pytest.mark.parametrize("kind,words", [
    ("unlisted", "label(s) 7 (1 voxels) have no tissue"),
    ("float", "non-integer labels"),
    ("twod", "three axes"),
    ("corrupt", "not a readable .npy file"),
    ("missing", "no such file"),
    ("huge", "check voxel_size_mm"),
    ("tiny", "check voxel_size_mm"),
    ("no_voxel_size", "voxel_size_m is required"),
    ("crop_outside", "holds no voxel"),
    ("all_air", "no voxel holds a tissue"),
])
def test_bad_volumes_are_refused_naming_the_file(tmp_path, kind, words):
    f = tmp_path / "vol.npy"
    arr = slab_labels()
    kw: dict = {}
    voxel = (4e-3, 5e-3, 2e-3)
    if kind == "unlisted":
        arr[0, 0, 0] = 7
    elif kind == "float":
        arr = arr.astype(float) + 0.5
    elif kind == "twod":
        arr = arr[:, :, 0]
    elif kind == "huge":
        voxel = (4.0, 5.0, 2.0)  # metres typed where mm were meant: 1000 times too big
    elif kind == "tiny":
        voxel = (4e-6, 5e-6, 2e-6)
    elif kind == "crop_outside":
        kw = {"crop_from_m": [0.1, 0, 0], "crop_to_m": [0.2, 0.04, 0.02]}
    elif kind == "all_air":
        arr = np.zeros_like(arr)
    if kind == "corrupt":
        f.write_bytes(b"\x93NUMPY garbage")
    elif kind != "missing":
        write_npy(f, arr)
    with pytest.raises(ValueError) as info:
        if kind == "no_voxel_size":
            phantom_from_dict({"type": "label_volume", "file": str(f), "labels": TABLE})
        else:
            volume(f, voxel, **kw)
    text = str(info.value)
    assert words in text and str(f) in text and "\n" not in text, text


def test_duplicate_and_malformed_label_rows(tmp_path):
    f = write_npy(tmp_path / "slab.npy", slab_labels())
    with pytest.raises(ValueError, match="given twice"):
        volume(f, labels=TABLE + [{"label": 1, "tissue": "fat_not_infiltrated"}])
    with pytest.raises(ValueError, match="label must be an integer"):
        volume(f, labels=[{"label": 1.5, "tissue": "skin_wet"}])


def test_capsule_straddling_two_tissues_is_warned(tmp_path):
    """The arrangement check names the two tissues a capsule lies in (hand placement: 2 mm skin over muscle)."""
    from bodysweep.geometry.arrangement import implant_interface_warnings
    from bodysweep.geometry.scene import Scene
    from bodysweep.geometry.units import from_edge_units

    f = write_npy(tmp_path / "slab.npy", slab_labels())
    scene = {"phantom": {"type": "label_volume", "file": f, "voxel_size_mm": [4, 5, 2], "labels": TABLE},
             "external": {"type": "dipole", "length_mm": 30, "feed_gap_mm": 2, "axis": "x", "standoff_mm": 6},
             "implant": {"type": "dipole", "length_mm": 10, "feed_gap_mm": 2, "axis": "x", "depth_mm": 3,
                         "capsule": {"shape": "box", "size_mm": [13, 4, 4], "eps_r": 2.9, "loss_tangent": 0.005}}}
    warned = implant_interface_warnings(Scene.from_dict(from_edge_units(scene)))  # capsule from -1 to -5 mm
    assert len(warned) == 1 and "skin_wet" in warned[0] and "muscle" in warned[0], warned
    scene["implant"]["depth_mm"] = 8  # from -6 to -10 mm: all muscle
    assert implant_interface_warnings(Scene.from_dict(from_edge_units(scene))) == []


def test_material_index_fast_path_for_boxes_matches_the_plain_priority_rule():
    """material_index tests boxes on a sorted-x window only; the answer must be the per-primitive rule's."""
    import yaml

    from bodysweep.geometry.raster import inside, material_index
    from bodysweep.geometry.scene import Scene
    from bodysweep.geometry.units import from_edge_units

    studies = Path(__file__).resolve().parents[2] / "studies"
    scene = yaml.safe_load((studies / "segmented_forearm.yaml").read_text())["scene"]
    scene["phantom"]["file"] = str(studies / scene["phantom"]["file"])
    model = Scene.from_dict(from_edge_units(scene)).build(403e6)
    rng = np.random.default_rng(5)
    pts = rng.uniform([-0.04, -0.05, -0.06], [0.04, 0.05, 0.01], (20000, 3))
    pts[:2000, 0] = rng.choice([-0.03, -0.012, 0.0, 0.02], 2000)  # points on voxel faces too
    names = [m.name for m in model.materials]
    best, ref = np.full(len(pts), -np.inf), np.full(len(pts), -1)
    for prim in model.primitives:
        hit = inside(prim, pts, 0.0) & (prim.priority >= best)
        best[hit] = prim.priority
        ref[hit] = names.index(prim.material)
    got = material_index(model, pts)
    assert np.array_equal(got, ref)
    assert len(set(got[got >= 0])) >= 4  # skin, fat, muscle, bone (and the antennas' metal) were hit
