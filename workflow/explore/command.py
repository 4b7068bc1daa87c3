"""``bodysweep explore STUDY``: run the study's guided search in rounds, check the best on a denser mesh, report.

The search folder is ``results/<study>/explore/<key>/``, ``<key>`` a hash of the whole study file's
content and the code versions (so an edited study starts a new search and an unchanged one resumes):
``journal.log`` (Optuna's journal storage), ``rounds.json``, ``points_study.yaml`` (the ordinary study
the points are run as), ``mesh_check.json``, ``uncertainty.json`` (the best points' budget and the best's
leads, :mod:`.budget`), ``report.md`` and its pictures. The cases themselves are
ordinary cases of the study (``results/<study>/cases/``); the mesh check's are in
``results/<study>_mesh_check/``, the budget's in ``results/<study>_uncertainty/``.
"""
from __future__ import annotations

import fcntl
import json
import os
from pathlib import Path

from ..atomic import write_json

EXIT_OK, EXIT_STUDY, EXIT_BUSY = 0, 2, 5
#: options passed on to every ``bodysweep run`` of the search
RUN_OPTIONS = ("solve_store", "cores", "jobs", "threads_per_job", "profile", "partition", "account", "max_cpu_hours",
               "max_memory_GB", "max_disk_GB")


def add_explore_command(add, budget) -> None:
    """Register the subcommand on the ``bodysweep`` parser (``add``/``budget`` are the parser's helpers)."""
    p = add("explore", "run the study's guided search (explore section) in rounds of ordinary cases, rerun the "
                       "best on a denser mesh and write the search report; a second call resumes", cmd_explore)
    p.add_argument("--cores", type=int, default=None, help="cores Snakemake may use in total (profile default: 2)")
    p.add_argument("--jobs", type=int, default=None, help="most jobs at a time")
    p.add_argument("--threads-per-job", type=int, default=None, help="engine threads per solve job (default 1)")
    p.add_argument("--profile", default="local", help="Snakemake profile, as for run")
    p.add_argument("--partition", default=None, help="cluster partition, as for run")
    p.add_argument("--account", default=None, help="cluster account, as for run")
    budget(p)


def run_args(a) -> list[str]:
    out = []
    for k in RUN_OPTIONS:
        v = getattr(a, k, None)
        if v is not None and not (k == "profile" and v == "local"):
            out += [f"--{k.replace('_', '-')}", str(v)]
    if getattr(a, "accept_cost", False):
        out.append("--accept-cost")
    return out


def search_folder(study, results_dir: str) -> Path:
    from ..study.identity import code_versions
    from .driver import search_key

    key = search_key({"study": study.raw, "versions": code_versions()})
    return Path(results_dir) / study.name / "explore" / key


def mesh_check_name(name: str) -> str:
    return f"{name[:53]}_mesh_check"


def cmd_explore(a) -> int:
    from ..cli_support import StudyUnusable, _err, _expand
    from ..study.exploration import parse_search

    study = _expand(a.study, a.results_dir)[0]  # the study and its own cases, as `run` checks them
    spec = parse_search(study.raw, study.parameters, set(study.swept_names()), {d.path for d in study.derived},
                        len(study.frequencies_Hz), study.n_cases // max(1, len(study.frequencies_Hz)))
    if spec is None:
        raise StudyUnusable(f"{a.study}: explore: the study has no explore section (see README, Guided search)")
    folder = search_folder(study, a.results_dir)
    folder.mkdir(parents=True, exist_ok=True)
    fd = os.open(folder / "explore.lock", os.O_RDWR | os.O_CREAT, 0o644)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        os.close(fd)
        _err(f"another `bodysweep explore` of {a.study} is running (lock {folder / 'explore.lock'})")
        return EXIT_BUSY
    try:
        return _explore_locked(a, study, spec, folder)
    finally:
        os.close(fd)


def _explore_locked(a, study, spec, folder: Path) -> int:
    from .driver import SearchDriver, SearchStopped, feasible_value
    from .points import PipelinePoints
    from .report import write_search_report

    print(f"search folder: {folder}")
    driver = SearchDriver(spec, folder)
    points = PipelinePoints(study, spec, folder, a.results_dir, run_args(a), run_command=a.run_command)
    try:
        why = driver.run(points)
    except SearchStopped as exc:
        print(f"search stopped: {exc}; call `bodysweep explore {a.study}` again to continue")
        return exc.code
    print(f"search finished: {why}")
    ranked = sorted(((feasible_value(t), t) for t in driver.trials() if feasible_value(t) is not None),
                    key=lambda vt: vt[0], reverse=spec.maximise)
    best, seen = [], set()
    for v, t in ranked:
        key = json.dumps(t.user_attrs["point"], sort_keys=True)
        if key not in seen and len(best) < spec.mesh_best:
            seen.add(key)
            best.append(t)
    check = None
    if best:
        cpw = points.cases(best[0].user_attrs["point"])[0]["solver"]["cells_per_wavelength"]
        dense = round(float(cpw) * spec.mesh_factor, 3)
        name = mesh_check_name(study.name)
        print(f"mesh check: the best {len(best)} points again at solver.cells_per_wavelength = {dense:g} "
              f"(search: {float(cpw):g}) as study {name}")
        checker = PipelinePoints(study, spec, folder, a.results_dir, run_args(a), name=name,
                                 solver={"cells_per_wavelength": dense}, run_command=a.run_command)
        pts = [t.user_attrs["point"] for t in best]
        try:
            outs = checker.evaluate(pts, pts)
        except SearchStopped as exc:
            print(f"mesh check stopped: {exc}; call `bodysweep explore {a.study}` again to continue")
            return exc.code
        check = {"cells_per_wavelength": {"search": float(cpw), "check": dense},
                 "points": [{"trial": t.number, "point": t.user_attrs["point"], "search_value": float(t.value),
                             "check_value": o.value, "check_reason": o.reason, "check_case_ids": o.case_ids,
                             "check_excess": o.excess}
                            for t, o in zip(best, outs)]}
        write_json(folder / "mesh_check.json", check)
    budget = None
    if spec.uncertainty_best and best:
        from .budget import leads, run_budget

        ordered = []  # the best points by search value, each once
        for v, t in ranked:
            if all(json.dumps(t.user_attrs["point"], sort_keys=True) != json.dumps(o.user_attrs["point"], sort_keys=True)
                   for o in ordered):
                ordered.append(t)
        try:
            budget = run_budget(study, spec, folder, a.results_dir, run_args(a), a.run_command, ordered)
        except SearchStopped as exc:
            print(f"uncertainty budget stopped: {exc}; call `bodysweep explore {a.study}` again to continue")
            return exc.code
        budget["leads"] = leads(budget, ranked, spec)
        write_json(folder / "uncertainty.json", budget)
    report = write_search_report(driver, check, folder, study.name, budget)
    print(f"search report: {report}")
    return EXIT_OK
