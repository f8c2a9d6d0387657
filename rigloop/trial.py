"""The trial value types at their public path (they live in :mod:`rigloop.core.trial`).

Scripts outside rigloop import ``TrialEvent``, ``CuePresentation``, ``Outcome``, ``Response``
``TrialStep`` and ``Decision`` from here; this path stays.
"""

from .core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent, TrialStep

__all__ = ["CuePresentation", "Decision", "Outcome", "Response", "TrialEvent", "TrialStep"]
