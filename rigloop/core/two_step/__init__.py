"""Tasks with a transition structure: the two-step task and learners that plan or repeat.

Pure (standard library and numpy). One job per module:

    task        the task: common/rare transitions, drifting reward probabilities
    params      the published parameter names (alpha1, alpha2, lam, beta1, beta2, p, w)
    model_free  SARSA(λ) over (state, action)
    model_based learned transitions, one Bellman backup
    successor   the successor representation (SR-TD), its closed form
    choice      net values and softmax with perseveration
    values      the state every learner kind carries, and the first-stage values each uses
    agents      simulated agents with their truth
    posterior   an online grid posterior over w
    stay        stay probabilities and the logistic regression of stay
"""

from .agents import PRESETS, AgentRun, hybrid_agent, simulate_agent
from .params import KINDS, NAMES, TwoStepParams
from .posterior import WPosterior
from .stay import StayCell, StayRegression, stay_regression, stay_table
from .task import TwoStepTask
from .values import TwoStepValues

__all__ = ["PRESETS", "AgentRun", "hybrid_agent", "simulate_agent", "KINDS", "NAMES",
           "TwoStepParams", "WPosterior", "StayCell", "StayRegression", "stay_regression",
           "stay_table", "TwoStepTask", "TwoStepValues"]
