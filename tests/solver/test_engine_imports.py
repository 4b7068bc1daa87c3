"""Cheap engine imports: ``engine.load()`` defers pylab, ``engine_versions()`` does not import CSXCAD.

Each check runs in a fresh interpreter so that earlier imports of the test session do not hide a load.
Reference: matplotlib's own ``pylab`` module (the deferred stand-in must hand out its objects) and the
versions file the set-up script writes beside the CSXCAD package.
"""
from __future__ import annotations

import json
import subprocess
import sys


def _run(code: str) -> dict:
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stderr
    return json.loads(p.stdout.strip().splitlines()[-1])


def test_load_does_not_import_pyplot_and_pylab_still_works():
    out = _run(
        "import sys, json\n"
        "from bodysweep.workflow.solver import engine\n"
        "CSX, EMS = engine.load()\n"
        "before = 'matplotlib.pyplot' in sys.modules\n"
        "from CSXCAD import SmoothMeshLines\n"
        "import pylab\n"
        "fig = pylab.figure\n"
        "import matplotlib.pyplot as plt\n"
        "print(json.dumps({'before': before, 'same': fig is plt.figure,\n"
        "                  'csx': CSX.__name__, 'smooth_plt': SmoothMeshLines.plt.figure is plt.figure}))\n")
    assert out["before"] is False  # pyplot not imported by loading the engine
    assert out["same"] is True  # matplotlib's pylab: the same pyplot.figure object (matplotlib docs, pylab)
    assert out["smooth_plt"] is True  # CSXCAD's own reference works too
    assert out["csx"] == "ContinuousStructure"


def test_engine_versions_reads_the_setup_file_without_importing_csxcad():
    out = _run(
        "import sys, json\n"
        "from bodysweep.workflow.solver import engine\n"
        "v = engine.engine_versions()\n"
        "imported = 'CSXCAD' in sys.modules\n"
        "import CSXCAD\n"
        "from pathlib import Path\n"
        "f = Path(CSXCAD.__file__).resolve().parent.parent / 'bodysweep_engine_versions.json'\n"
        "ref = json.loads(f.read_text()) if f.exists() else {'openEMS': 'unknown', 'CSXCAD': 'unknown'}\n"
        "print(json.dumps({'v': v, 'ref': ref, 'imported': imported}))\n")
    assert out["imported"] is False
    assert out["v"] == out["ref"]  # the file the set-up script writes beside the package
