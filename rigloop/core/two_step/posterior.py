"""An online posterior over the hybrid's weight w, updated after every trial.

The posterior lives on a joint grid of (w, β1, p, b): the first-stage inverse
temperature, perseveration and a side bias b are not known either, and fixing them
would let choices that follow no model pass for planning (model-based values differ
less between the two actions than model-free ones, so an animal choosing at random, or
always on one side, is "explained" best by w = 1 at a fixed β1 and no bias). With them
on the grid, such choices put their mass on small β1 or a large bias, where every w is
about equally likely, and the marginal of w stays near its prior. The learning rates
α1, α2 and λ are held at given values. Bayes' rule on the grid:

    z_g(a) = β1_g [w_g Q_MB(a) + (1 − w_g) Q_MF(a) + p_g·rep(a)] + b_g·1(a = 0)
    log π_t(g) = log π_{t−1}(g) + log softmax(z_g)[a1]

The values Q_MB, Q_MF and the second-stage choice depend on none of (w, β1, p) —
learning follows what the animal did and got, not how it weighed values — so one value
state serves the whole grid and the second-stage likelihood cancels. Each trial costs
O(grid). Grid points are point masses: ``p_above(x)`` is the marginal mass of w values
strictly above x. Pure: ``updated`` returns a new posterior.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ...errors import BadArgument
from .choice import repeat_bonus
from .params import TwoStepParams
from .values import TwoStepValues

W_GRID = np.linspace(0.0, 1.0, 21)
BETA1_GRID = np.array([0.0, 1.0, 2.0, 3.0, 5.0, 8.0, 12.0])
P_GRID = np.array([-0.4, -0.2, 0.0, 0.2, 0.4, 0.8])
# a side bias toward action 0, in logit units (outside β1, so it explains a side preference
# even when choices follow no values)
BIAS_GRID = np.array([-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0])


def _grid_axis(name: str, values, low: float, high: float) -> np.ndarray:
    values = np.asarray(values, dtype=np.float64)
    if values.ndim != 1 or len(values) < 1 or np.any(values < low) or np.any(values > high) \
            or len(np.unique(values)) != len(values):
        raise BadArgument(name, f"distinct values in [{low}, {high}]", values)
    return values


@dataclass(frozen=True, slots=True)
class WPosterior:
    """w_axis (W,) the values of w; w, beta1, p, bias (G,) each grid point's parameters;
    log_post (G,) the normalised log posterior; values: the learner state; params: the
    learning rates used (alpha1, alpha2, lam; the rest is on the grid); n_trials seen."""

    w_axis: np.ndarray
    w: np.ndarray
    beta1: np.ndarray
    p: np.ndarray
    bias: np.ndarray
    log_post: np.ndarray
    values: TwoStepValues
    params: TwoStepParams
    n_trials: int = 0

    @classmethod
    def start(cls, params: TwoStepParams | None = None, w_grid=None, beta1_grid=None,
              p_grid=None, bias_grid=None) -> WPosterior:
        """A uniform prior over the grid (defaults: ``W_GRID`` × ``BETA1_GRID`` × ``P_GRID`` ×
        ``BIAS_GRID``). A one-value ``beta1_grid`` / ``p_grid`` / ``bias_grid`` fixes that one.
        """
        params = TwoStepParams() if params is None else params
        w_axis = _grid_axis("w_grid", W_GRID if w_grid is None else w_grid, 0.0, 1.0)
        if len(w_axis) < 2:
            raise BadArgument("w_grid", "at least two values of w", w_axis)
        b_axis = _grid_axis("beta1_grid", BETA1_GRID if beta1_grid is None else beta1_grid, 0.0, 50.0)
        p_axis = _grid_axis("p_grid", P_GRID if p_grid is None else p_grid, -5.0, 5.0)
        s_axis = _grid_axis("bias_grid", BIAS_GRID if bias_grid is None else bias_grid, -10.0, 10.0)
        w, b, p, s = (a.ravel() for a in np.meshgrid(w_axis, b_axis, p_axis, s_axis, indexing="ij"))
        log_post = np.full(len(w), -np.log(len(w)))
        return cls(w_axis=w_axis, w=w, beta1=b, p=p, bias=s, log_post=log_post,
                   values=TwoStepValues(), params=params)

    def updated(self, a1: int, s2: int, a2: int, reward: float) -> WPosterior:
        """The posterior after one trial (first action a1, state s2, second action a2, reward)."""
        if a1 not in (0, 1) or s2 not in (0, 1) or a2 not in (0, 1):
            raise BadArgument("a1, s2, a2", "0 or 1 each", (a1, s2, a2))
        v = self.values
        q_mb, q_mf = v.q_mb, v.q1
        rep = repeat_bonus(v.previous_a1)
        # z_g(0) − z_g(1) = β1_g [w_g ΔQ_MB + (1 − w_g) ΔQ_MF + p_g Δrep] + b_g
        d = self.beta1 * (self.w * (q_mb[0] - q_mb[1]) + (1.0 - self.w) * (q_mf[0] - q_mf[1])
                          + self.p * (rep[0] - rep[1])) + self.bias
        # log P(a1 | g) = −log(1 + exp(∓d)), computed without overflow
        loglik = -np.logaddexp(0.0, d if a1 == 1 else -d)
        post = self.log_post + loglik
        top = post.max()
        post = post - (top + np.log(np.exp(post - top).sum()))
        return WPosterior(w_axis=self.w_axis, w=self.w, beta1=self.beta1, p=self.p, bias=self.bias,
                          log_post=post,
                          values=v.learned(a1, s2, a2, reward, self.params), params=self.params,
                          n_trials=self.n_trials + 1)

    def marginal_w(self) -> np.ndarray:
        """The posterior mass of each value of ``w_axis`` (sums to 1)."""
        mass = np.exp(self.log_post)
        return np.array([mass[self.w == x].sum() for x in self.w_axis])

    def p_above(self, x: float) -> float:
        """P(w > x): the marginal mass of w values strictly above x."""
        return float(np.exp(self.log_post)[self.w > x].sum())

    @property
    def mean(self) -> float:
        return float(np.exp(self.log_post) @ self.w)

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """The central credible interval of w: the grid values where its cdf crosses (1 ∓ level)/2."""
        if not 0.0 < level < 1.0:
            raise BadArgument("level", "a probability in (0, 1)", level)
        cdf = np.cumsum(self.marginal_w())
        tail = (1.0 - level) / 2.0
        last = len(cdf) - 1
        low = self.w_axis[min(int(np.searchsorted(cdf, tail)), last)]
        high = self.w_axis[min(int(np.searchsorted(cdf, 1.0 - tail - 1e-12)), last)]
        return float(low), float(high)
