"""The built wheel on its own: installed (not editable) into a fresh virtual environment outside the
checkout, its console script runs ``--version``, ``check``, ``plan`` and a one-case ``run`` from a
folder that is not the checkout, and every module, schema, rule file, profile and the Snakefile comes
from the installed package.

Set-up of the fresh environment (common practice for testing an installed package without re-fetching
its dependencies): ``python -m venv --without-pip``; the wheel is installed with the development
environment's pip (``pip --python``) and ``--no-deps``. The dependencies (numpy, Snakemake, ...) are
the same pinned set the development environment already holds, so a ``.pth`` file puts that
environment's site-packages folder on the path, behind the new environment's own (installing them again
from an index would take minutes and a network, and prove nothing about our wheel). Path entries of a
``.pth`` file are not scanned for further ``.pth`` files (Python documentation, ``site`` module), so the
editable install of the checkout registered there stays inactive; the openEMS modules come from
``.engine/py`` through a second line, as ``scripts/setup.sh`` does. The test then checks that no path
entry lies in the checkout and that every ``bodysweep`` module was loaded from the new environment.
"""
import csv
import json
import os
import shutil
import subprocess
import sys
import sysconfig
import zipfile
from pathlib import Path

import pytest
import yaml

pytestmark = [pytest.mark.pipeline, pytest.mark.timeout(900)]

CHECKOUT = Path(__file__).resolve().parents[2]
TINY = CHECKOUT / "tests" / "pipeline" / "data" / "tiny.yaml"
ENGINE_PY = CHECKOUT / ".engine" / "py"

#: what the package is built from
SOURCE_FILES = ("pyproject.toml", "setup.py", "README.md", "api", "geometry", "workflow")
#: package data the installed package must hold (paths inside the wheel)
DATA_FILES = ("bodysweep/workflow/Snakefile", "bodysweep/workflow/schema/study.schema.json",
              "bodysweep/workflow/schema/solver.schema.json", "bodysweep/geometry/data/scene.schema.json",
              "bodysweep/geometry/data/tissues.json", "bodysweep/workflow/profiles/local/config.yaml",
              "bodysweep/workflow/profiles/slurm/config.yaml")


def _source_modules() -> set[str]:
    """Every module of the checkout under its import name (setup.py's folder mapping)."""
    out = set()
    for name, folder in (("bodysweep", "api"), ("bodysweep.geometry", "geometry"), ("bodysweep.workflow", "workflow")):
        for p in (CHECKOUT / folder).rglob("*.py"):
            rel = p.relative_to(CHECKOUT / folder).with_suffix("")
            parts = [x for x in rel.parts if x != "__init__"]
            if all((CHECKOUT / folder / Path(*rel.parts[:k]) / "__init__.py").exists() for k in range(1, len(rel.parts))):
                out.add(".".join([name, *parts]))
    return out


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """``(venv folder, wheel path)``: the wheel built from the checkout, installed into a fresh venv."""
    base = tmp_path_factory.mktemp("wheel")
    # built from a copy of the files a source distribution holds: a build/ folder left in the checkout
    # by an earlier build could otherwise carry modules that no longer exist into the wheel
    src = base / "src"
    for name in SOURCE_FILES:
        if (CHECKOUT / name).is_dir():
            shutil.copytree(CHECKOUT / name, src / name, ignore=shutil.ignore_patterns("__pycache__"))
        else:
            (src / name).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(CHECKOUT / name, src / name)
    wheels = base / "dist"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(wheels), str(src)],
                   check=True, capture_output=True, text=True, timeout=600)
    (wheel,) = wheels.glob("bodysweep-*.whl")
    venv = base / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], check=True, timeout=120)
    py = venv / "bin" / "python"
    subprocess.run([sys.executable, "-m", "pip", "--python", str(py), "install", "--no-deps", "-q", str(wheel)],
                   check=True, capture_output=True, text=True, timeout=600)
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          check=True, capture_output=True, text=True).stdout.strip()
    deps = sysconfig.get_paths()["purelib"]  # the development environment's dependencies
    Path(site, "bodysweep_deps.pth").write_text(f"{deps}\n{ENGINE_PY}\n")
    return venv, wheel


def _run(venv: Path, args: list[str], cwd: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["PATH"] = f"{venv / 'bin'}{os.pathsep}{env.get('PATH', '')}"
    return subprocess.run(args, cwd=str(cwd), env=env, capture_output=True, text=True, timeout=timeout)


def test_wheel_holds_every_module_and_data_file(installed):
    _, wheel = installed
    names = set(zipfile.ZipFile(wheel).namelist())
    modules = {n[:-3].replace("/", ".").removesuffix(".__init__") for n in names if n.endswith(".py")}
    missing = _source_modules() - modules
    assert not missing, f"modules of the checkout missing from the wheel: {sorted(missing)}"
    for sub in ("study", "solver", "post", "reference"):  # the subpackages the issue names
        assert f"bodysweep/workflow/{sub}/__init__.py" in names
    assert {f"bodysweep/workflow/rules/{p.name}" for p in (CHECKOUT / "workflow" / "rules").glob("*.smk")} <= names
    assert not [n for n in DATA_FILES if n not in names]


def test_installed_package_is_used_not_the_checkout(installed, tmp_path):
    venv, _ = installed
    probe = ("import importlib, json, pkgutil, sys, bodysweep, bodysweep.workflow.pipeline as p\n"
             "mods = [m.name for m in pkgutil.walk_packages(bodysweep.__path__, 'bodysweep.')]\n"
             "files = {m: importlib.import_module(m).__file__ for m in mods}\n"
             "print(json.dumps({'path': sys.path, 'files': files, 'snakefile': str(p.SNAKEFILE),"
             " 'profiles': str(p.PROFILES_DIR)}))\n")
    r = _run(venv, [str(venv / "bin" / "python"), "-c", probe], tmp_path)
    assert r.returncode == 0, r.stderr
    info = json.loads(r.stdout)
    inside = [p for p in info["path"] if p and Path(p).resolve().is_relative_to(CHECKOUT)
              and not Path(p).resolve().is_relative_to(ENGINE_PY) and ".venv" not in Path(p).parts]
    assert not inside, f"the fresh environment sees the checkout: {inside}"
    assert len(info["files"]) >= len(_source_modules()) - 1  # walk_packages lists modules, not the top package
    stray = {m: f for m, f in info["files"].items() if not Path(f).resolve().is_relative_to(venv.resolve())}
    assert not stray, f"modules loaded from outside the installed package: {stray}"
    for key in ("snakefile", "profiles"):
        assert Path(info[key]).resolve().is_relative_to(venv.resolve()) and Path(info[key]).exists()


def test_console_script_from_another_folder(installed, tmp_path):
    venv, _ = installed
    exe = str(venv / "bin" / "bodysweep")
    study = tmp_path / "one_case.yaml"
    spec = yaml.safe_load(TINY.read_text())
    spec["study"] = "wheel_tiny"
    spec["sweep"]["blocks"] = [{"grid": {"depth": [6]}}]
    study.write_text(yaml.safe_dump(spec, sort_keys=False))

    r = _run(venv, [exe, "--version"], tmp_path)
    assert r.returncode == 0 and r.stdout.startswith("bodysweep 0.1.0"), r.stdout + r.stderr
    assert "openEMS unavailable" not in r.stdout, r.stdout  # the engine modules are found

    r = _run(venv, [exe, "check", study.name], tmp_path)
    assert r.returncode == 0 and "1 cases" in r.stdout, r.stdout + r.stderr
    r = _run(venv, [exe, "plan", study.name, "--accept-cost"], tmp_path)
    assert r.returncode == 0 and "total: 1 cases" in r.stdout and " to solve " in r.stdout, r.stdout + r.stderr

    r = _run(venv, [exe, "run", study.name, "--cores", "1", "--accept-cost"], tmp_path, timeout=800)
    assert r.returncode == 0, r.stdout + r.stderr
    root = tmp_path / "results" / "wheel_tiny"
    with open(root / "tables" / "summary.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 1 and rows[0]["status"] in ("ok", "warning"), rows
    assert (root / "report" / "report.md").exists()

    # the analysis API of the installed package reads the same results
    probe = ("import bodysweep\n"
             f"t = bodysweep.load_tables({study.name!r})\n"
             f"v = bodysweep.load_sar_volume({study.name!r}, 0, mass_g=10)\n"
             "print(len(t['summary']), t['summary']['case_id'][0] == v.case_id, v.status)\n")
    r = _run(venv, [str(venv / "bin" / "python"), "-c", probe], tmp_path)
    out = r.stdout.split()
    assert r.returncode == 0 and out[:2] == ["1", "True"] and out[2] in ("ok", "warning"), r.stdout + r.stderr
