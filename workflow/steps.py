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

from .atomic import atomic_path
from .casefolder import CaseFolder, SolveFolder
from .layout import StudyLayout

FAILED = "failed"


def _one_line(exc: BaseException) -> str:
    text = " ".join(f"{type(exc).__name__}: {exc}".split())
    return text[:500]


def _failed(d: dict | None) -> bool:
    return isinstance(d, dict) and d.get("status") == FAILED


def _placeholder_png(path: Path, text: str) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(6, 2))
    FigureCanvasAgg(fig)
    fig.text(0.02, 0.5, "\n".join(text[i:i + 90] for i in range(0, min(len(text), 360), 90)), va="center",
             fontsize=8)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=80, format="png")


# -- scene ---------------------------------------------------------------------------------------------
def build_scene(case_dir: str | Path) -> dict:
    """Build the scene at its frequency: ``scene.json`` (``SceneModel.to_dict()``) and ``preview.png``.

    ``case_dir`` is a solve folder of the store (``solve.json``) or a case folder (``case.json``).
    On a geometry error ``scene.json`` holds ``{"status": "failed", "reason": ...}`` and the preview
    shows the reason. Returns what was written to ``scene.json``.
    """
    from .store import solve_lock

    folder = SolveFolder(case_dir)
    case = folder.read_inputs()
    with solve_lock(folder.dir):  # not while a solve job of another study's run works in this folder
        return _build_scene_locked(folder, case)


def _build_scene_locked(folder: SolveFolder, case: dict) -> dict:
    try:
        from bodysweep.geometry.scene import Scene

        model = Scene.from_dict(case["scene"]).build(float(case["frequency_Hz"]))
        out = model.to_dict()
        folder.write_scene(out)
        _store_mesh(folder, model)
        try:
            from bodysweep.geometry.preview import preview_png

            with atomic_path(folder.preview_file) as tmp:
                preview_png(model, tmp)
        except Exception as exc:  # a preview problem is not a case failure
            _placeholder_png(folder.preview_file, f"preview failed: {_one_line(exc)}")
        return out
    except Exception as exc:
        traceback.print_exc()
        out = {"status": FAILED, "reason": f"scene: {_one_line(exc)}"}
        folder.write_scene(out)
        _placeholder_png(folder.preview_file, out["reason"])
        return out


def _store_mesh(folder: SolveFolder, model) -> None:
    """Mesh the solve once and store it (unless a stage did already); a refusal is stored for the solve
    step to report, it is not a scene failure."""
    from .estimate import solve_estimate

    try:
        solve_estimate(folder.dir, model=model)
    except Exception as exc:  # reported by the solve step, which meets the same refusal
        print(f"mesh not stored: {_one_line(exc)}")


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
            SolveFolder(case_dir).excitation(port).restore_status(kept)
            return kept
        out = _solve_unlocked(case_dir, port, threads)
        keep_outcome(case_dir, port, out)
        return out


def _solve_unlocked(case_dir: Path, port: int, threads: int) -> dict:
    folder = SolveFolder(case_dir)
    exc_folder = folder.excitation(port)
    scene = None
    try:
        scene = folder.read_scene_strict()
    except FileNotFoundError:  # removed meanwhile by another study's scene job: the solver builds it itself
        scene = None
    except (OSError, ValueError) as exc:
        scene = {"status": FAILED, "reason": f"{folder.scene_file.name} unreadable: {_one_line(exc)}"}
    if _failed(scene):
        out = {"status": FAILED, "reason": scene.get("reason", "scene failed"), "port": int(port)}
        exc_folder.write_status(out)
        return out
    t0 = time.monotonic()
    try:
        from .solver.backend import get_backend

        get_backend().solve_excitation(case_dir, int(port), int(threads))
    except Exception as exc:
        traceback.print_exc()
        out = {"status": FAILED, "reason": f"solve port {port}: {_one_line(exc)}", "port": int(port),
               "runtime_s": time.monotonic() - t0}
        exc_folder.write_status(out)
        return out
    try:
        return exc_folder.read_status_strict()
    except (OSError, ValueError) as exc:
        out = {"status": FAILED, "reason": f"solve port {port}: no readable {exc_folder.status_file.name} "
               f"({_one_line(exc)})", "port": int(port)}
        exc_folder.write_status(out)
        return out


# -- finish --------------------------------------------------------------------------------------------
def finish(case_dir: str | Path, ports: list[int], solve_dir: str | Path | None = None) -> dict:
    """S-matrix, SAR and link budget of a case; always leaves ``metrics.json``.

    ``solve_dir``: the case's solve folder in the store (default: the case folder itself). When an
    excitation failed, ``metrics.json`` is a failure record carrying that excitation's reason.
    """
    case = CaseFolder(case_dir)
    solve = SolveFolder(solve_dir if solve_dir is not None else case.dir)
    content = case.read_case_strict()
    base = {"case_id": content.get("case_id"), "frequency_Hz": content.get("frequency_Hz")}
    from .store import kept_outcome

    for p in ports:
        exc = solve.excitation(p)
        try:
            # a status another study's rerun of the job removed a moment ago is still kept as the outcome
            st = kept_outcome(solve.dir, p) or exc.read_status_strict()
        except (OSError, ValueError) as err:
            st = {"status": FAILED, "reason": f"{exc.label} unreadable: {_one_line(err)}"}
        if _failed(st):
            out = {**base, "status": FAILED, "reason": str(st.get("reason", f"excitation of port {p} failed"))}
            case.write_metrics(out)
            return out
    try:
        from .finish import finish_case

        finish_case(case.dir, solve.dir)
        out = case.read_metrics_strict()
    except Exception as exc:
        traceback.print_exc()
        out = {**base, "status": FAILED, "reason": f"finish: {_one_line(exc)}"}
        case.write_metrics(out)
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
