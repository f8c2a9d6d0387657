"""The fast path of many simulated animals: decisions only, where the rule file allows it.

``rigloop compare`` (and the benchmarks) simulate hundreds of animal-days; each trial is
the animal's draw and one ``step``. Much of ``step`` is work a comparison never uses:
the learner and the per-trial quantities stored beside each trial. When

- nothing is stored (no ``--db``: with a store every trial keeps its quantities, so
  the per-subject ``step`` runs), and
- no decision of the rule file reads the learner (``support.learner_free``: no
  ``value()``, ``sd()``, ``p_value_above()``, ``p_model_based()``, no ``uncertain``
  next-cue policy, not the two_step learner),

each trial runs ``decisions.decide_step(..., learn=False)``: the same decisions, the same
schedule and behaviour estimates bit for bit, and no learner (nor learning curves, when no
decision reads them: ``support.reads_curves``). Every shipped
lick and choice example qualifies (tone_reversal, gonogo_shaping, two_choice_staircase);
the two-stage files run the per-subject step. ``tools/bench/compare.py`` times both paths
side by side (about 1.9x fewer CPU seconds per animal-day on the decisions-only path).

Why not the batched learners of ``offline/batch`` in lockstep over the animals: they
agree with the per-subject learner to 1e-12, not bit for bit (summation order), and the
learner feeds no decision of a file this path admits, so the exact and cheaper choice is
not to run it. The animals' own draws stay per animal (each has its own generator, and
its stream must be consumed exactly as ``SimulatedAnimal.trial`` does), and so do the
decisions: the rule engine works on one subject's schedule at a time.

``path_for(rules, db)`` names the path a run takes and why.
"""

from __future__ import annotations

from .decisions import NO_LEARNER, LearnerRead, decide_step
from .support import learner_free, reads_curves

DECISIONS_ONLY = "decisions only"
PER_SUBJECT = "per-subject step"


def path_for(rules, db=None) -> tuple[str, str]:
    """(``DECISIONS_ONLY`` or ``PER_SUBJECT``, why) for a simulation of ``rules`` storing into ``db``."""
    if db is not None:
        return PER_SUBJECT, "every stored trial keeps its quantities, which need the learner"
    free, why = learner_free(rules)
    if not free:
        return PER_SUBJECT, why
    return DECISIONS_ONLY, "no decision reads the learner and nothing is stored"


__all__ = ["DECISIONS_ONLY", "NO_LEARNER", "PER_SUBJECT", "LearnerRead", "decide_step", "learner_free",
           "path_for", "reads_curves"]
