"""The parameters of the two-step learners, under their published names.

Daw et al. 2011 (Neuron 69:1204): alpha1, alpha2 (learning rates of the first and second
stage), lam (the eligibility λ that carries the second-stage prediction error to the
first stage), beta1, beta2 (softmax inverse temperatures per stage), p (perseveration:
the bonus for repeating the previous first-stage action) and w (the weight of the
model-based values at the first stage; 0 = model-free, 1 = model-based).

The successor-representation learner reads alpha1 as the rate of its occupancy (M)
updates, alpha2 as the rate of its state rewards and second-stage values; lam and w do
not enter it.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, replace

from ...errors import BadArgument

NAMES = ("alpha1", "alpha2", "lam", "beta1", "beta2", "p", "w")
# the learners and the parameters each one uses (the others are ignored)
KINDS = {
    "model_free": ("alpha1", "alpha2", "lam", "beta1", "beta2", "p"),
    "model_based": ("alpha2", "beta1", "beta2", "p"),
    "hybrid": NAMES,
    "successor": ("alpha1", "alpha2", "beta1", "beta2", "p"),
}
# the natural bounds of each parameter (betas and p: wide but finite)
BOUNDS = {"alpha1": (0.0, 1.0), "alpha2": (0.0, 1.0), "lam": (0.0, 1.0),
          "beta1": (0.0, 20.0), "beta2": (0.0, 20.0), "p": (-2.0, 2.0), "w": (0.0, 1.0)}


@dataclass(frozen=True, slots=True)
class TwoStepParams:
    """One set of two-step learner parameters; each is checked against ``BOUNDS``."""

    alpha1: float = 0.5
    alpha2: float = 0.5
    lam: float = 0.6
    beta1: float = 5.0
    beta2: float = 5.0
    p: float = 0.1
    w: float = 0.5

    def __post_init__(self):
        for name in NAMES:
            value = getattr(self, name)
            low, high = BOUNDS[name]
            if not (isinstance(value, (int, float)) and math.isfinite(value) and low <= value <= high):
                raise BadArgument(name, f"a number in [{low}, {high}]", value)
            object.__setattr__(self, name, float(value))

    def with_(self, **changes: float) -> TwoStepParams:
        """A copy with some parameters changed (checked again)."""
        unknown = set(changes) - set(NAMES)
        if unknown:
            raise BadArgument("parameter", f"one of {', '.join(NAMES)}", sorted(unknown)[0])
        return replace(self, **changes)

    def as_dict(self) -> dict[str, float]:
        return asdict(self)


def check_kind(kind: str) -> str:
    """``kind`` if it names a two-step learner, else BadArgument listing them."""
    if kind not in KINDS:
        raise BadArgument("learner", f"one of {', '.join(KINDS)}", kind)
    return kind
