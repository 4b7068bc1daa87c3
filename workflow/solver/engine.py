"""Access to the openEMS / CSXCAD Python modules (the only module that imports them directly).

The modules come from Debian's ``python3-openems`` and are placed in ``.engine/py`` by the set-up
script; a ``.pth`` file in the virtual environment puts that folder on ``sys.path``.
Debian's ``openEMS/ports.py`` helper is never imported (it uses the removed ``np.float``).
"""
from __future__ import annotations

import json
from pathlib import Path


def load():
    """Return ``(ContinuousStructure, openEMS)`` classes, with a set-up hint if they are missing."""
    try:
        from CSXCAD import ContinuousStructure
        from openEMS import openEMS
    except ImportError as exc:  # pragma: no cover - depends on machine set-up
        raise ImportError(
            f"openEMS Python modules not importable ({exc}); run `bash tasks.sh setup` from the repository root"
        ) from exc
    return ContinuousStructure, openEMS


def engine_versions() -> dict[str, str]:
    """Versions of the openEMS engine and CSXCAD as installed by the set-up script."""
    import CSXCAD

    f = Path(CSXCAD.__file__).resolve().parent.parent / "bodysweep_engine_versions.json"
    if f.exists():
        return json.loads(f.read_text())
    return {"openEMS": "unknown", "CSXCAD": "unknown"}
