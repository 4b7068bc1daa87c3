"""The work of each pipeline rule, one function per rule, each safe to call on any case.

A failing case must not stop the others, so :func:`build_scene`, :func:`solve` and :func:`finish` never
raise for a problem of the case itself: they write a failure record (``status: failed`` with a reason)
in the file the next step reads, and the next step passes the failure on instead of running. Only a
problem of the pipeline (a missing ``case.json``) raises.

Each rule of ``workflow/rules/*.smk`` calls one of these through ``python -m bodysweep.workflow.steps
<verb> ...`` (a fresh interpreter per job: an engine crash ends that job only).
"""
from __future__ import annotations

import argparse
import json
import sys
import time
import traceback
from pathlib import Path

from .atomic import atomic_path, json_text, write_if_changed, write_json
from .layout import StudyLayout

FAILED = "failed"


def _one_line(exc: BaseException) -> str:
    text = " ".join(f"{type(exc).__name__}: {exc}".split())
    return text[:500]


def _read(path: Path) -> dict:
    with open(path, "rb") as fh:
        return json.load(fh)


def _failed(d: dict | None) -> bool:
    return isinstance(d, dict) and d.get("status") == FAILED


def _placeholder_png(path: Path, text: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig = plt.figure(figsize=(6, 2))
    fig.text(0.02, 0.5, "\n".join(text[i:i + 90] for i in range(0, min(len(text), 360), 90)), va="center",
             fontsize=8)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=80)
    plt.close(fig)


# -- scene ---------------------------------------------------------------------------------------------
def _inputs(folder: Path) -> dict:
    """``solve.json`` of a solve folder in the store, else ``case.json`` of a case folder."""
    return _read(folder / "solve.json") if (folder / "solve.json").exists() else _read(folder / "case.json")


def build_scene(case_dir: str | Path) -> dict:
    """Build the scene at its frequency: ``scene.json`` (``SceneModel.to_dict()``) and ``preview.png``.

    ``case_dir`` is a solve folder of the store (``solve.json``) or a case folder (``case.json``).
    On a geometry error ``scene.json`` holds ``{"status": "failed", "reason": ...}`` and the preview
    shows the reason. Returns what was written to ``scene.json``.
    """
    from .store import solve_lock

    case_dir = Path(case_dir)
    case = _inputs(case_dir)
    with solve_lock(case_dir):  # not while a solve job of another study's run works in this folder
        return _build_scene_locked(case_dir, case)


def _build_scene_locked(case_dir: Path, case: dict) -> dict:
    try:
        from bodysweep.geometry.scene import Scene

        model = Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))
        out = model.to_dict()
        write_json(case_dir / "scene.json", out)
        try:
            from bodysweep.geometry.preview import preview_png

            with atomic_path(case_dir / "preview.png") as tmp:
                preview_png(model, tmp)
        except Exception as exc:  # a preview problem is not a case failure
            _placeholder_png(case_dir / "preview.png", f"preview failed: {_one_line(exc)}")
        return out
    except Exception as exc:
        traceback.print_exc()
        out = {"status": FAILED, "reason": f"scene: {_one_line(exc)}"}
        write_json(case_dir / "scene.json", out)
        _placeholder_png(case_dir / "preview.png", out["reason"])
        return out


# -- solve ---------------------------------------------------------------------------------------------
def solve(case_dir: str | Path, port: int, threads: int = 1) -> dict:
    """Run the FDTD excitation of ``port``; always leaves ``excite_<port>/status.json``.

    ``case_dir`` is a solve folder of the store (or a case folder). The whole step holds the folder's
    lock (:func:`.store.solve_lock`); an excitation already finished there with status ok (by another
    study's run meanwhile, or kept in ``outcome.json`` when Snakemake removed ``status.json`` to redo
    the job) is taken as it is, not solved again. A failed scene or solver error gives a status
    ``{"status": "failed", "reason": ...}``.
    """
    from .store import keep_outcome, kept_outcome, solve_lock

    case_dir = Path(case_dir)
    with solve_lock(case_dir):
        kept = kept_outcome(case_dir, port)
        if kept is not None:
            print(f"excitation of port {port} already solved in {case_dir}: taken as it is")
            # same content keeps the file and its modification time (finished cases stay finished)
            write_if_changed(case_dir / f"excite_{int(port)}" / "status.json", json_text(kept))
            return kept
        out = _solve_unlocked(case_dir, port, threads)
        keep_outcome(case_dir, port, out)
        return out


def _solve_unlocked(case_dir: Path, port: int, threads: int) -> dict:
    status_path = case_dir / f"excite_{int(port)}" / "status.json"
    scene = None
    try:
        scene = _read(case_dir / "scene.json")
    except FileNotFoundError:  # removed meanwhile by another study's scene job: the solver builds it itself
        scene = None
    except (OSError, ValueError) as exc:
        scene = {"status": FAILED, "reason": f"scene.json unreadable: {_one_line(exc)}"}
    if _failed(scene):
        out = {"status": FAILED, "reason": scene.get("reason", "scene failed"), "port": int(port)}
        write_json(status_path, out)
        return out
    t0 = time.monotonic()
    try:
        from .solver.backend import get_backend

        get_backend().solve_excitation(case_dir, int(port), int(threads))
    except Exception as exc:
        traceback.print_exc()
        out = {"status": FAILED, "reason": f"solve port {port}: {_one_line(exc)}", "port": int(port),
               "runtime_s": time.monotonic() - t0}
        write_json(status_path, out)
        return out
    try:
        return _read(status_path)
    except (OSError, ValueError) as exc:
        out = {"status": FAILED, "reason": f"solve port {port}: no readable status.json ({_one_line(exc)})",
               "port": int(port)}
        write_json(status_path, out)
        return out


# -- finish --------------------------------------------------------------------------------------------
def finish(case_dir: str | Path, ports: list[int], solve_dir: str | Path | None = None) -> dict:
    """S-matrix, SAR and link budget of a case; always leaves ``metrics.json``.

    ``solve_dir``: the case's solve folder in the store (default: the case folder itself). When an
    excitation failed, ``metrics.json`` is a failure record carrying that excitation's reason.
    """
    case_dir = Path(case_dir)
    solve_dir = Path(solve_dir) if solve_dir is not None else case_dir
    case = _read(case_dir / "case.json")
    base = {"case_id": case.get("case_id"), "frequency_Hz": case.get("frequency_Hz")}
    from .store import kept_outcome

    for p in ports:
        try:
            # a status another study's rerun of the job removed a moment ago is still kept as the outcome
            st = kept_outcome(solve_dir, p) or _read(solve_dir / f"excite_{int(p)}" / "status.json")
        except (OSError, ValueError) as exc:
            st = {"status": FAILED, "reason": f"excite_{p}/status.json unreadable: {_one_line(exc)}"}
        if _failed(st):
            out = {**base, "status": FAILED, "reason": str(st.get("reason", f"excitation of port {p} failed"))}
            write_json(case_dir / "metrics.json", out)
            return out
    try:
        from .solver.case import finish_case

        finish_case(case_dir, solve_dir)
        out = _read(case_dir / "metrics.json")
    except Exception as exc:
        traceback.print_exc()
        out = {**base, "status": FAILED, "reason": f"finish: {_one_line(exc)}"}
        write_json(case_dir / "metrics.json", out)
    return out


# -- study-level ---------------------------------------------------------------------------------------
def collect(study_root: str | Path) -> None:
    """Merge the study's case results into its tables."""
    from .collect import collect_study

    collect_study(StudyLayout(Path(study_root)))


def report(study_root: str | Path) -> None:
    """Write the study's plots and ``report.md``."""
    from .report import write_report

    write_report(StudyLayout(Path(study_root)))


def main(argv: list[str] | None = None) -> int:
    """``python -m bodysweep.workflow.steps {scene,solve,finish,collect,report} ...`` (used by the rules)."""
    ap = argparse.ArgumentParser(prog="python -m bodysweep.workflow.steps", description=main.__doc__)
    sub = ap.add_subparsers(dest="verb", required=True)
    s = sub.add_parser("scene")
    s.add_argument("case_dir")
    s = sub.add_parser("solve")
    s.add_argument("case_dir")
    s.add_argument("--port", type=int, required=True)
    s.add_argument("--threads", type=int, default=1)
    s = sub.add_parser("finish")
    s.add_argument("case_dir")
    s.add_argument("--ports", type=int, nargs="+", required=True)
    s.add_argument("--solve-dir", default=None, help="the case's solve folder in the store")
    for verb in ("collect", "report"):
        s = sub.add_parser(verb)
        s.add_argument("study_root")
    a = ap.parse_args(argv)
    if a.verb == "scene":
        r = build_scene(a.case_dir)
    elif a.verb == "solve":
        r = solve(a.case_dir, a.port, a.threads)
    elif a.verb == "finish":
        r = finish(a.case_dir, a.ports, a.solve_dir)
    elif a.verb == "collect":
        collect(a.study_root)
        return 0
    else:
        report(a.study_root)
        return 0
    print(json.dumps({"status": r.get("status"), "reason": r.get("reason", "")}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
