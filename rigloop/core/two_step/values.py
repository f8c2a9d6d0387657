"""Everything a two-step learner carries from trial to trial, and the first-stage values
each kind of learner chooses by.

One state serves every kind, because learning does not depend on how the values are
weighed at choice: the model-free values (Q1, Q2: ``model_free``), the transition counts
(``model_based``), and the successor occupancies and state rewards (``successor``) all
update from what the animal did and got. Only the first-stage values in use differ:

    model_free: Q_MF = Q1        model_based: Q_MB = P @ max Q2
    hybrid:     w·Q_MB + (1 − w)·Q_MF        successor: Q_SR = M @ R

Values start at 0 (Daw et al. 2011, Neuron 69:1204), counts at 0 under the prior.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .choice import net_values
from .model_based import count_transitions, model_based_values, transition_probabilities
from .model_free import two_step_update
from .params import TwoStepParams, check_kind
from .successor import two_step_sr_update, two_step_sr_values


def _zeros(*shape: int) -> np.ndarray:
    return np.zeros(shape)


@dataclass(frozen=True, slots=True)
class TwoStepValues:
    """q1 (2,) model-free first stage; q2 (2, 2) second stage; counts (2, 2) transitions seen;
    m (2, 2) successor occupancies; r_state (2,) state rewards; previous_a1 (-1: none)."""

    q1: np.ndarray = field(default_factory=lambda: _zeros(2))
    q2: np.ndarray = field(default_factory=lambda: _zeros(2, 2))
    counts: np.ndarray = field(default_factory=lambda: _zeros(2, 2))
    m: np.ndarray = field(default_factory=lambda: _zeros(2, 2))
    r_state: np.ndarray = field(default_factory=lambda: _zeros(2))
    previous_a1: int = -1

    def learned(self, a1: int, s2: int, a2: int, reward: float,
                params: TwoStepParams) -> TwoStepValues:
        """The state after a trial: first action a1, state reached s2, second action a2, reward."""
        q1, q2 = two_step_update(self.q1, self.q2, a1, s2, a2, reward,
                                 params.alpha1, params.alpha2, params.lam)
        m, r_state = two_step_sr_update(self.m, self.r_state, a1, s2, reward,
                                        params.alpha1, params.alpha2)
        return TwoStepValues(q1=q1, q2=q2, counts=count_transitions(self.counts, a1, s2),
                             m=m, r_state=r_state, previous_a1=int(a1))

    @property
    def transitions(self) -> np.ndarray:
        """P[a, s] learned from the counts."""
        return transition_probabilities(self.counts)

    @property
    def q_mb(self) -> np.ndarray:
        return model_based_values(self.transitions, self.q2)

    @property
    def q_sr(self) -> np.ndarray:
        return two_step_sr_values(self.m, self.r_state)

    def first_stage(self, kind: str, w: float = 0.5) -> np.ndarray:
        """The first-stage values a learner of ``kind`` chooses by (hybrid: weight ``w``)."""
        check_kind(kind)
        if kind == "model_free":
            return self.q1.copy()
        if kind == "model_based":
            return self.q_mb
        if kind == "successor":
            return self.q_sr
        return net_values(self.q_mb, self.q1, w)

    def state(self) -> dict:
        """Plain lists and numbers (for snapshots); ``from_state`` reads them back."""
        return {"q1": self.q1.tolist(), "q2": self.q2.tolist(), "counts": self.counts.tolist(),
                "m": self.m.tolist(), "r_state": self.r_state.tolist(),
                "previous_a1": self.previous_a1}

    @classmethod
    def from_state(cls, d: dict) -> TwoStepValues:
        return cls(q1=np.array(d["q1"], dtype=np.float64), q2=np.array(d["q2"], dtype=np.float64),
                   counts=np.array(d["counts"], dtype=np.float64),
                   m=np.array(d["m"], dtype=np.float64),
                   r_state=np.array(d["r_state"], dtype=np.float64),
                   previous_a1=int(d["previous_a1"]))
