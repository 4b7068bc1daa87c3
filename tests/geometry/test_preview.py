"""Preview PNGs for one scene of each phantom kind (written to tests/output/ for a look) and their sections."""
from pathlib import Path

import matplotlib.image as mpimg
import numpy as np
import pytest

from bodysweep.geometry import examples
from bodysweep.geometry.preview import material_colours, plane_section, preview_png
from bodysweep.geometry.scene import Scene

OUT = Path(__file__).resolve().parents[1] / "output"


@pytest.mark.parametrize("make", [examples.forearm_capsule_scene, examples.slab_dipole_scene,
                                  examples.liquid_box_scene])
def test_preview_png_is_written(make):
    OUT.mkdir(exist_ok=True)
    m = Scene.from_edge_dict(make()).build(403e6)
    path = preview_png(m, OUT / f"preview_{make.__name__}.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification, ISO/IEC 15948)
    img = mpimg.imread(path)
    assert img.shape[1] > 1000 and img.shape[0] > 400
    assert len(np.unique(img.reshape(-1, img.shape[2])[:, :3], axis=0)) > 8  # more than a blank canvas
    assert len(set(material_colours(m))) >= len([x for x in m.materials if x.kind == "dielectric"])


def test_section_follows_layers_and_priorities():
    m = Scene.from_edge_dict(examples.slab_dipole_scene(10.0)).build(915e6)
    names = [x.name for x in m.materials]
    img, h, v = plane_section(m, "y", 0.0, (-0.045, 0.045), (-0.04, 0.01), n_px=450)
    assert h[1] - h[0] == pytest.approx(0.0002)

    def at(x, z):
        return "air" if img[np.argmin(abs(v - z)), np.argmin(abs(h - x))] < 0 else \
            names[img[np.argmin(abs(v - z)), np.argmin(abs(h - x))]]
    # hand calculation from the example: skin 0-2 mm, fat 2-6 mm, muscle below; capsule 13 x 4 x 4 mm at -10 mm
    assert [at(0.02, -0.001), at(0.02, -0.004), at(0.02, -0.02), at(0.0, 0.008), at(0.0, -0.0085),
            at(0.003, -0.01), at(0.0425, -0.01)] == \
        ["skin_dry", "fat_not_infiltrated", "muscle", "air", "implant_capsule", "pec", "air"]


def test_preview_through_a_given_point(tmp_path):
    m = Scene.from_edge_dict(examples.forearm_capsule_scene()).build(433e6)
    p = preview_png(m, tmp_path / "x.tmp", centre=(0.0, 0.0, -0.025))
    assert p.read_bytes()[:4] == b"\x89PNG"
