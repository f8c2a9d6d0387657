"""``begin_session`` and ``step`` at their public path (they live in :mod:`rigloop.core.step`).

Scripts outside rigloop import them from here; this path stays.
"""

from .core.step import Update, begin_session, session_seed, step, trial_rng

__all__ = ["Update", "begin_session", "session_seed", "step", "trial_rng"]
