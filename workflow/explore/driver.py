"""Rounds of a guided search through Optuna's ask-and-tell interface, independent of what evaluates a point.

The optimiser's history lives in an Optuna journal file in the search folder; which trials form which
round is written to ``rounds.json`` (atomically) once a whole round has been asked. That makes a search

* **resumable**: a killed search is continued by the next call. Trials of a complete round that were not
  told yet are evaluated again (an evaluator that keeps finished results, such as the pipeline, recomputes
  nothing); trials of a round that was being asked when the search was killed are told failed with the
  reason ``interrupted proposal`` and the round is asked again;
* **reproducible**: round ``r`` is asked with a fresh sampler seeded from ``(seed, r)``; Optuna's samplers
  ignore failed trials, so the proposals depend only on the seed and the results told so far, not on
  where a search was interrupted.
"""
from __future__ import annotations

import hashlib
import json
import logging
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Protocol

import numpy as np

from ..atomic import write_json
from ..study.exploration import SearchSpec

#: points proposed before the model is used: enough to see every parameter vary, few enough to leave
#: the budget to the model (measured with benchmarks/search_efficiency.py --variants: 4 rather than 8)
STARTUP_FRACTION = 0.25
STARTUP_MAX = 4
#: how a proposal equal to a point already run is told: ``"pruned"`` (the sampler counts it among the worse
#: points and moves on; measured better than ``"value"``, which tells its result again and so weights that
#: point once more in the sampler's model per repeat)
REPEATS = "pruned"
#: a search stops after this many proposals per point of the budget (refused and repeated ones count here)
MAX_PROPOSALS_PER_POINT = 10
#: a round asks at most this many times its batch (repeats of points already run are told, not run)
MAX_ASKS_PER_ROUND = 10


@dataclass
class Outcome:
    """What evaluating one point gave: the figure of merit (``None``: failed), constraint excesses
    (``<= 0`` met, one per constraint) and a reason when failed or doubtful."""

    value: float | None
    excess: list[float] = field(default_factory=list)
    reason: str = ""
    case_ids: list[str] = field(default_factory=list)


class Evaluator(Protocol):
    def refuse(self, point: dict) -> str | None:
        """Why a point cannot be built (``None``: it can); called before anything runs."""

    def evaluate(self, points: list[dict], all_points: list[dict]) -> list[Outcome]:
        """Outcomes of ``points``; ``all_points`` are every point run so far (for cumulative tables)."""


class SearchStopped(Exception):
    """The evaluator could not go on (e.g. the pipeline failed); ``code`` is the exit code to return."""

    def __init__(self, message: str, code: int):
        super().__init__(message)
        self.code = code


def _optuna():
    import optuna

    optuna.logging.set_verbosity(logging.WARNING)
    warnings.filterwarnings("ignore", category=optuna.exceptions.ExperimentalWarning)
    return optuna


def round_seed(seed: int, round_index: int) -> int:
    """Seed of round ``round_index``'s sampler: independent streams per round (numpy SeedSequence)."""
    return int(np.random.SeedSequence([int(seed), int(round_index)]).generate_state(1)[0])


def n_startup(spec: SearchSpec) -> int:
    return max(spec.batch, min(STARTUP_MAX, math.ceil(STARTUP_FRACTION * spec.max_points)))


def make_sampler(spec: SearchSpec, round_index: int):
    """The round's sampler: TPE (multivariate, grouped for conditional parameters, constant liar for
    batches; it reads the constraint values set on each told trial) or uniform random sampling."""
    optuna = _optuna()
    seed = round_seed(spec.seed, round_index)
    if spec.optimiser == "random":
        return optuna.samplers.RandomSampler(seed=seed)
    return optuna.samplers.TPESampler(seed=seed, **tpe_options(spec))


def tpe_options(spec: SearchSpec) -> dict:
    """The TPE sampler's settings (benchmarks/search_efficiency.py --variants compares others)."""
    return {"n_startup_trials": n_startup(spec), "multivariate": True, "group": True, "constant_liar": True}


def _tidy(v: float) -> float:
    return float(f"{float(v):.6g}")  # 6 significant digits: readable labels, far below any tolerance


def suggest_point(trial, spec: SearchSpec) -> dict:
    """Ask the trial for one point (define-by-run: a conditional parameter only when its option is chosen)."""
    point: dict = {}
    for p in spec.parameters:
        if p.parent is not None and point.get(p.parent) not in p.parent_options:
            continue
        if p.is_choice:
            point[p.name] = trial.suggest_categorical(p.name, list(p.options))
        elif p.integer:
            step = max(1, int(round(p.step))) if p.step else 1
            point[p.name] = int(trial.suggest_int(p.name, math.ceil(p.low), math.floor(p.high), step=step))
        elif p.step:
            high = p.low + math.floor((p.high - p.low) / p.step + 1e-9) * p.step
            point[p.name] = _tidy(trial.suggest_float(p.name, p.low, high, step=p.step))
        else:
            point[p.name] = _tidy(trial.suggest_float(p.name, p.low, p.high))
    return point


def search_key(content: dict) -> str:
    """Short hash naming a search folder: the study content and code versions (any change = new search)."""
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:10]


class SearchDriver:
    """Rounds of ask -> evaluate -> tell for one search, its state in ``folder``."""

    def __init__(self, spec: SearchSpec, folder: Path, echo: Callable[[str], None] = print,
                 sampler: Callable | None = None, repeats: str = REPEATS):
        """``sampler``: ``(spec, round_index) -> Optuna sampler`` in place of :func:`make_sampler` (benchmarks)."""
        self.spec, self.folder, self.echo = spec, Path(folder), echo
        self.make_sampler = sampler or make_sampler
        self.repeats = repeats
        self.folder.mkdir(parents=True, exist_ok=True)
        self.rounds_file = self.folder / "rounds.json"
        optuna = _optuna()
        from optuna.storages import JournalStorage
        from optuna.storages.journal import JournalFileBackend

        storage = JournalStorage(JournalFileBackend(str(self.folder / "journal.log")))
        direction = "maximize" if spec.maximise else "minimize"
        self.study = optuna.create_study(storage=storage, study_name="search", direction=direction,
                                         load_if_exists=True)

    # -- bookkeeping ---------------------------------------------------------------------------------------
    def rounds(self) -> list[list[int]]:
        try:
            return json.loads(self.rounds_file.read_text())["rounds"]
        except FileNotFoundError:
            return []

    def trials(self) -> list:
        return self.study.get_trials(deepcopy=False)

    def _listed(self) -> dict[int, int]:
        return {n: r for r, nums in enumerate(self.rounds()) for n in nums}

    def _fail_unlisted(self) -> int:
        """Tell failed every unfinished trial of a round that was never completely asked."""
        optuna = _optuna()
        listed = self._listed()
        n = 0
        for t in self.trials():
            if t.state == optuna.trial.TrialState.RUNNING and t.number not in listed:
                _attr(self.study, t, "reason", "interrupted proposal")
                self.study.tell(t.number, state=optuna.trial.TrialState.FAIL)
                n += 1
        return n

    def n_run_points(self) -> int:
        """Points of the budget used: listed trials that were not refused before running."""
        by_num = {t.number: t for t in self.trials()}
        return sum(1 for n in self._listed()
                   if not by_num[n].user_attrs.get("refused") and "repeat_of" not in by_num[n].user_attrs)

    def best_by_round(self) -> list[float | None]:
        """Best feasible figure of merit after each round (``None`` before any)."""
        by_num = {t.number: t for t in self.trials()}
        best, out = None, []
        for nums in self.rounds():
            for n in nums:
                v = feasible_value(by_num[n])
                if v is not None and (best is None or (v > best if self.spec.maximise else v < best)):
                    best = v
            out.append(best)
        return out

    def stop_reason(self) -> str | None:
        spec = self.spec
        if self.n_run_points() >= spec.max_points:
            return f"budget spent ({self.n_run_points()} points x {spec.cases_per_point} cases)"
        if len(self._listed()) >= MAX_PROPOSALS_PER_POINT * spec.max_points:
            return f"{len(self._listed())} proposals, too many refused"
        k = spec.patience_rounds
        bests = self.best_by_round()
        if k and len(bests) > k and bests[-1] is not None and bests[-1] == bests[-1 - k]:
            return f"no improvement over the last {k} rounds"
        return None

    # -- the rounds --------------------------------------------------------------------------------------
    def _known(self) -> dict[str, object]:
        """Point (canonical JSON) -> the first listed trial that ran it (not refused, not a repeat)."""
        by_num = {t.number: t for t in self.trials()}
        out: dict[str, object] = {}
        for n in sorted(self._listed()):
            t = by_num[n]
            if not t.user_attrs.get("refused") and "repeat_of" not in t.user_attrs:
                out.setdefault(point_key(t.user_attrs["point"]), t)
        return out

    def ask_round(self, evaluator: Evaluator) -> list:
        """Ask up to ``batch`` new points. A proposal equal to a point already run is told at once, as
        pruned (``repeats="pruned"``, the default) or with that point's result (``"value"``); it costs no case
        and no budget. One equal to a point still running or to a proposal of this round is told failed as a
        repeat. At most ``MAX_ASKS_PER_ROUND x batch`` asks."""
        optuna = _optuna()
        r = len(self.rounds())
        self.study.sampler = self.make_sampler(self.spec, r)
        n = min(self.spec.batch, self.spec.max_points - self.n_run_points())
        known = self._known()
        if r == 0 and self.spec.baseline and not any(t.state == optuna.trial.TrialState.WAITING
                                                     for t in self.trials()):
            self.study.enqueue_trial(dict(self.spec.baseline))  # the reference point is the first proposal
        nums, fresh, asks = [], 0, 0
        while fresh < n and asks < MAX_ASKS_PER_ROUND * n:
            asks += 1
            trial = self.study.ask()
            point = suggest_point(trial, self.spec)
            trial.set_user_attr("point", point)
            trial.set_user_attr("round", r)
            nums.append(trial.number)
            same = known.get(point_key(point))
            if same is not None:
                trial.set_user_attr("repeat_of", same.number)
                if same.state == optuna.trial.TrialState.COMPLETE and self.repeats == "pruned":
                    trial.set_user_attr("reason", f"repeat of trial {same.number}")
                    self.study.tell(trial, state=optuna.trial.TrialState.PRUNED)
                elif same.state == optuna.trial.TrialState.COMPLETE:
                    trial.set_user_attr("excess", same.user_attrs.get("excess", []))
                    for key, x in (same.constraints or {}).items():
                        trial.set_constraint(key, x)
                    self.study.tell(trial, same.value)
                else:
                    trial.set_user_attr("reason", f"repeat of trial {same.number} ({same.state.name.lower()})")
                    self.study.tell(trial, state=optuna.trial.TrialState.FAIL)
                continue
            why = evaluator.refuse(point)
            if why:
                trial.set_user_attr("refused", True)
                trial.set_user_attr("reason", why)
                self.study.tell(trial, state=optuna.trial.TrialState.FAIL)
                self.echo(f"  refused before any solve: {_fmt_point(point)}: {why}")
                continue
            known[point_key(point)] = next(t for t in reversed(self.trials()) if t.number == trial.number)
            fresh += 1
        write_json(self.rounds_file, {"rounds": self.rounds() + [nums]})
        return [t for t in self.trials() if t.number in nums and t.state == optuna.trial.TrialState.RUNNING]

    def pending(self) -> list:
        optuna = _optuna()
        listed = self._listed()
        return sorted((t for t in self.trials() if t.state == optuna.trial.TrialState.RUNNING and t.number in listed),
                      key=lambda t: t.number)

    def all_points(self) -> list[dict]:
        by_num = {t.number: t for t in self.trials()}
        return [by_num[n].user_attrs["point"] for n in sorted(self._listed())
                if not by_num[n].user_attrs.get("refused") and "repeat_of" not in by_num[n].user_attrs]

    def run(self, evaluator: Evaluator) -> str:
        """Rounds until a stop rule holds; returns the stop reason. Raises SearchStopped from the evaluator."""
        optuna = _optuna()
        stale = self._fail_unlisted()
        if stale:
            self.echo(f"an earlier search was interrupted while proposing: {stale} proposals discarded, the round is asked again")
        while True:
            pending = self.pending()
            if pending:
                self.echo(f"resuming {len(pending)} points of round {self._listed()[pending[0].number] + 1}")
            else:
                why = self.stop_reason()
                if why:
                    return why
                pending = self.ask_round(evaluator)
                if not pending:
                    continue
            r = self._listed()[pending[0].number]
            points = [t.user_attrs["point"] for t in pending]
            self.echo(f"round {r + 1}: {len(points)} points: " + "; ".join(_fmt_point(p) for p in points))
            outcomes = evaluator.evaluate(points, self.all_points())
            for t, o in zip(pending, outcomes):
                _attr(self.study, t, "case_ids", list(o.case_ids))
                if o.reason:
                    _attr(self.study, t, "reason", o.reason)
                if o.value is None:
                    self.study.tell(t.number, state=optuna.trial.TrialState.FAIL)
                else:
                    _attr(self.study, t, "excess", [float(x) for x in o.excess])
                    live = optuna.trial.Trial(self.study, t._trial_id)
                    for i, x in enumerate(o.excess):  # <= 0: met; the sampler prefers points meeting all
                        live.set_constraint(f"c{i}", float(x))
                    self.study.tell(t.number, float(o.value))
            best = self.best_by_round()[-1]
            self.echo(f"round {r + 1} told: best {self.spec.merit_column} so far "
                      f"{'-' if best is None else format(best, '.4g')} after {self.n_run_points()} points")


def _attr(study, frozen, key: str, value) -> None:
    """Set a user attribute of an unfinished trial known only as a FrozenTrial (e.g. after a restart)."""
    study._storage.set_trial_user_attr(frozen._trial_id, key, value)  # what Trial.set_user_attr does


def feasible_value(t) -> float | None:
    """The trial's figure of merit if it finished and meets every constraint, else ``None``."""
    if t.state.name != "COMPLETE" or t.value is None:
        return None
    if any(x > 0 for x in t.user_attrs.get("excess", [])):
        return None
    return float(t.value)


def point_key(point: dict) -> str:
    return json.dumps(point, sort_keys=True)


def _fmt_point(point: dict) -> str:
    return " ".join(f"{k}={v:.6g}" if isinstance(v, float) else f"{k}={v}" for k, v in point.items())
