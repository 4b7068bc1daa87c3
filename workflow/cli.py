"""The ``bodysweep`` command line.

bodysweep check   STUDY        schema, geometry and mesh checks, number of cases; writes nothing
bodysweep plan    STUDY        per case: done / to solve / to finish / failed, with cost estimates
bodysweep run     STUDY        prepare case folders and run the pipeline (Snakemake) with progress
bodysweep collect STUDY        merge case results into tables
bodysweep preview STUDY CASE   the three-plane preview PNG of one case
bodysweep report  STUDY        plots and report.md from the tables
bodysweep verify  STUDY        integrity of case folders, the study's solves in the store, and tables
bodysweep solves                 list the shared store of solves; --remove-unused removes those no study uses
bodysweep explore STUDY        guided search (the study's explore section) in rounds of ordinary cases

Exit codes: 0 success; 2 the study file (or a case's geometry) is not usable, nothing written;
3 some cases failed (run) or integrity problems (verify); 4 refused: the estimated cost is over the
budget (give --accept-cost); 5 refused: another run of the same study is alive; 6 interrupted (SIGINT,
SIGTERM or SIGHUP): the run's processes were stopped, finished cases are kept; 1 anything else (the
pipeline itself failed).
"""
from __future__ import annotations

import argparse
import os
import sys
from functools import partial
from pathlib import Path

from .budget import budget_problems, fmt_bytes, fmt_cpu, machine_memory_GB, study_cpu_budget_hours
from .casefolder import CASE_FILE

EXIT_OK, EXIT_ERROR, EXIT_STUDY, EXIT_FAILED, EXIT_BUDGET, EXIT_BUSY, EXIT_INTERRUPTED = 0, 1, 2, 3, 4, 5, 6


def _versions() -> str:
    from importlib.metadata import version

    import numpy

    from . import __version__
    parts = [f"bodysweep {__version__}"]
    try:
        from .solver.engine import engine_versions
        parts += [f"{k} {v}" for k, v in engine_versions().items()]
    except Exception as exc:  # the engine may be missing on a machine without set-up
        parts.append(f"openEMS unavailable ({exc})")
    parts.append(f"snakemake {version('snakemake')}")
    parts.append(f"numpy {numpy.__version__}")
    return "\n".join(parts)


from .cli_support import (StudyUnusable, _build_model, _check_expansion_geometry, _check_geometry, _err,  # noqa: F401
                          _expand, _expansion)


# -- cost ------------------------------------------------------------------------------------------------
def plan_rows(layout, entries, dicts, previous, store=None) -> list[dict]:
    """One row per case: state and, for cases still to solve, the mesh and cost estimate.

    ``dicts``: the cases' ``case.json`` contents in the order of ``entries``, or a function giving them
    (called only when an estimate is not remembered). Estimates
    (:func:`bodysweep.workflow.estimate.case_estimate`) are remembered in the study folder
    (:mod:`bodysweep.workflow.cost_cache`) and computed in worker processes when many are missing; call
    :func:`remember_costs` to store them.
    """
    from . import cost_cache
    from .estimate import case_estimate
    from .pipeline import case_states

    states = case_states(layout, entries, previous, store)
    need = [e["case_id"] for e, (state, _) in zip(entries, states) if state == "to solve"]
    found = cost_cache.restore(need, cost_cache.load(layout.root))
    missing = {cid for cid in need if cid not in found}
    if missing:
        cases = dicts() if callable(dicts) else dicts
        # a solve already meshed in the store (mesh.json) is not meshed again
        compute = partial(case_estimate, store=store) if store is not None else case_estimate
        found.update(cost_cache.estimates([d for d in cases if d["case_id"] in missing], {}, compute))
    rows = []
    for e, (state, why) in zip(entries, states):
        row = {"case_id": e["case_id"], "label": e["label"], "state": state, "note": why}
        if state == "to solve":
            est = found[e["case_id"]]
            if isinstance(est, Exception):  # a case the mesher refuses shows up as such, not as a crash
                row["_refused"] = " ".join(str(est).split())
                row.update({"cells": float("nan"), "timesteps": float("nan"), "memory_B": float("nan"),
                            "cpu_s": float("nan"), "disk_B": float("nan"), "scratch_B": float("nan"), "note": f"no estimate: {' '.join(str(est).split())[:120]}"})
            else:
                row.update(est.as_row())
                row["_estimate"] = est
                if e["case_id"] in missing:
                    row["_new"] = True
        rows.append(row)
    return rows


def remember_costs(layout, rows: list[dict]) -> None:
    """Store the estimates of ``rows`` in the study folder if it exists (nothing is created for it)."""
    from . import cost_cache

    if any(r.get("_new") for r in rows):  # nothing new: the file already holds them all
        cost_cache.remember(layout.root, {r["case_id"]: r["_estimate"] for r in rows if "_estimate" in r})


def _refuse_over_budget(problems: list[str]) -> int:
    """One error line naming every figure over its budget; exit code 4."""
    _err("over budget: " + "; ".join(problems) + "; give --accept-cost to run anyway, or raise the budget")
    return EXIT_BUDGET


def _study_budget_problems(study, rows, a) -> list[str]:
    from .budget import disk_budget_GB

    return budget_problems(rows, study_cpu_budget_hours(study, a.max_cpu_hours), a.max_memory_GB,
                           disk_budget_GB(study, a.max_disk_GB, a.results_dir))


# -- subcommands -----------------------------------------------------------------------------------------
def _refuse_mesh(case: dict, reason: str) -> None:
    raise StudyUnusable(f"case {case['case_id']} ({case.get('label', '')}): mesh: {reason}")


def _check_meshes(layout, entries: list[dict], dicts) -> int:
    """Mesh every case as the solver step will (the path of ``plan``'s estimates, remembered ones reused);
    raise StudyUnusable naming the first case the solver would refuse. Writes nothing.

    ``dicts``: the cases (order of ``entries``) or a function giving them, called only when an estimate
    is not remembered."""
    from . import cost_cache

    from .estimate import case_estimate

    ids = [e["case_id"] for e in entries]
    found = cost_cache.restore(ids, cost_cache.load(layout.root))
    if len(found) < len(set(ids)):
        cases = dicts() if callable(dicts) else dicts
        found.update(cost_cache.estimates([d for d in cases if d["case_id"] not in found], {}, case_estimate))
    for e in entries:
        if isinstance(found[e["case_id"]], Exception):
            _refuse_mesh(e, " ".join(str(found[e["case_id"]]).split()))
    return len(found)


def cmd_check(a) -> int:
    exp = _expansion(a.study, a.results_dir)
    layout = exp.layout
    entries, dicts = exp.cases()
    n_scenes = _check_expansion_geometry(exp)
    n_meshes = _check_meshes(layout, entries, dicts)
    print(f"study {exp.name!r}: {len(entries)} cases ({n_scenes} distinct scenes built without error, "
          f"{n_meshes} meshes the solver accepts)")
    print(f"results would go to {layout.root}")
    return EXIT_OK


def _store(a) -> Path:
    from .store import store_root

    return store_root(a.results_dir, getattr(a, "solve_store", None))


def cmd_plan(a) -> int:
    from .pipeline import previous_plan

    exp = _expansion(a.study, a.results_dir)
    layout = exp.layout
    entries, dicts = exp.cases()
    rows = plan_rows(layout, entries, dicts, previous_plan(layout), _store(a))
    w = max([len(r["label"]) for r in rows] + [5])
    print(f"{'case_id':<14} {'label':<{w}} {'state':<9} {'cells':>10} {'timesteps':>10} {'memory':>9} {'CPU time':>10}  note")
    lines = []
    for r in rows:
        has = r["state"] == "to solve"
        lines.append(f"{r['case_id']:<14} {r['label']:<{w}} {r['state']:<9} "
                     f"{(format(r['cells'], '10.0f') if has and r['cells'] == r['cells'] else '-'):>10} "
                     f"{(format(r['timesteps'], '10.0f') if has and r['timesteps'] == r['timesteps'] else '-'):>10} "
                     f"{(fmt_bytes(r['memory_B']) if has else '-'):>9} {(fmt_cpu(r['cpu_s']) if has else '-'):>10}  "
                     f"{r['note']}")
    print("\n".join(lines))
    counts = {s: sum(r["state"] == s for r in rows) for s in ("done", "to solve", "to finish", "failed")}
    changed = sum(r["note"].startswith("changed") for r in rows)
    todo = [r for r in rows if r["state"] == "to solve"]
    cpus = [r["cpu_s"] for r in todo if r["cpu_s"] == r["cpu_s"]]
    cpu = sum(cpus) if cpus else (0.0 if not todo else float("nan"))
    mem = max([r["memory_B"] for r in todo if r["memory_B"] == r["memory_B"]] or [float("nan")])
    cells = sum(r["cells"] for r in todo if r["cells"] == r["cells"])
    disks = [r.get("disk_B", float("nan")) for r in todo]
    disk = sum(v for v in disks if v == v) if any(v == v for v in disks) else float("nan")
    print(f"total: {len(rows)} cases: " + ", ".join(f"{n} {s}" for s, n in counts.items())
          + (f" ({changed} changed since the last plan)" if changed else "")
          + f"; to solve: {cells:.0f} cells, CPU time {fmt_cpu(cpu)}, largest memory {fmt_bytes(mem)}, "
          + f"disk {fmt_bytes(disk)} (failed cases rerun only with `run --retry-failed`)")
    if exp.raw.get("uncertainty") is not None:
        from .study.uncertainty import budget_note

        print(budget_note(exp.raw, entries, layout))
    problems = _study_budget_problems(exp, rows, a)
    if problems and not a.accept_cost:
        return _refuse_over_budget(problems)
    remember_costs(layout, rows)
    exp.save()  # only into a study folder that exists
    return EXIT_OK


def cmd_run(a) -> int:
    from .pipeline import previous_plan

    exp = _expansion(a.study, a.results_dir)  # the one expansion of this run (prepare and Snakemake reuse it)
    layout = exp.layout
    entries, dicts = exp.cases()
    _check_expansion_geometry(exp)
    rows: list[dict] = []
    if not a.accept_cost:
        rows = plan_rows(layout, entries, dicts, previous_plan(layout), _store(a))
        for e, r in zip(entries, rows):  # a case the solver would refuse stops the run before any job
            if r.get("_refused"):
                _refuse_mesh(e, r["_refused"])
        problems = _study_budget_problems(exp, rows, a)
        if problems:
            return _refuse_over_budget(problems)
    else:
        _check_meshes(layout, entries, dicts)
    from .runlock import StudyBusy

    from datetime import datetime, timezone

    log = layout.logs_dir / f"snakemake_{datetime.now(timezone.utc).strftime('%Y%m%dT%H%M%SZ')}.log"
    try:
        with _run_lock(layout, log) as lock:
            if rows:
                remember_costs(layout, rows)  # the study folder exists once the lock is taken
            return _run_locked(a, lock, log, exp)
    except StudyBusy as exc:
        _err(str(exc))
        return EXIT_BUSY


def _run_lock(layout, log: Path):
    """The study's run lock (see :mod:`bodysweep.workflow.runlock`); StudyBusy if another run holds it."""
    from .runlock import StudyBusy, StudyLock, other_snakemake_runs

    lock = StudyLock(layout, {"log": str(log)}).acquire()
    others = other_snakemake_runs(layout)
    if others:
        lock.release()
        from .runlock import describe_snakemake

        raise StudyBusy(f"study {layout.root.name!r} is being run by {describe_snakemake(others)}; "
                        f"wait for it to end or stop it (results folder {layout.root})")
    return lock


def _run_locked(a, lock, log: Path, exp) -> int:
    from .pipeline import (mark_unfinished, prepare, reset_failed, run_snakemake, snakemake_args, case_states)
    from .runlock import clear_interrupted

    cleared = clear_interrupted(lock.layout, ".", _store(a))
    if cleared["snakemake_locks"] or cleared["temporaries"]:
        print(f"an earlier run of this study was interrupted: removed {cleared['snakemake_locks']} stale "
              f"Snakemake lock files and {cleared['temporaries']} leftover temporary files")
    from .interrupt import settle_incomplete

    settled = settle_incomplete(lock.layout, ".", (_store(a),))
    if settled:
        print(f"kept {len(settled)} outputs that an interrupted run finished (not redone)")
    prep = prepare(exp, store=_store(a))
    if a.retry_failed:
        reset = reset_failed(prep.layout, prep.entries, prep.store)
        if reset:
            print(f"retrying {len(reset)} failed cases")
    states = case_states(prep.layout, prep.entries, store=prep.store)
    n_failed_before = sum(s == "failed" for s, _ in states)
    if n_failed_before:
        print(f"{n_failed_before} cases failed in an earlier run and are kept as failed (--retry-failed reruns them)")
    n_solve, n_finish = (sum(s == k for s, _ in states) for k in ("to solve", "to finish"))
    if n_finish:
        print(f"{n_solve} cases to solve, {n_finish} to finish from solves already in the store {prep.store}")
    from .cluster import site_resource_args
    from .pipeline import resolve_profile

    site = site_resource_args(resolve_profile(a.profile), a.partition, a.account)
    args = snakemake_args(a.study, results_dir=a.results_dir, store=prep.store, workdir=".", cores=a.cores, jobs=a.jobs,
                          threads_per_job=a.threads_per_job, profile=a.profile, extra=site, prepared=prep)
    lock_fds = (lock.fd,)  # Snakemake holds the study lock too (runlock module docstring)
    from .interrupt import RunInterrupted, profile_submits

    cluster = profile_submits(resolve_profile(a.profile))
    try:
        rc = run_snakemake(args, layout=prep.layout, entries=prep.entries, log_path=log, workdir=".",
                           pass_fds=lock_fds, cluster=cluster)
    except RunInterrupted as exc:
        return _interrupted(a, exc, lock, prep, log)
    if rc != 0 and _snakemake_lock_refused(log):
        _err(f"snakemake refused to lock the working directory {Path('.').resolve()}: another snakemake run "
             f"there uses files of this study; see {log}")
        return EXIT_BUSY
    if rc != 0:
        marked = mark_unfinished(prep.layout, prep.entries, prep.store)
        if marked:
            print(f"{len(marked)} cases ended without a result; recorded as failed. Collecting the rest.")
            try:
                rc = run_snakemake(args, layout=prep.layout, entries=prep.entries, log_path=log, workdir=".",
                                   pass_fds=lock_fds, cluster=cluster)
            except RunInterrupted as exc:
                return _interrupted(a, exc, lock, prep, log)
    if rc == 0 and exp.raw.get("uncertainty") is not None:
        # an uncertainty budget for the best cases: their runs are known once the cases have results
        again = prepare(exp, store=_store(a))
        added = {e["case_id"] for e in again.entries} - {e["case_id"] for e in prep.entries}
        if added:
            print(f"uncertainty budget: {len(added)} component runs for the best cases")
            prep = again
            args = snakemake_args(a.study, results_dir=a.results_dir, store=prep.store, workdir=".", cores=a.cores,
                                  jobs=a.jobs, threads_per_job=a.threads_per_job, profile=a.profile, extra=site,
                                  prepared=prep)
            try:
                rc = run_snakemake(args, layout=prep.layout, entries=prep.entries, log_path=log, workdir=".",
                                   pass_fds=lock_fds, cluster=cluster)
            except RunInterrupted as exc:
                return _interrupted(a, exc, lock, prep, log)
    if rc != 0:
        _err(f"the pipeline failed (snakemake exit {rc}); see {log}")
        return EXIT_ERROR
    states = case_states(prep.layout, prep.entries, store=prep.store)
    failed = [(e, why) for e, (s, why) in zip(prep.entries, states) if s == "failed"]
    print(f"done: {len(prep.entries) - len(failed)} of {len(prep.entries)} cases have results")
    print(f"tables: {prep.layout.tables_dir}/ (summary, sparams, sar, uncertainty as .parquet and .csv)")
    print(f"report: {prep.layout.report_file}")
    if failed:
        for e, why in failed[:20]:
            print(f"  failed {e['case_id']} ({e['label']}): {why}")
        if len(failed) > 20:
            print(f"  ... and {len(failed) - 20} more (see the summary table)")
        return EXIT_FAILED
    return EXIT_OK


def _interrupted(a, exc, lock, prep, log: Path) -> int:
    """After a stop signal: say what was stopped and what is kept; leave the study clean; exit code 6."""
    from .interrupt import after_stop

    for line in (exc.report.lines() if exc.report else [f"interrupted ({exc})"]):
        print(line)
    print(after_stop(lock.layout, prep.entries, ".", prep.store) + f"; `bodysweep run {a.study}` continues with the rest "
          f"(log: {log})")
    _err(f"interrupted by {exc.report.signal_name if exc.report else exc}; stopped the run")
    return EXIT_INTERRUPTED


def _snakemake_lock_refused(log: Path) -> bool:
    """Whether the last Snakemake run in ``log`` stopped because it could not lock the directory."""
    try:
        tail = log.read_bytes()[-20000:].decode(errors="replace")
    except OSError:
        return False
    return "LockException" in tail or "Directory cannot be locked" in tail


def _layout_of(a):
    from .expansion import remembered
    from .layout import StudyLayout
    from .pipeline import load
    from .study.errors import StudyError

    if not Path(a.study).is_file():
        raise StudyUnusable(f"{a.study}: no such study file")
    exp = remembered(a.study, a.results_dir)  # the study's name without loading it again, when remembered
    if exp is not None:
        layout = exp.layout
    else:
        try:
            layout = StudyLayout.of(load(a.study).name, a.results_dir)
        except StudyError as exc:
            raise StudyUnusable(f"{a.study}: {exc}") from None
    if not layout.plan_file.exists():
        raise StudyUnusable(f"{layout.plan_file} does not exist: run `bodysweep run {a.study}` first")
    return layout


def cmd_collect(a) -> int:
    from .collect import collect_study

    layout = _layout_of(a)
    paths = collect_study(layout)
    print(f"tables written to {layout.tables_dir}/: " + ", ".join(sorted(p.name for p in paths.values())))
    return EXIT_OK


def cmd_report(a) -> int:
    from .report import write_report

    layout = _layout_of(a)
    if not (layout.tables_dir / "summary.parquet").exists():
        raise StudyUnusable(f"no tables in {layout.tables_dir}: run `bodysweep collect {a.study}` first")
    print(f"report: {write_report(layout)}")
    return EXIT_OK


def cmd_preview(a) -> int:
    exp = _expansion(a.study, a.results_dir)
    study, layout = exp, exp.layout
    dicts = exp.with_budget_runs()[1]
    pick = [d for d in dicts if a.case in (d["case_id"], d.get("label"))]
    if not pick and a.case.isdigit() and int(a.case) < len(dicts):
        pick = [dicts[int(a.case)]]
    if not pick:
        raise StudyUnusable(f"case {a.case!r} is not in study {study.name!r}: give a case id, a label or an "
                            f"index 0..{len(dicts) - 1} (see `bodysweep plan`)")
    case = pick[0]
    from .casefolder import SolveFolder

    stored = SolveFolder(_store(a) / case["solve_id"]).preview_file  # the scene step's preview, once the case ran
    out = Path(a.output) if a.output else (stored if stored.exists() else layout.case_dir(case["case_id"]) / stored.name)
    if out.exists() and not a.output:
        print(out)
        return EXIT_OK
    from bodysweep.geometry.preview import preview_png

    from .atomic import atomic_path

    try:
        model = _build_model(case)
    except (ValueError, KeyError, TypeError) as exc:
        raise StudyUnusable(f"case {case['case_id']}: geometry: {' '.join(str(exc).split())}") from None
    with atomic_path(out) as tmp:
        preview_png(model, tmp)
    print(out)
    return EXIT_OK


def cmd_verify(a) -> int:
    from .verify import verify_study

    layout = _layout_of(a)
    problems, n = verify_study(layout, _store(a))
    for p in problems[:200]:
        print(f"  {p}")
    if problems:
        print(f"verify: {len(problems)} problems in {n} cases of {layout.root} and their solves in {_store(a)}")
        return EXIT_FAILED
    print(f"verify: {n} cases, their solves in {_store(a)} and the tables of {layout.root} are consistent")
    return EXIT_OK


def cmd_solves(a) -> int:
    """List the store's solves with their size and the studies using them; optionally remove unused ones."""
    from . import store as solves

    root = _store(a)
    ids = solves.solve_ids(root)
    refs, stale = solves.references(root)
    unused = [i for i in ids if i not in refs]
    total = 0
    for i in ids:
        size = solves.folder_bytes(root / i)
        total += size
        users = refs.get(i, [])
        print(f"{i}  {fmt_bytes(size):>9}  " + (f"used by {len(users)} studies: {', '.join(Path(u).name for u in users[:4])}"
                                                  if users else "unused"))
    print(f"store {root}: {len(ids)} solves ({fmt_bytes(total)}), {len(unused)} used by no study")
    if not a.remove_unused:
        if unused:
            print("give --remove-unused to remove the unused ones")
        return EXIT_OK
    removed = [i for i in unused if solves.remove_solve(root, i)]
    for p in stale:
        p.unlink(missing_ok=True)
    busy = len(unused) - len(removed)
    print(f"removed {len(removed)} unused solves" + (f"; {busy} kept because a job holds them" if busy else ""))
    return EXIT_OK


# -- parser ----------------------------------------------------------------------------------------------
def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="bodysweep", description="Parametric openEMS FDTD studies of radio links "
                                 "to implanted devices: S-parameters, averaged SAR, SAR-limited link budgets.",
                                 epilog="Exit codes: 0 ok, 1 pipeline error, 2 unusable study file, "
                                        "3 failed cases / integrity problems, 4 over the cost budget, "
                                        "5 another run of the study is alive, 6 interrupted (finished cases kept).")
    ap.add_argument("--version", action="store_true",
                    help="print bodysweep, openEMS, CSXCAD, snakemake and numpy versions")
    sub = ap.add_subparsers(dest="command", metavar="COMMAND")

    def add(name, help_, func):
        p = sub.add_parser(name, help=help_, description=help_)
        p.add_argument("study", help="the study file (YAML)")
        p.add_argument("--results-dir", default="results", help="folder holding results/<study>/ (default: results)")
        store_option(p)
        p.set_defaults(func=func)
        return p

    def store_option(p):
        p.add_argument("--solve-store", default=None, metavar="FOLDER",
                       help="the shared store of solves (default: $BODYSWEEP_SOLVE_STORE, else <results-dir>/_solves)")

    def budget(p):
        p.add_argument("--max-cpu-hours", type=float, default=None,
                       help="refuse when the estimated CPU time of the cases to run exceeds this "
                            "(default: the study's budget.max_cpu_hours, else 24 h)")
        p.add_argument("--max-memory-GB", type=float, default=round(0.8 * machine_memory_GB(), 1),
                       help="refuse when a case needs more memory than this (default 80%% of this machine's)")
        p.add_argument("--max-disk-GB", type=float, default=None,
                       help="refuse when the estimated disk use of the cases to run exceeds this (default: the "
                            "study's budget.max_disk_GB, else 90%% of the free space where the results go)")
        p.add_argument("--accept-cost", action="store_true", help="run even when over the budget")

    add("check", "check the study file (schema, geometry and mesh of every case, as the solver would build "
                 "them) and count its cases; writes nothing",
        cmd_check)
    budget(add("plan", "list each case as done / to solve / to finish / failed with cell count, timesteps, memory "
                       "and CPU-time estimates, and the total", cmd_plan))
    p = add("run", "prepare the case folders and run the pipeline (only what is not done yet)", cmd_run)
    p.add_argument("--cores", type=int, default=None, help="cores Snakemake may use in total (profile default: 2)")
    p.add_argument("--jobs", type=int, default=None, help="most jobs at a time (default: as many as cores allow)")
    p.add_argument("--threads-per-job", type=int, default=None,
                   help="engine threads per solve job (default 1: the cores run cases side by side)")
    p.add_argument("--profile", default="local",
                   help="Snakemake profile: a name in workflow/profiles/ (local, ...) or a folder with config.yaml")
    # cluster site settings (README.md, "Running a study on a SLURM cluster"); they apply to every job sent to the scheduler
    p.add_argument("--partition", default=None, help="cluster partition (queue) for the jobs, e.g. with --profile slurm")
    p.add_argument("--account", default=None, help="cluster account the jobs are charged to, e.g. with --profile slurm")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--retry-failed", action="store_true", help="rerun cases that failed in an earlier run")
    g.add_argument("--skip-failed", action="store_true",
                   help="keep earlier failures as they are (the default; for explicit scripts)")
    budget(p)
    add("collect", "merge the case results into tables/summary, sparams, sar, uncertainty (.parquet and .csv)", cmd_collect)
    p = add("preview", "write (if needed) and print the path of a case's three-plane preview PNG", cmd_preview)
    p.add_argument("case", help="case id, label, or index in the study's case list")
    p.add_argument("--output", default=None, help="write the PNG here instead of the case folder")
    add("report", "write the plots and report.md of a study from its tables", cmd_report)
    add("verify", f"check that every case's files are present, case ids match {CASE_FILE}, tables match the cases",
        cmd_verify)
    p = sub.add_parser("solves", help="list the shared store of solves (size, studies using each); "
                       "--remove-unused removes the solves no study refers to",
                       description="List the shared store of solves; --remove-unused removes the solves that no "
                       "study's current plan refers to (solves a running job holds are kept).")
    p.add_argument("--results-dir", default="results", help="folder holding the default store (default: results)")
    store_option(p)
    p.add_argument("--remove-unused", action="store_true", help="remove the solves no study refers to")
    p.set_defaults(func=cmd_solves)
    from .explore.command import add_explore_command

    add_explore_command(add, budget)
    return ap


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.version:
        print(_versions())
        return EXIT_OK
    if not getattr(args, "command", None):
        parser.print_help()
        return EXIT_OK
    args.run_command = main  # commands built on `run` (explore) call back into the command line with it
    try:
        return args.func(args)
    except StudyUnusable as exc:
        _err(str(exc))
        return EXIT_STUDY
    except KeyboardInterrupt:
        _err("interrupted")
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
