"""The two-step task: two first-stage actions, two second-stage states of two actions each.

Each first-stage action leads to its *common* second-stage state with probability
``p_common`` (0.7) and to the other, *rare*, state otherwise; action 0 commonly reaches
state 0, action 1 state 1. The four second-stage actions pay a reward with
probabilities that drift as independent Gaussian random walks (sd 0.025 per trial),
reflected at the bounds [0.25, 0.75] so no option stays best for long (Daw, Gershman,
Seymour, Dayan & Dolan 2011, Neuron 69:1204, Experimental Procedures).

Randomness comes only from the numpy ``Generator`` a caller passes in (seeded there).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...errors import BadArgument


def reflect(x: np.ndarray, low: float, high: float) -> np.ndarray:
    """``x`` folded back into [low, high] at the bounds (a reflecting boundary)."""
    width = high - low
    # fold onto [0, 2·width): the second half is the mirror image of the first
    y = np.mod(np.asarray(x, dtype=np.float64) - low, 2.0 * width)
    return low + np.where(y > width, 2.0 * width - y, y)


@dataclass(frozen=True, slots=True)
class TwoStepTask:
    """The task's fixed structure. p_common: P(common state | action); drift_sd: sd of the
    per-trial step of each reward probability; low, high: the reflecting bounds."""

    p_common: float = 0.7
    drift_sd: float = 0.025
    low: float = 0.25
    high: float = 0.75

    def __post_init__(self):
        if not 0.5 < self.p_common < 1.0:
            raise BadArgument("p_common", "a probability in (0.5, 1)", self.p_common)
        if not (self.drift_sd >= 0.0 and np.isfinite(self.drift_sd)):
            raise BadArgument("drift_sd", "a finite number >= 0", self.drift_sd)
        if not 0.0 <= self.low < self.high <= 1.0:
            raise BadArgument("low, high", "probabilities with low < high", (self.low, self.high))

    @property
    def transitions(self) -> np.ndarray:
        """T[a, s] = P(second-stage state s | first-stage action a), (2, 2)."""
        c = self.p_common
        return np.array([[c, 1.0 - c], [1.0 - c, c]])

    def reward_walk(self, n_trials: int, rng: np.random.Generator,
                    start: np.ndarray | None = None) -> np.ndarray:
        """Reward probabilities per trial, (n_trials, 2 states, 2 actions).

        start: the first trial's (2, 2) probabilities (default: uniform draws in the bounds).
        """
        n = int(n_trials)
        if n < 1:
            raise BadArgument("n_trials", "a whole number >= 1", n_trials)
        if start is None:
            start = rng.uniform(self.low, self.high, size=(2, 2))
        start = np.asarray(start, dtype=np.float64)
        if start.shape != (2, 2) or np.any(start < self.low) or np.any(start > self.high):
            raise BadArgument("start", f"a (2, 2) array within [{self.low}, {self.high}]", start)
        out = np.empty((n, 2, 2))
        out[0] = start
        steps = rng.normal(0.0, self.drift_sd, size=(n - 1, 2, 2))
        for t in range(1, n):
            # p_t = reflect(p_{t-1} + N(0, sd²)) within [low, high]
            out[t] = reflect(out[t - 1] + steps[t - 1], self.low, self.high)
        return out

    def transition(self, a1: int, rng: np.random.Generator) -> tuple[int, bool]:
        """The second-stage state reached after action ``a1`` and whether it was the common one."""
        common = bool(rng.random() < self.p_common)
        return (a1 if common else 1 - a1), common


def is_common(a1: np.ndarray, s2: np.ndarray) -> np.ndarray:
    """True where the state reached is the action's common one (action a commonly reaches state a)."""
    return np.asarray(a1) == np.asarray(s2)
