"""Per-trial randomness: a function of (session seed, trial number) alone, never of call
history, so replay draws what live drew."""

from __future__ import annotations

import hashlib

import numpy as np


def session_seed(subject: str, session: str) -> int:
    """A default seed when the rig gives none: stable across machines and runs."""
    digest = hashlib.sha256(f"{subject}\x00{session}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> 1


def trial_rng(seed: int, trial: int) -> np.random.Generator:
    """The generator for decisions about ``trial``: a function of (seed, trial) alone."""
    return np.random.default_rng([seed & 0xFFFFFFFFFFFFFFFF, trial])


class _LazyTrialRng:
    """``trial_rng(seed, trial)``, built on its first use (58x cheaper than building it for a
    decision that draws nothing, tools/bench/step.py; test_fast_paths: the same draws).

    Building the generator (a SeedSequence) costs more than most decisions, and most
    decisions draw nothing; the draws, when made, are those of ``trial_rng``.
    """

    __slots__ = ("_seed", "_trial", "_rng")

    def __init__(self, seed: int, trial: int):
        self._seed, self._trial, self._rng = seed, trial, None

    def _generator(self) -> np.random.Generator:
        if self._rng is None:
            self._rng = trial_rng(self._seed, self._trial)
        return self._rng

    def random(self, *args, **kwargs):
        return self._generator().random(*args, **kwargs)

    def integers(self, *args, **kwargs):
        return self._generator().integers(*args, **kwargs)

    def permutation(self, *args, **kwargs):
        return self._generator().permutation(*args, **kwargs)

    def __getattr__(self, name: str):
        return getattr(self._generator(), name)
