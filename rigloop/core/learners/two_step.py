"""The two-step learner: the hybrid of Daw et al. 2011 (Neuron 69:1204), learned from the
animal's own steps, with an online posterior over its weight w.

A rule file chooses it with ``[learner] model = "two_step"``. It reads a trial through
the rows of ``core/step_rows.py``: row 0 is the first-stage (state, action) the animal
took, row 1 the second-stage (state, action), and ``r`` the reward in reward units.
From them it updates the model-free values (SARSA(λ)), the learned transitions and the
second-stage values (``core/two_step``), and ``WPosterior``: the grid posterior over w
(with β1, perseveration and a side bias on the grid too, so choices that follow no
model leave w near its prior). A trial without both steps and both actions teaches
nothing (it is left out, as the published analyses leave out such trials).

Columns (``n_features`` = 6): first-stage left/right, then each second-stage state's
left/right. ``w`` (the weights rules read through ``predict``) holds the first-stage
net values at the posterior mean of w, then the second-stage values Q2.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np

from ..two_step import TwoStepParams, TwoStepValues, WPosterior
from . import _shared as sh
from ._shared import Learner, TrialResult

N_COLUMNS = 6


class TwoStepLearner(Learner):
    """Hybrid two-step learner with a posterior over w; alpha1, alpha2, lam as published."""

    name = "two_step"
    kind = "reward"
    bayesian = False
    _param_names = ("alpha1", "alpha2", "lam")

    __slots__ = ("_params", "_post")

    def __init__(self, n_features: int = N_COLUMNS, alpha1: Any = 0.5, alpha2: Any = 0.5, lam: Any = 0.6):
        if n_features != N_COLUMNS:
            from ...errors import BadArgument

            raise BadArgument("n_features", f"{N_COLUMNS} (first-stage left/right, then two second-stage states' "
                                            "left/right)", n_features)
        super().__init__(n_features)
        self._params = TwoStepParams(alpha1=sh.unit("alpha1", alpha1), alpha2=sh.unit("alpha2", alpha2),
                                     lam=sh.unit("lam", lam))
        self._post = WPosterior.start(self._params)

    def _copy_params(self, new) -> None:
        new._params = self._params
        new._post = self._post  # immutable: shared safely

    def params(self) -> dict[str, Any]:
        p = self._params
        return {"alpha1": p.alpha1, "alpha2": p.alpha2, "lam": p.lam}

    # -- what rules read -------------------------------------------------------

    @property
    def posterior(self) -> WPosterior:
        return self._post

    def p_model_based(self, x: float) -> float:
        """P(w > x | the animal's first-stage choices so far)."""
        return self._post.p_above(x)

    def _refresh(self) -> None:
        v = self._post.values
        self._w[:2] = v.first_stage("hybrid", self._post.mean)
        self._w[2:] = v.q2.ravel()

    # -- learning ----------------------------------------------------------------

    def _learn(self, X: np.ndarray, r: np.ndarray) -> TrialResult:
        t = X.shape[0]
        values, errors = np.zeros(t), np.zeros(t)
        on = [int(np.argmax(X[i])) if X[i].any() else -1 for i in range(t)]
        if t >= 2 and 0 <= on[0] < 2 and 2 <= on[1] < N_COLUMNS:
            a1, s2, a2 = on[0], (on[1] - 2) // 2, (on[1] - 2) % 2
            reward = float(np.sum(r))
            if not math.isfinite(reward):
                raise sh.nonfinite([("r", r)])
            v = self._post.values
            values[0], values[1] = float(v.q1[a1]), float(v.q2[s2, a2])
            errors[0] = values[1] - values[0]  # δ1 = Q2(s2, a2) − Q1(a1)
            errors[1] = reward - values[1]  # δ2 = r − Q2(s2, a2)
            self._post = self._post.updated(a1, s2, a2, reward)
            self._refresh()
        return TrialResult(values, errors, None)

    def learn_trial(self, X: Any, r: Any) -> TrialResult:
        X = sh.rows("X", X, self._n)
        return self._learn(X, sh.vector("r", r, X.shape[0]))

    def update(self, a1: int, s2: int, a2: int, reward: float) -> None:
        """One trial from plain indices (first action, second state, second action, reward)."""
        self._post = self._post.updated(a1, s2, a2, float(reward))
        self._refresh()

    # -- state ---------------------------------------------------------------------

    def state(self) -> dict[str, Any]:
        p = self._post
        out = {f"v_{k}": (np.array(v, dtype=np.float64) if isinstance(v, list) else v)
               for k, v in p.values.state().items()}
        out.update(log_post=p.log_post.copy(), n_trials=p.n_trials, **self.params())
        return out

    @classmethod
    def from_state(cls, state: dict[str, Any]) -> TwoStepLearner:
        keys = ("log_post", "n_trials", "alpha1", "alpha2", "lam", "v_q1", "v_q2", "v_counts", "v_m", "v_r_state",
                "v_previous_a1")
        cls._check_state(state, keys)
        learner = cls(N_COLUMNS, alpha1=sh.param(state, "alpha1"), alpha2=sh.param(state, "alpha2"),
                      lam=sh.param(state, "lam"))
        values = TwoStepValues.from_state({k[2:]: np.asarray(state[k]).tolist() if k != "v_previous_a1"
                                           else int(sh.param(state, k)) for k in keys if k.startswith("v_")})
        log_post = np.array(state["log_post"], dtype=np.float64)
        if log_post.shape != learner._post.log_post.shape:
            from ...errors import BadArgument

            raise BadArgument("state", f"a two_step posterior of {learner._post.log_post.size} grid points",
                              log_post.shape)
        learner._post = replace(learner._post, log_post=log_post, values=values,
                                n_trials=int(sh.param(state, "n_trials")))
        learner._refresh()
        return learner
