"""``bodysweep plan``: per-case states and estimates without importing the solver engine."""
import subprocess
import sys
from pathlib import Path

TINY = Path(__file__).parent / "data" / "tiny.yaml"


def test_plan_does_not_import_openems(tmp_path):
    code = ("import sys; from bodysweep.workflow import cli; rc = cli.main(['plan', sys.argv[1]]); "
            "bad = [m for m in ('CSXCAD', 'openEMS') if m in sys.modules]; print('IMPORTED', bad); sys.exit(rc)")
    p = subprocess.run([sys.executable, "-c", code, str(TINY)], cwd=tmp_path, capture_output=True, text=True)
    assert p.returncode == 0, p.stderr
    assert "IMPORTED []" in p.stdout
    rows = [ln for ln in p.stdout.splitlines() if "f=915MHz" in ln]
    assert len(rows) == 2 and all(" to solve " in r for r in rows)
    # the cell count comes from the automatic mesh of each case (a positive integer)
    cells = [int(r.split("to solve")[1].split()[0]) for r in rows]
    assert all(c > 1000 for c in cells)
    assert "total: 2 cases" in p.stdout
    assert not (tmp_path / "results").exists()  # planning writes nothing
