"""Preparing case folders, the per-case state, and driving Snakemake.

Rerun-only-what-changed rests on two things:

1. **Identity-based folders.** A case's folder is named by its ``case_id`` (the finish identity), its
   solve's folder in the shared store (:mod:`.store`) by its ``solve_id`` (the solve identity; see
   DEVELOPERS.md, Identity). A change of what decides the fields gives a new solve id and a new case id;
   a change of post-processing settings only a new case id, whose finish step reads the stored solve;
   an unchanged case keeps both folders, and another study with the same solve finds it in the store.
2. **Write-if-changed.** :func:`prepare` rewrites ``case.json`` (and ``plan.json``) only when the content
   differs, so modification times stay and Snakemake sees nothing new.

Snakemake is therefore run with ``--rerun-triggers mtime``: the default triggers also rerun jobs whose
rule code or params changed, which would rerun every case after any edit of a rule file or a helper
that does not alter results. What alters results is already in the case id (bump the version constant
of the part that changed), so modification times are the only trigger we need.
"""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import time
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Callable, Iterable

from .atomic import json_text, write_if_changed
from .casefolder import KEPT_ON_RESET, CaseFolder, SolveFolder
from .expansion import Expansion, expand_once, plan_entry, study_settings  # noqa: F401 (re-exported)
from .layout import StudyLayout, read_plan, write_plan
from .progress import running_progress

#: statuses a finished case can carry in metrics.json that count as a result (not a failure)
OK_STATUSES = ("ok", "warning")
#: per-case states reported by :func:`case_states`: "to finish" means the solve is in the store and only
#: the (cheap) finish step remains; "to solve" needs an FDTD solve
STATES = ("done", "to solve", "to finish", "failed")
TO_SOLVE, TO_FINISH = "to solve", "to finish"

#: the installed package's own Snakefile and profiles (package data, not the checkout; a regular
#: install unpacks them as files, so their paths can be handed to Snakemake)
_PACKAGE_FILES = Path(str(resources.files("bodysweep.workflow")))
SNAKEFILE = _PACKAGE_FILES / "Snakefile"
PROFILES_DIR = _PACKAGE_FILES / "profiles"


# -- the study --------------------------------------------------------------------------------------------
def load(study_path: str | Path):
    """Load a study file (raises the study layer's ``StudyError`` with a one-line message)."""
    from .study import load_study

    return load_study(study_path)


def expand_cases(study) -> list:
    from .study import expand

    return expand(study)


def parameter_key(parameters: dict) -> str:
    """Canonical text of a sweep point (its parameters); the same point in two plans has the same key."""
    return json.dumps(parameters, sort_keys=True, separators=(",", ":"), default=str)


@dataclass
class Prepared:
    """Result of :func:`prepare`."""

    study: Any
    layout: StudyLayout
    entries: list[dict]
    previous: dict[str, str] = field(default_factory=dict)  # parameter key -> case id of the last plan
    written: int = 0  # case.json files (re)written
    store: Path = Path("results") / "_solves"  # the shared store of solves (see .store)
    digest: str = ""  # of plan.json as written (:func:`plan_digest`), handed to Snakemake


def plan_digest(layout: StudyLayout) -> str:
    """sha256 of the study's ``plan.json`` bytes: ``bodysweep run`` gives it to Snakemake, whose Snakefile
    then reads that plan instead of expanding the study again (:func:`snakefile_context`)."""
    import hashlib

    return hashlib.sha256(layout.plan_file.read_bytes()).hexdigest()


def expand_study(study_path: str | Path, results_dir: str | Path = "results") -> tuple[Any, StudyLayout, list[dict], list[dict]]:
    """Load and expand a study without writing anything: ``(study, layout, entries, case_dicts)``."""
    study = load(study_path)
    layout = StudyLayout.of(study.name, results_dir)
    dicts = [c.to_dict() for c in expand_cases(study)]
    from .study.uncertainty import budget_case_dicts

    dicts += budget_case_dicts(study.raw, dicts, layout)[0]  # the uncertainty budget's component runs
    return study, layout, [plan_entry(d) for d in dicts], dicts


def previous_plan(layout: StudyLayout) -> dict[str, str]:
    """``{parameter key: case id}`` of the study's last ``plan.json`` (empty if none)."""
    try:
        cases = read_plan(layout)["cases"]
    except (FileNotFoundError, ValueError, KeyError):
        return {}
    return {parameter_key(e.get("parameters", {})): e["case_id"] for e in cases}


def prepare(study: str | Path | Expansion, results_dir: str | Path = "results", store: str | Path | None = None) -> Prepared:
    """Write every case folder's ``case.json``, the study's ``plan.json`` and each solve's ``solve.json``
    in the store (:func:`.store.store_root` of ``results_dir`` and ``store``), each only if changed.

    ``study`` is a study file (expanded here, or read from its remembered expansion) or an
    :class:`~bodysweep.workflow.expansion.Expansion` already made (then nothing is expanded again; its
    ``results_dir`` is the expansion's). The expansion is remembered in the study folder.
    """
    from . import store as solves

    exp = study if isinstance(study, Expansion) else expand_once(study, results_dir)
    layout = exp.layout
    entries, dicts = exp.with_budget_runs()
    root = solves.store_root(layout.root.parent, store)
    ids = [e["case_id"] for e in entries]
    if len(set(ids)) != len(ids):
        seen: set[str] = set()
        dup = sorted({i for i in ids if i in seen or seen.add(i)})
        raise ValueError(f"study {exp.name!r}: {len(ids) - len(set(ids))} cases are identical to others "
                         f"(case ids {dup[:5]}); remove the duplicate sweep points")
    previous = previous_plan(layout)
    written = 0
    for d in dicts:
        written += write_case_json(CaseFolder(layout.case_dir(d["case_id"])).case_file, d)
    write_plan(layout, exp.name, entries, exp.settings)
    exp.save()  # the study folder exists now
    solves.register_study(root, layout.root)  # after plan.json: the clean-up sees these solves referenced
    done: set[str] = set()
    for d in dicts:
        if d["solve_id"] not in done:
            done.add(d["solve_id"])
            solves.write_solve_record(root, d)
        link_solve(layout.case_dir(d["case_id"]), root / d["solve_id"])
    return Prepared(exp, layout, entries, previous, written, root, plan_digest(layout))


def link_solve(case_dir: Path, solve_dir: Path) -> None:
    """A symbolic link ``<case folder>/solve`` to the case's solve folder in the store (for people browsing)."""
    link = CaseFolder(case_dir).solve_link
    target = os.path.relpath(solve_dir.resolve(), case_dir.resolve())
    try:
        if os.readlink(link) == target:
            return
        link.unlink()
    except FileNotFoundError:
        pass
    except OSError:  # not a link: leave whatever it is alone
        return
    try:
        os.symlink(target, link)
    except FileExistsError:  # a concurrent preparation made it
        pass


#: case.json fields that describe the case but are not part of its identity
DESCRIPTIVE_KEYS = ("label", "study", "parameters", "solve_id", "budget")


def _results_relevant(case: dict) -> dict:
    """``case.json`` content without the descriptive keys and the run-only solver settings (threads)."""
    from .study.cases import solver_identity

    out = {k: v for k, v in case.items() if k not in DESCRIPTIVE_KEYS}
    if isinstance(out.get("solver"), dict):
        out["solver"] = solver_identity(out["solver"])
    return out


def write_case_json(path: Path, case: dict) -> bool:
    """Write ``case.json`` if its content changed; True if written.

    When only descriptive fields changed (label, study name, parameter names: the same case reached
    through a re-written sweep) or run-only solver settings (threads), the file is updated but keeps its
    modification time, because nothing that alters results changed and Snakemake must not rerun the case.
    """
    text = json_text(case)
    try:
        st = path.stat()
        raw = path.read_bytes()
        if raw == text.encode():  # unchanged (the common case on a rerun): no parsing needed
            return False
        old = json.loads(raw)
    except (FileNotFoundError, ValueError):
        return write_if_changed(path, text)
    if json_text(old) == text:
        return False
    same = _results_relevant(old) == _results_relevant(json.loads(text))
    write_if_changed(path, text)
    if same:
        os.utime(path, ns=(st.st_atime_ns, st.st_mtime_ns))
    return True


# -- the state of a case ----------------------------------------------------------------------------------
def _store_of(layout: StudyLayout, store: Path | None) -> Path:
    """The store given, else the default one of the study's results folder (see :func:`.store.store_root`)."""
    from .store import store_root

    return Path(store) if store is not None else store_root(layout.root.parent)


def case_state(layout: StudyLayout, entry: dict, previous: dict[str, str] | None = None,
               store: Path | None = None, _present: tuple[set, set] | None = None) -> tuple[str, str]:
    """``(state, note)`` of a case: ``done``, ``failed``, ``to finish`` or ``to solve``.

    ``to finish``: the case's solve is in the store (``store``, default ``<results>/_solves``), only the
    finish step is left. The note says ``changed (was <old id>)`` when the same sweep point was in the
    last plan under another case id (its inputs changed) and the new folder has no result yet.
    ``_present``: the names in the cases folder and in the store (:func:`case_states` lists them once),
    so that folders known absent are not opened.
    """
    from .store import solve_state

    cid, sid = entry["case_id"], entry.get("solve_id")
    m = CaseFolder(layout.case_dir(cid)).read_metrics() if _present is None or cid in _present[0] else None
    if m is not None:
        if str(m.get("status")) in OK_STATUSES:
            return "done", ""
        return "failed", str(m.get("reason", ""))
    solved = bool(sid) and (_present is None or sid in _present[1]) and \
        solve_state(_store_of(layout, store) / sid, entry.get("ports", [1])) == "solved"
    state = TO_FINISH if solved else TO_SOLVE
    old = previous.get(parameter_key(entry.get("parameters", {}))) if previous else None
    if old is not None and old != entry["case_id"]:
        return state, f"changed (was {old})"
    return state, ""


def _names_in(folder: Path) -> set[str]:
    try:
        return set(os.listdir(folder))
    except (FileNotFoundError, NotADirectoryError):
        return set()


def case_states(layout: StudyLayout, entries: list[dict], previous: dict[str, str] | None = None,
                store: Path | None = None) -> list[tuple[str, str]]:
    store = _store_of(layout, store)
    present = (_names_in(layout.cases_dir), _names_in(store))
    return [case_state(layout, e, previous, store, present) for e in entries]


def reset_failed(layout: StudyLayout, entries: Iterable[dict], store: Path | None = None) -> list[str]:
    """Remove the outputs of failed cases (keeping ``case.json`` and the ``solve`` link) and the failed
    excitations of their solves in the store, so that the next run redoes them.

    Returns the ids of the cases reset.
    """
    from .store import reset_failed_solve

    root = _store_of(layout, store)
    reset = []
    for e in entries:
        d = layout.case_dir(e["case_id"])
        m = CaseFolder(d).read_metrics()
        if m is None or str(m.get("status")) in OK_STATUSES:
            continue
        if e.get("solve_id"):
            reset_failed_solve(Path(root) / e["solve_id"], e.get("ports", [1]))
        for p in d.iterdir():
            if p.name in KEPT_ON_RESET:
                continue
            if p.is_dir():
                shutil.rmtree(p)
            else:
                p.unlink()
        reset.append(e["case_id"])
    return reset


def failure_record(entry: dict, reason: str, stage: str) -> dict:
    """A ``metrics.json`` for a case that produced no result."""
    return {"status": "failed", "reason": f"{stage}: {reason}", "case_id": entry["case_id"],
            "frequency_Hz": entry.get("frequency_Hz")}


def mark_unfinished(layout: StudyLayout, entries: Iterable[dict], store: Path | None = None) -> list[str]:
    """After a run: write a failure record for each case whose jobs died without writing ``metrics.json``.

    The solve and finish steps record their own failures; this catches what they cannot (a crashed
    engine process, a killed job). Cases none of whose jobs started are left alone. Returns the ids marked.
    """
    marked = []
    for e in entries:
        case = CaseFolder(layout.case_dir(e["case_id"]))
        d = case.dir
        if case.has_metrics():
            continue
        logs = sorted(str(p.relative_to(d)) for p in case.logs_dir.glob("*.log")) if case.logs_dir.exists() else []
        sd = SolveFolder(_store_of(layout, store) / str(e.get("solve_id"))).logs_dir
        logs += sorted(str(p) for p in sd.glob("*.log")) if sd.exists() else []
        if not logs:  # no job of this case started (the pipeline stopped before): nothing to record
            continue
        case.write_metrics(failure_record(
            e, f"a job of this case ended without a result (crashed or killed); see {', '.join(logs)}",
            "run"))
        marked.append(e["case_id"])
    return marked


# -- Snakemake -------------------------------------------------------------------------------------------
def resolve_profile(name_or_path: str | None) -> Path | None:
    """A profile folder: a path to a folder holding ``config.yaml``, or the name of one in workflow/profiles/."""
    if name_or_path is None:
        return None
    p = Path(name_or_path)
    if p.is_dir():
        return p.resolve()
    q = PROFILES_DIR / name_or_path
    if q.is_dir():
        return q
    known = sorted(x.name for x in PROFILES_DIR.iterdir() if (x / "config.yaml").exists())
    raise ValueError(f"profile {name_or_path!r} is neither a folder nor one of {known}")


def snakemake_args(study_path: str | Path, *, results_dir: str | Path = "results", store: str | Path | None = None,
                   workdir: str | Path = ".",
                   cores: int | None = None, jobs: int | None = None, threads_per_job: int | None = None,
                   profile: str | None = "local", targets: Iterable[str] = (), dry_run: bool = False,
                   extra: Iterable[str] = (), prepared: Prepared | None = None) -> list[str]:
    """The ``snakemake`` command line for a study (without the interpreter prefix).

    ``prepared``: the preparation just made (:func:`prepare`); the Snakefile then reads its ``plan.json``
    (checked against its digest) instead of expanding the study, and its jobs need not load the study.
    """
    args = ["--snakefile", str(SNAKEFILE), "--directory", str(Path(workdir).resolve())]
    if prepared is None:  # the Snakefile reads the study file (Snakemake parses it as its config)
        args += ["--configfile", str(Path(study_path).resolve())]
    args += ["--config", f"study_file={Path(study_path).resolve()}", f"results_dir={results_dir}"]
    if prepared is not None:  # the Snakefile reads the plan just written; Snakemake need not parse the study
        args += [f"study_name={prepared.layout.root.name}", f"plan_digest={prepared.digest}"]
    if store is not None:
        args.append(f"solve_store={store}")
    if threads_per_job is not None:
        args.append(f"threads_per_job={int(threads_per_job)}")
    prof = resolve_profile(profile)
    if prof is not None:
        args += ["--profile", str(prof)]
    if cores is not None:
        args += ["--cores", str(int(cores))]
    elif prof is None:
        args += ["--cores", "2"]
    if jobs is not None:
        args += ["--jobs", str(int(jobs))]
    # see the module docstring: identity-based folders make modification times the only trigger needed
    args += ["--rerun-triggers", "mtime"]
    # outputs of jobs killed with their run: every file is renamed into place complete, so an output
    # Snakemake still marks incomplete is whole but possibly stale; redo its job instead of stopping
    args += ["--rerun-incomplete"]
    # no Snakemake directory lock: runs of one study exclude each other with the study's run lock, and
    # runs of different studies needing the same solve meet at that solve folder's lock (.store)
    args += ["--nolock"]
    if dry_run:
        args += ["--dry-run", "--quiet", "rules"]
    args += list(extra)
    args += list(targets)
    return args


def snakemake_cmd(*args: str) -> list[str]:
    return [sys.executable, "-m", "snakemake", *args]


_STATS_ROW = re.compile(r"^\s*([A-Za-z_][\w]*)\s+(\d+)\s*$")


def parse_job_stats(text: str) -> dict[str, int]:
    """Per-rule job counts from Snakemake's ``Job stats`` table (empty when nothing is to be done)."""
    counts: dict[str, int] = {}
    lines = text.splitlines()
    for k, line in enumerate(lines):
        if line.strip().startswith("Job stats"):
            for row in lines[k + 1:]:
                if not row.strip() or row.strip().startswith("-") or row.split()[0] == "job":
                    if counts and not row.strip():
                        break
                    continue
                m = _STATS_ROW.match(row)
                if not m:
                    break
                if m.group(1) != "total":
                    counts[m.group(1)] = int(m.group(2))
            break
    return counts


def scheduled_jobs(study_path: str | Path, *, results_dir: str | Path = "results", workdir: str | Path = ".",
                   targets: Iterable[str] = (), store: str | Path | None = None) -> dict[str, int]:
    """Jobs Snakemake would run for the study now, per rule (a dry run; ``{}`` when nothing is to be done)."""
    cmd = snakemake_cmd(*snakemake_args(study_path, results_dir=results_dir, store=store, workdir=workdir, cores=1,
                                        profile="local", targets=targets, dry_run=True))
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=str(workdir))
    text = proc.stdout + "\n" + proc.stderr
    if proc.returncode != 0:
        raise RuntimeError(f"snakemake dry run failed (exit {proc.returncode}):\n{text[-3000:]}")
    if "Nothing to be done" in text:
        return {}
    counts = parse_job_stats(text)
    if not counts:
        raise RuntimeError(f"could not read the job count from the snakemake dry run:\n{text[-3000:]}")
    return counts


def format_duration(s: float) -> str:
    s = max(0, int(round(s)))
    h, r = divmod(s, 3600)
    m, sec = divmod(r, 60)
    return f"{h}h{m:02d}m{sec:02d}s" if h else (f"{m}m{sec:02d}s" if m else f"{sec}s")


def run_snakemake(args: list[str], *, layout: StudyLayout, entries: list[dict], log_path: Path,
                  workdir: str | Path = ".", poll_s: float = 3.0,
                  echo: Callable[[str], None] = print, pass_fds: tuple[int, ...] = (), cluster: bool = False,
                  detail_s: float = 30.0) -> int:
    """Run Snakemake in a subprocess, its output to ``log_path``; print progress (cases done/total, ETA).

    Every ``detail_s`` seconds it also prints, and appends to ``logs/progress.log``, each running
    excitation's timesteps, energy decay and time left (:func:`bodysweep.workflow.progress.running_progress`).

    ``pass_fds``: file descriptors Snakemake inherits (the study's run lock). Returns Snakemake's exit code.
    Snakemake runs in a session of its own; a stop signal (SIGINT, SIGTERM, SIGHUP) ends that session
    (:func:`bodysweep.workflow.interrupt.stop_run`; ``cluster``: the executor submits to SLURM) and raises
    :class:`~bodysweep.workflow.interrupt.RunInterrupted` carrying the stop report.
    """
    from .interrupt import PARENT_ENV, RunInterrupted, stop_run, stop_signals_raise

    log_path.parent.mkdir(parents=True, exist_ok=True)
    todo = [e for e in entries if not CaseFolder(layout.case_dir(e["case_id"])).has_metrics()]
    total, start = len(todo), time.monotonic()
    echo(f"running {total} of {len(entries)} cases (log: {log_path})")
    since = log_path.stat().st_size if log_path.exists() else 0
    with open(log_path, "ab") as log, stop_signals_raise():
        proc = None
        try:
            proc = subprocess.Popen(snakemake_cmd(*args), stdout=log, stderr=subprocess.STDOUT, cwd=str(workdir),
                                    pass_fds=tuple(pass_fds), start_new_session=True,
                                    env={**os.environ, PARENT_ENV: str(os.getpid())})
            return _follow(proc, layout, todo, total, start, echo, poll_s, detail_s)
        except RunInterrupted as exc:
            import signal as _signal

            from .interrupt import STOP_SIGNALS

            # a second Ctrl-C must not cut the stop short
            old = {s: _signal.signal(s, _signal.SIG_IGN) for s in STOP_SIGNALS}
            try:
                if proc is not None:
                    exc.report = stop_run(proc, exc.signum, cluster=cluster, log_path=log_path, log_since=since)
            finally:
                for s, h in old.items():
                    _signal.signal(s, h)
            raise


def _follow(proc, layout: StudyLayout, todo: list[dict], total: int, start: float, echo, poll_s: float,
            detail_s: float = 30.0) -> int:
    """Print progress until Snakemake ends; its exit code."""
    last = None
    last_detail = time.monotonic()
    while True:
        rc = proc.poll()
        done = sum(CaseFolder(layout.case_dir(e["case_id"])).has_metrics() for e in todo)
        if total and done != last:
            el = time.monotonic() - start
            eta = f", ETA {format_duration(el / done * (total - done))}" if 0 < done < total else ""
            echo(f"  {done}/{total} cases finished, {format_duration(el)} elapsed{eta}")
            last = done
        if rc is None and time.monotonic() - last_detail >= detail_s:  # within-case progress
            last_detail = time.monotonic()
            detail = running_progress(layout, todo)
            for line in detail:
                echo(line)
            if detail:
                with open(layout.logs_dir / "progress.log", "a") as plog:
                    stamp = time.strftime("%Y-%m-%dT%H:%M:%S")
                    plog.write("".join(f"{stamp} {ln.strip()}\n" for ln in detail))
        if rc is not None:
            return rc
        time.sleep(poll_s)


# -- the Snakefile's view ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class SnakefileContext:
    """What the Snakefile needs: the layout, the cases and their excited ports, threads per solve job."""

    layout: StudyLayout
    entries: tuple
    threads_per_job: int
    store: Path = Path("results") / "_solves"

    @property
    def case_ids(self) -> list[str]:
        return [e["case_id"] for e in self.entries]

    @property
    def solve_ids(self) -> list[str]:
        return sorted({e["solve_id"] for e in self.entries})

    def solve_of(self, case_id: str) -> str:
        d = self.__dict__.get("_solve_cache")
        if d is None:
            d = {e["case_id"]: e["solve_id"] for e in self.entries}
            object.__setattr__(self, "_solve_cache", d)
        return d[case_id]

    def solve_ports(self, solve_id: str) -> list[int]:
        d = self.__dict__.get("_solve_ports_cache")
        if d is None:
            d = {e["solve_id"]: e["ports"] for e in self.entries}
            object.__setattr__(self, "_solve_ports_cache", d)
        return d[solve_id]

    def ports(self, case_id: str) -> list[int]:
        return self._ports[case_id]

    @property
    def _ports(self) -> dict[str, list[int]]:
        d = self.__dict__.get("_ports_cache")
        if d is None:
            d = {e["case_id"]: e["ports"] for e in self.entries}
            object.__setattr__(self, "_ports_cache", d)
        return d


def default_threads_per_job() -> int:
    """Engine threads per solve job by default: 1, so that on a 2-core machine two cases run side by side.

    Small and medium FDTD cases scale better as parallel single-thread jobs than as one job on two
    threads (the engine is memory-bound); ``--threads-per-job`` sets it for large cases. Measured with
    ``benchmarks/parallel_layout.py`` (2 shared cores, 2026-12-02): two single-thread jobs side by side
    gave 2.8x (31 k cells) and 2.5x (312 k cells) the throughput of one job on two threads; at 981 k
    cells one job on two threads was 1.16x faster, so studies of meshes around 1 M cells and more
    should pass ``--threads-per-job 2``. The default is not made per case: Snakemake asks for a job's
    threads while it builds the DAG (also in a dry run), and knowing a case's cell count means meshing
    it, 20-60 ms per case (benchmarks/overhead.py) in every dry run.
    """
    return 1


def snakefile_context(config: dict, *, main_process: bool, configfiles: list | None = None) -> SnakefileContext:
    """The cases of the study the Snakefile was started with.

    Started by ``bodysweep run`` (config ``study_name`` and ``plan_digest``): the ``plan.json`` that run
    just wrote, nothing expanded, the study file not even read; a plan whose digest differs (changed
    since) is refused. Started by hand (``snakemake --configfile STUDY``): the main process prepares the
    study (:func:`prepare`, from its remembered expansion when nothing changed), job processes read the
    plan. The study file is ``config["study_file"]`` or the last ``--configfile``.
    """
    results_dir = config.get("results_dir", "results")
    threads = int(config.get("threads_per_job") or default_threads_per_job())
    from .store import store_root

    store = store_root(results_dir, config.get("solve_store"))
    name, digest = config.get("study_name"), config.get("plan_digest")
    if name and digest:
        layout = StudyLayout.of(str(name), results_dir)
        if main_process and plan_digest(layout) != str(digest):
            raise ValueError(f"{layout.plan_file} changed after `bodysweep run` prepared it (another preparation "
                             "of the same study?); run the study again")
        return SnakefileContext(layout, tuple(read_plan(layout)["cases"]), threads, store)
    study_file = config.get("study_file") or (str(configfiles[-1]) if configfiles else None)
    if not study_file:
        raise ValueError("no study given: run `snakemake --configfile studies/<study>.yaml` or `bodysweep run <study>.yaml`")
    if main_process:
        prep = prepare(study_file, results_dir, store)
        return SnakefileContext(prep.layout, tuple(prep.entries), threads, store)
    layout = StudyLayout.of(load(study_file).name, results_dir)
    return SnakefileContext(layout, tuple(read_plan(layout)["cases"]), threads, store)
