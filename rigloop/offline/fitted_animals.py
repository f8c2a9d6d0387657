"""Fitted models that behave: a learner and its response link, with parameters fitted to
an animal, generating responses instead of scoring them.

``FittedModel`` is what ``rigloop fit --json`` found (learner, link, parameters) on the
representation a rule file gives; ``ModelRuns`` runs it as R independent simulated
animals at once (the batched learners of ``offline/batch``), each drawing its own
responses and learning from the outcomes they bring; ``FittedAnimal`` is one of them
playing animal and rig for ``simulate_session`` (``rigloop simulate --animals-from``).

The model is the fit's own, read the same way (``fit/likelihood.py``):

* link ``respond`` (go/no-go): P(respond) = lapse/2 + (1 − lapse)·σ(β(V − θ)), V the value
  of the trial's first cue at its onset; every trial with a cue teaches its rows (reward
  only when delivered).
* link ``choice`` (two sides): the learner holds ``cue:left`` and ``cue:right`` columns;
  P(right) = lapse/2 + (1 − lapse)·σ(β(Q_R − Q_L) + bias + persev·h), h the choice-history
  kernel; the chosen side's column learns the outcome.

A fitted model has no engagement: it never omits a trial (replaying an animal's own
trials, it omits where the animal did).
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..core.features import CueList, Representation, make_representation
from ..core.learners import LEARNERS, make_learner
from ..core.responses import history_step, p_respond, p_right
from ..core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent
from ..errors import BadArgument
from .batch import BatchKalmanFilter, BatchKalmanTD, BatchRescorlaWagner, BatchTD
from .simulate import TRUE_ENGAGED, TRUE_RESPOND, TRUE_RIGHT

LINK_PARAMS = {"respond": ("beta", "theta", "lapse"), "choice": ("beta", "bias", "lapse", "persev", "decay")}
_LINK_DEFAULTS = {"bias": 0.0, "persev": 0.0, "decay": 0.7}
_BATCHES = {b._single: b for b in (BatchRescorlaWagner, BatchTD, BatchKalmanFilter, BatchKalmanTD)}
SIDES = ("left", "right")


@dataclass(frozen=True, slots=True)
class FittedModel:
    """A learner with fitted parameters and its response link, on a representation.

    representation: over the task's plain cues (the choice link makes its cue:side columns).
    """

    learner: str
    link: str
    learner_params: dict[str, Any]
    link_params: dict[str, float]
    representation: Representation
    reward_unit_ul: float
    subject: str = ""

    def __post_init__(self) -> None:
        if self.learner not in LEARNERS:
            raise BadArgument("learner", f"one of {', '.join(LEARNERS)}", self.learner)
        if self.link not in LINK_PARAMS:
            raise BadArgument("link", "'respond' (go/no-go) or 'choice' (two sides)", self.link)
        missing = [p for p in LINK_PARAMS[self.link] if p not in self.link_params]
        if missing:
            raise BadArgument("params", f"the {self.link} link's parameters ({', '.join(LINK_PARAMS[self.link])})",
                              missing)
        make_learner(self.learner, 1, **self.learner_params)  # unknown or bad parameters: named now

    @property
    def rows_representation(self) -> Representation:
        """The representation the learner runs on (cue:side columns for the choice link)."""
        rep = self.representation
        if self.link != "choice":
            return rep
        sided = CueList([f"{c}:{s}" for c in rep.cues.cues for s in SIDES])
        return make_representation(rep.kind, sided, dt=rep.dt, n_bins=rep.n_bins, decay=rep.decay)


def split_params(learner: str, link: str, params: Mapping[str, Any]) -> tuple[dict, dict]:
    """A fit's parameters as (learner's, link's); link parameters it lacks take their defaults."""
    names = LEARNERS[learner]._param_names if learner in LEARNERS else ()
    lp = {k: v for k, v in params.items() if k in names}
    link_names = LINK_PARAMS.get(link, ())
    obs = {k: float(params[k]) if k in params else _LINK_DEFAULTS.get(k, math.nan) for k in link_names}
    return lp, obs


def model_representation(rules, learner: str) -> Representation:
    """The representation a fit of ``learner`` uses for this rule file's cues: plain cues
    (action values pooled), one row per trial for a reward learner, ``presence`` rows at
    the file's dt for a value learner (as the fit chooses them)."""
    from ..core.subject import representation_for

    f = rules.features
    rep = representation_for(rules)
    if rules.learner.values == "cue_action":
        rep = make_representation(f.kind, CueList(rules.cues), dt=f.dt, n_bins=f.n_bins, decay=f.decay)
    reward_learner = LEARNERS[learner].kind == "reward"
    if reward_learner and rep.timed:
        rep = make_representation("identity", rep.cues)
    elif not reward_learner and not rep.timed:
        rep = make_representation("presence", rep.cues, dt=f.dt)
    return rep


def models_from_fit_json(doc: Any, rules, source: str = "fit.json") -> list[FittedModel]:
    """The best-ranked fit of each subject in a ``rigloop fit --json`` document (one
    subject's object, or a list of them) as a FittedModel on ``rules``' cues."""
    docs = doc if isinstance(doc, list) else [doc]
    out = []
    for d in docs:
        if not isinstance(d, Mapping) or not isinstance(d.get("fits"), list) or not d["fits"]:
            raise BadArgument("--animals-from", "the JSON of `rigloop fit --json` ({\"subject\", \"fits\": "
                              "[{\"learner\", \"link\", \"params\"}, ...], \"ranking\"})", source)
        fits = d["fits"]
        ranking = d.get("ranking") or []
        best = next((f for name in ranking[:1] for f in fits if f.get("learner") == name), fits[0])
        learner, link = best.get("learner"), best.get("link", "respond")
        params = dict(best.get("params") or {})
        params.update(best.get("fixed") or {})
        lp, obs = split_params(learner, link, params)
        if learner not in LEARNERS:
            raise BadArgument("--animals-from", f"fits of known learners ({', '.join(LEARNERS)})", learner)
        rep = model_representation(rules, learner)
        out.append(FittedModel(learner, link, lp, obs, rep, rules.reward_unit_ul, str(d.get("subject", ""))))
    return out


def read_fit_json(path: str, rules) -> list[FittedModel]:
    """``models_from_fit_json`` of the file at ``path``."""
    try:
        with open(path, encoding="utf-8") as fh:
            doc = json.load(fh)
    except json.JSONDecodeError as err:
        raise BadArgument("--animals-from", "a JSON file written by `rigloop fit --json`",
                          f"{path} (line {err.lineno}: {err.msg})") from None
    return models_from_fit_json(doc, rules, path)


# --------------------------------------------------------------------------- many runs at once


class ModelRuns:
    """R simulated animals of one FittedModel, each learning from its own outcomes."""

    def __init__(self, model: FittedModel, runs: int, seed: int = 0):
        if int(runs) < 1:
            raise BadArgument("runs", "a whole number >= 1", runs)
        self.model = model
        self.runs = int(runs)
        self.rep = model.rows_representation
        single = make_learner(model.learner, self.rep.n_features, **model.learner_params)
        self.batch = _BATCHES[type(single)].from_learners([single] * self.runs)
        self.h = np.zeros(self.runs)  # choice-history kernel per run
        self.rng = np.random.default_rng(seed)
        self._onset: dict[str, np.ndarray] = {}

    def _row(self, column: str) -> np.ndarray:
        x = self._onset.get(column)
        if x is None:
            x = self._onset[column] = np.asarray(self.rep.onset_row(column), dtype=np.float64)
        return x

    def probability(self, cue: str) -> np.ndarray:
        """(R,) P(respond) (respond link) or P(right) (choice link) to ``cue`` now."""
        p = self.model.link_params
        w = self.batch.w
        if self.model.link == "respond":
            # V = x_onsetᵀ w per run
            V = w @ self._row(cue)
            return np.asarray(p_respond(V, p["beta"], p["theta"], p["lapse"]), dtype=np.float64)
        QL, QR = w @ self._row(f"{cue}:left"), w @ self._row(f"{cue}:right")
        return np.asarray(p_right(QL, QR, p["beta"], p["bias"], p["lapse"], p["persev"], self.h),
                          dtype=np.float64)

    def draw(self, cue: str) -> np.ndarray:
        """(R,) 1.0 respond / right, 0.0 withhold / left, drawn from ``probability``."""
        return (self.rng.random(self.runs) < self.probability(cue)).astype(np.float64)

    def learn(self, cues: Sequence[tuple[str, float, float]], duration: float, y: np.ndarray,
              reward: np.ndarray, reward_time: float) -> None:
        """Each run learns its trial: ``y`` its response (nan: omitted), ``reward`` (R,) in µL
        at ``reward_time``. Omitted choice trials teach nothing (no action was taken)."""
        unit = self.model.reward_unit_ul
        variants: dict[tuple, tuple[np.ndarray, np.ndarray]] = {}
        keys = []
        for s in range(self.runs):
            if self.model.link == "choice":
                side = None if y[s] != y[s] else SIDES[int(y[s])]
                key = (side, float(reward[s]))
            else:
                key = (None, float(reward[s]))
            keys.append(key)
            if key not in variants:
                side, amount = key
                if self.model.link == "choice":
                    shown = [(f"{c}:{side}", on, off) for c, on, off in cues] if side else []
                else:
                    shown = list(cues)
                out = [(reward_time, amount / unit)] if amount > 0 else []
                tr = self.rep.rows(shown, out, duration)
                variants[key] = (np.asarray(tr.X, dtype=np.float64), np.asarray(tr.r, dtype=np.float64))
        T = max(X.shape[0] for X, _ in variants.values())
        Xs = np.zeros((self.runs, T, self.rep.n_features))
        rs = np.zeros((self.runs, T))
        lengths = np.zeros(self.runs, dtype=np.intp)
        for s, key in enumerate(keys):
            X, r = variants[key]
            Xs[s, :len(X)] = X
            rs[s, :len(r)] = r
            lengths[s] = len(X)
        self.batch.learn_trials(Xs, rs, lengths)
        if self.model.link == "choice":
            code = np.where(np.isnan(y), 0.0, 2.0 * np.nan_to_num(y) - 1.0)
            self.h = np.asarray(history_step(self.h, code, self.model.link_params["decay"]), dtype=np.float64)


# --------------------------------------------------------------------------- one animal for simulate


@dataclass
class FittedAnimal:
    """A fitted model playing animal and rig for ``simulate_session``: it presents the
    decision's cue, draws its response from the model, scores it, delivers the armed
    reward and learns from it. The truth in ``extra`` is the model's own probability.

    sides: cue -> correct side (choice tasks); cues: the task's cues (reported in the truth).
    """

    subject: str
    model: FittedModel
    sides: Mapping[str, str] = field(default_factory=dict)
    cues: tuple[str, ...] = ()
    seed: int = 0
    cue_s: float = 1.0
    onset_s: float = 0.5

    def __post_init__(self) -> None:
        if self.model.link == "choice" and not self.sides:
            raise BadArgument("sides", "the correct side of each cue (a choice fit needs a two-choice rule file)",
                              dict(self.sides))
        self._runs = ModelRuns(self.model, 1, self.seed)

    def truth(self, decision: Decision) -> dict[str, float]:
        key = TRUE_RIGHT if self.model.link == "choice" else TRUE_RESPOND
        cues = self.cues or ((decision.cue,) if decision.cue else ())
        return {key.format(c): float(self._runs.probability(c)[0]) for c in cues}

    def trial(self, decision: Decision, rig: str, wall_time: float) -> TrialEvent:
        """Run the trial ``decision`` asks for and report it."""
        truth = self.truth(decision)
        truth[TRUE_ENGAGED] = 1.0
        cue = decision.cue
        onset, offset = self.onset_s, self.onset_s + self.cue_s
        duration = offset + 1.0
        if cue is None:
            return TrialEvent(subject=self.subject, rig=rig, session=decision.session, trial=decision.trial,
                              cues=(), outcome=Outcome(), response=Response(kind="none"), duration=duration,
                              wall_time=wall_time, extra=truth)
        y = self._runs.draw(cue)
        reward_ul, reward_time = 0.0, None
        if self.model.link == "choice":
            side = SIDES[int(y[0])]
            ok = side == self.sides.get(cue, "left")
            latency = offset + 0.3
            response = Response(kind="choice", value=side, result="correct" if ok else "incorrect", latency=latency)
            if ok and decision.reward_armed:
                reward_ul, reward_time = decision.reward_ul, latency
        else:
            licked = bool(y[0])
            go = decision.reward_prob > 0
            response = Response(kind="licks", value=3.0 if licked else 0.0,
                                result="correct" if licked == go else "incorrect",
                                latency=onset + 0.3 if licked else None)
            if licked and go and decision.reward_armed:
                reward_ul, reward_time = decision.reward_ul, offset
        self._runs.learn([(cue, onset, offset)], duration, y, np.array([reward_ul]),
                         reward_time if reward_time is not None else offset)
        outcome = Outcome(reward_ul=reward_ul, reward_time=reward_time)
        return TrialEvent(subject=self.subject, rig=rig, session=decision.session, trial=decision.trial,
                          cues=(CuePresentation(cue, onset, offset),), outcome=outcome, response=response,
                          duration=duration, wall_time=wall_time, extra=truth)


def fitted_animal(model: FittedModel, rules, subject: str, seed: int) -> FittedAnimal:
    """A FittedAnimal on ``rules``' cues (their sides from the cues' roles)."""
    sides = {name: spec.role for name, spec in rules.spec.cues.items() if spec.role in SIDES}
    f = rules.features
    cue_s = f.n_bins * f.dt if f.n_bins else 1.0
    return FittedAnimal(subject, model, sides=sides, cues=tuple(rules.spec.cues), seed=seed, cue_s=cue_s)


def simulate_fitted(rules, models: Sequence[FittedModel], *, subjects: int, sessions: int, max_trials: int,
                    seed: int = 1, db: str | None = None, out=None) -> int:
    """``rigloop simulate --animals-from``: ``subjects`` animals per fitted model (named
    after the fitted subject), each through ``sessions`` sessions; one line per animal."""
    import sys

    from .simulate import simulate_session

    out = out or sys.stdout
    store = None
    if db is not None:
        from ..store import Store

        store = Store(db)
    print(f"rule file '{rules.name}': {len(models)} fitted model(s) x {subjects} simulated animal(s) x "
          f"{sessions} sessions (at most {max_trials} trials each)", file=out)
    print(f"{'subject':<16}{'model':<30}{'trials/session':<22}{'µL/session':<22}{'correct':>8}  stage", file=out)
    try:
        for m_i, model in enumerate(models):
            for i in range(subjects):
                name = f"{model.subject or 'fit'}-sim{i + 1:02d}"
                animal = fitted_animal(model, rules, name, seed * 1000 + m_i * 100 + i)
                state, trials, ul, correct, scored = None, [], [], 0, 0
                for k in range(sessions):
                    run = simulate_session(rules, animal, session=f"sim{k + 1:02d}", state=state,
                                           start_time=1.8e9 + 86400 * k, max_trials=max_trials, store=store)
                    state = run.state
                    trials.append(len(run.events))
                    ul.append(sum(e.outcome.reward_ul for e in run.events))
                    for e in run.events:
                        if e.response.result in ("correct", "incorrect"):
                            scored += 1
                            correct += e.response.result == "correct"
                last = run.decisions[-1] if run.decisions else run.first
                print(f"{name:<16}{model.learner + ' / ' + model.link:<30}{' '.join(map(str, trials)):<22}"
                      f"{' '.join(f'{u:.0f}' for u in ul):<22}{correct / max(scored, 1):>8.0%}  {last.stage}",
                      file=out)
    finally:
        if store is not None:
            store.close()
    if db:
        print(f"every simulated trial is stored in {db}", file=out)
    return 0
