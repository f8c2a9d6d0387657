"""The learners vectorised over S subjects that share a feature count n.

One ``Batch*`` object holds S animals' learners as stacked arrays, so replaying or
simulating many subjects costs a few numpy calls per time step for all of them rather
than a few per subject. Each subject may have its own parameters (a number for all, or
an (S,) array). The numbers equal the single-subject learners' step for step up to
floating-point rounding (summation order differs; the tests pin 1e-12):

  BatchKalmanTD        KalmanTD        learn_steps(X, X_next, r, active) / learn_trials
  BatchKalmanFilter    KalmanFilter    learn_steps(X, r, active) / learn_trials
  BatchTD              TD              learn_steps(X, X_next, r, active) / learn_trials
  BatchRescorlaWagner  RescorlaWagner  learn_steps(X, r, active) / learn_trials
  BatchBehaviour       CueEstimate     update(cue_index, y): one forward-filter step per
                                       subject (rigloop.behaviour; S × C estimates)

``learn_trials(Xs, rs, lengths)`` takes padded trials: Xs (S, T, n), rs (S, T), subject
s using its first ``lengths[s]`` rows (the row after them is terminal, all zero); a
subject with length 0 is left unchanged. ``from_learners`` / ``to_learners`` move
between the batch and a list of single learners exactly; ``BatchBehaviour.from_estimates``
/ ``to_estimates`` between it and the subjects' ``behaviour`` maps cue -> (x, var, n).

How the Kalman batch stays cheap (methods.md §2, §4: Σ⁻ = Σ + τ²I, then the correction
Σ ← Σ⁻ − u uᵀ with u = Σ⁻h/√s). Within a block of B time steps the covariance is kept
as Σ₀ + d I − Σⱼ uⱼuⱼᵀ — the block's starting Σ₀, the diffusion d added since, and the
rank-1 corrections so far — which is the same matrix as the step-by-step one. Each
step then needs Σ₀h (all of the block's Σ₀xₜ come from one batched matrix product at
block start) and k inner products with the stored uⱼ, O(nk) instead of O(n²); at the
block's end the corrections are applied in one batched product Σ ← Σ₀ + dI − UᵀU.
Per-step work runs on subject-last (n, S) arrays, so every numpy loop is S long.

The compiled path. When numba imports (``pip install rigloop[fast]``) the Kalman
batches run ``rigloop.batch_kernels`` instead: plain loops, subject by subject, the
single learner's step exactly (one subject's Σ stays in L1 cache for all its steps);
about 5× the numpy path at n = 32 (tools/bench/replay_batch.py). Its first call in a
process compiles or loads it from numba's disk cache. Without numba, or with
RIGLOOP_NO_NUMBA=1 in the environment, the numpy path runs; ``backend()`` says which.
BatchBehaviour takes the same switch: its kernel is the scalar filter's arithmetic, bit
for bit; its numpy path runs the Newton iteration for all subjects still moving at once,
and numpy's ``exp`` may differ from the C library's in the last bit (a few units in the
last place after hundreds of trials).
"""

from .behaviour import BatchBehaviour
from .common import BatchResult, backend
from .gaussian import BatchKalmanFilter, BatchKalmanTD
from .point import BatchRescorlaWagner, BatchTD

__all__ = ["BatchBehaviour", "BatchKalmanFilter", "BatchKalmanTD", "BatchRescorlaWagner", "BatchResult",
           "BatchTD", "backend"]
