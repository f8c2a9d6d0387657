"""A tour of the four learners on an invented two-tone discrimination with a reversal.

The scenario (invented): a head-fixed mouse hears ``tone_hi`` or ``tone_lo`` for 1 s;
in the acquisition block ``tone_hi`` is followed by a 4 µL drop at tone offset and
``tone_lo`` by nothing; in the reversal block the contingency swaps. The same trial
sequence goes through every learner, and a simulated animal's licks through the
state-space learning curve, so the printout shows side by side what each model
believes and how sure it is.
"""

from __future__ import annotations

import math

import numpy as np

from ..core.curve import LearningCurve
from ..core.features import CueList, make_representation
from ..core.learners import make_learner

CUES = CueList(["tone_hi", "tone_lo"])
BLOCKS = (("acquisition", "tone_hi"), ("reversal", "tone_lo"))
TRIALS_PER_BLOCK = 60
ONSET, OFFSET = 0.5, 1.5

MODELS = (
    ("Rescorla-Wagner", "rescorla_wagner", "identity", {"alpha": 0.15}),
    ("Kalman filter", "kalman_filter", "identity", {"diffusion": 0.01, "noise": 0.3, "prior_var": 1.0}),
    ("TD(lambda), CSC", "td", "serial_compound", {"alpha": 0.2, "gamma": 0.95, "lam": 0.6}),
    ("Kalman TD, CSC", "kalman_td", "serial_compound", {"gamma": 0.95, "diffusion": 0.005, "noise": 0.3, "prior_var": 1.0}),
)


def trial_sequence(seed: int = 7, per_block: int = TRIALS_PER_BLOCK):
    """(block, cue, rewarded) for every trial: balanced, shuffled within 10-trial mini-blocks."""
    rng = np.random.default_rng(seed)
    out = []
    for block, rewarded_cue in BLOCKS:
        for _ in range(per_block // 10):
            cues = ["tone_hi"] * 5 + ["tone_lo"] * 5
            rng.shuffle(cues)
            out.extend((block, c, c == rewarded_cue) for c in cues)
    return out


def _fmt(mean: float, sd: float) -> str:
    return f"{mean:+.2f} ± {sd:.2f}" if sd > 0 else f"{mean:+.2f}       "


def _bar(p: float, width: int = 20) -> str:
    n = int(round(p * width))
    return "█" * n + "·" * (width - n)


def run(out=print, per_block: int = TRIALS_PER_BLOCK) -> dict:
    """Print the tour; return the final values per model (for tests)."""
    seq = trial_sequence(per_block=per_block)
    out("Two-tone discrimination, then reversal: every learner on the same trials")
    out(f"  {len(seq)} trials; tone_hi rewarded in 'acquisition', tone_lo in 'reversal'")
    out("")
    finals = {}
    for title, name, kind, params in MODELS:
        rep = make_representation(kind, CUES, dt=0.25, n_bins=4 if kind == "serial_compound" else None)
        learner = make_learner(name, rep.n_features, **params)
        out(f"{title}  ({name}, {kind} features, {rep.n_features} weights)")
        out(f"  {'after block':<14}{'tone_hi':>16}{'tone_lo':>16}")
        block_now = seq[0][0]
        for i, (block, cue, rewarded) in enumerate(seq):
            rows = rep.rows([(cue, ONSET, OFFSET)], [(OFFSET, 1.0)] if rewarded else [], OFFSET + 1.0)
            learner.learn_trial(rows.X, rows.r)
            last = i + 1 == len(seq) or seq[i + 1][0] != block_now
            if last:
                cells = []
                for c in CUES:
                    mean, var = learner.predict(rep.onset_row(c))
                    cells.append(_fmt(float(mean), math.sqrt(max(float(var), 0.0))))
                out(f"  {block_now:<14}{cells[0]:>16}{cells[1]:>16}")
                if i + 1 < len(seq):
                    block_now = seq[i + 1][0]
        finals[name] = {c: float(learner.predict(rep.onset_row(c))[0]) for c in CUES}
        out("")

    # response probability: a simulated animal licks more to the cue it expects reward from
    out("Response probability per block (state-space learning curve, 95% band)")
    rng = np.random.default_rng(11)
    values = {c: 0.0 for c in CUES}
    curve = None
    block_now = None
    for i, (block, cue, rewarded) in enumerate(seq):
        if block != block_now:
            curve = LearningCurve(chance=0.5, sigma2=0.05)
            block_now = block
            out(f"  block {block!r}")
        go = rewarded
        p_lick = 0.05 + 0.9 / (1 + math.exp(-8 * (values[cue] - 0.4)))
        licked = rng.random() < p_lick
        curve.update(licked == go)
        values[cue] += 0.15 * ((1.0 if rewarded and licked else 0.0) - values[cue])
        if (i + 1) % 10 == 0:
            lo, hi = curve.interval(0.95)
            out(f"    trial {curve.n:>3}  p = {curve.p():.2f} [{lo:.2f}, {hi:.2f}]  {_bar(curve.p())}"
                f"  P(above chance) = {curve.prob_above_chance():.3f}")
    out("")
    return finals
