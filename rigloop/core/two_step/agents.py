"""Simulated agents on the two-step task, with everything true about them kept.

An agent of a given kind (model_free, model_based, hybrid with any w, successor) chooses
by ``values.TwoStepValues.first_stage`` and the softmax of ``choice``, on a task from
``task.TwoStepTask``; a run returns per-trial arrays and the agent's true values and
choice probabilities, so tests and fits can be judged against the truth. Runs are
seeded: the same (kind, params, n_trials, seed, task) gives the same run.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...errors import BadArgument
from .choice import first_stage_probabilities, second_stage_probabilities
from .params import TwoStepParams, check_kind
from .task import TwoStepTask
from .values import TwoStepValues

# the shipped agents: typical parameters of a well-engaged animal (invented, not fitted)
PRESETS: dict[str, tuple[str, TwoStepParams]] = {
    "model_free": ("model_free", TwoStepParams(alpha1=0.5, alpha2=0.5, lam=1.0, beta1=5.0,
                                                beta2=5.0, p=0.1, w=0.0)),
    "model_based": ("model_based", TwoStepParams(alpha1=0.5, alpha2=0.5, lam=0.6, beta1=5.0,
                                                  beta2=5.0, p=0.1, w=1.0)),
    "hybrid": ("hybrid", TwoStepParams(w=0.5)),
    "successor": ("successor", TwoStepParams(alpha1=0.3, alpha2=0.5, lam=0.6, beta1=5.0,
                                             beta2=5.0, p=0.1, w=0.0)),
}


@dataclass(frozen=True)
class AgentRun:
    """One simulated session. Per trial t (arrays of length n_trials):
    a1, s2, a2 (ints), reward (0/1 floats), common (bool: the action's common state);
    truth: reward_probabilities (n, 2, 2) of the task, q_first (n, 2) the first-stage
    values the agent chose by, q_mf, q_mb, q_sr (n, 2), q2 (n, 2, 2) (all before the
    trial's learning), p_first (n, 2), p_second (n, 2) choice probabilities."""

    kind: str
    params: TwoStepParams
    seed: int
    a1: np.ndarray
    s2: np.ndarray
    a2: np.ndarray
    reward: np.ndarray
    common: np.ndarray
    reward_probabilities: np.ndarray
    q_first: np.ndarray
    q_mf: np.ndarray
    q_mb: np.ndarray
    q_sr: np.ndarray
    q2: np.ndarray
    p_first: np.ndarray
    p_second: np.ndarray

    @property
    def n_trials(self) -> int:
        return len(self.a1)


def simulate_agent(kind: str, n_trials: int, seed: int, params: TwoStepParams | None = None,
                   task: TwoStepTask | None = None) -> AgentRun:
    """A seeded run of a ``kind`` agent (a preset name or a learner kind) for n_trials.

    params: the agent's parameters (default: the preset's); for kind "hybrid" w is
    params.w; task: the task (default ``TwoStepTask()``).
    """
    if kind in PRESETS:
        learner, preset = PRESETS[kind]
    else:
        learner, preset = check_kind(kind), TwoStepParams()
    params = preset if params is None else params
    task = TwoStepTask() if task is None else task
    n = int(n_trials)
    if n < 1:
        raise BadArgument("n_trials", "a whole number >= 1", n_trials)
    rng = np.random.default_rng(seed)
    probs = task.reward_walk(n, rng)
    a1 = np.empty(n, dtype=np.int64)
    s2 = np.empty(n, dtype=np.int64)
    a2 = np.empty(n, dtype=np.int64)
    reward = np.empty(n)
    common = np.empty(n, dtype=bool)
    q_first, q_mf, q_mb, q_sr = (np.empty((n, 2)) for _ in range(4))
    q2 = np.empty((n, 2, 2))
    p_first, p_second = np.empty((n, 2)), np.empty((n, 2))
    v = TwoStepValues()
    for t in range(n):
        q_mf[t], q_mb[t], q_sr[t], q2[t] = v.q1, v.q_mb, v.q_sr, v.q2
        q_first[t] = v.first_stage(learner, params.w)
        p_first[t] = first_stage_probabilities(q_first[t], params.beta1, params.p, v.previous_a1)
        a1[t] = int(rng.random() >= p_first[t, 0])
        s2[t], common[t] = task.transition(int(a1[t]), rng)
        p_second[t] = second_stage_probabilities(v.q2[s2[t]], params.beta2)
        a2[t] = int(rng.random() >= p_second[t, 0])
        reward[t] = float(rng.random() < probs[t, s2[t], a2[t]])
        v = v.learned(int(a1[t]), int(s2[t]), int(a2[t]), reward[t], params)
    return AgentRun(kind=learner, params=params, seed=int(seed), a1=a1, s2=s2, a2=a2,
                    reward=reward, common=common, reward_probabilities=probs, q_first=q_first,
                    q_mf=q_mf, q_mb=q_mb, q_sr=q_sr, q2=q2, p_first=p_first, p_second=p_second)


def hybrid_agent(w: float, n_trials: int, seed: int, params: TwoStepParams | None = None,
                 task: TwoStepTask | None = None) -> AgentRun:
    """A hybrid agent with weight ``w`` on its model-based values (other parameters: params)."""
    base = PRESETS["hybrid"][1] if params is None else params
    return simulate_agent("hybrid", n_trials, seed, base.with_(w=w), task)
