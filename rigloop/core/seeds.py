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


# trial_rng's generator, built for less (1.3x faster, tools/bench/step.py): numpy's
# SeedSequence mixes the entropy words in C, but its generate_state runs the output hash
# through numpy scalars under an errstate. _trial_generator hands the same entropy words
# to SeedSequence as one uint32 array (what it makes of the list itself) and forms the
# four 64-bit state words from its pool with five array operations, the hash of
# SeedSequence.generate_state (O'Neill's seed_seq_fe output stage): word i is
# pool[i mod 4] ^ c_i, times m_i, xor-shifted by 16, in uint32 arithmetic, where
# c_0 = 0x8B51F9DD and m_i = c_i * 0x58F38DED mod 2^32, c_{i+1} = m_i. PCG64 then seeds
# from those words exactly as from the SeedSequence (tests/test_fast_paths.py: the same
# generator state for many seeds and trials).
_M32 = 0xFFFFFFFF


def _hash_constants(n: int) -> tuple[np.ndarray, np.ndarray]:
    xor, mult, h = [], [], 0x8B51F9DD
    for _ in range(n):
        xor.append(h)
        h = (h * 0x58F38DED) & _M32
        mult.append(h)
    return np.array(xor, dtype=np.uint32), np.array(mult, dtype=np.uint32)


_OUT_XOR, _OUT_MULT = _hash_constants(8)
_OUT_FROM = np.array([0, 1, 2, 3, 0, 1, 2, 3])  # the pool read cyclically
_SHIFT = np.uint32(16)


def _uint32_words(n: int) -> list[int]:
    """A non-negative int as SeedSequence reads it: 32-bit words, lowest first ([0] for 0)."""
    if n == 0:
        return [0]
    words = []
    while n:
        words.append(n & _M32)
        n >>= 32
    return words


class _StateWords(np.random.bit_generator.ISeedSequence):
    """A seed sequence whose state words are already made: the four uint64 PCG64 asks for
    (its only call, ``generate_state(4, np.uint64)``); for no other bit generator."""

    __slots__ = ("_words",)

    def __init__(self, words: np.ndarray):
        self._words = words

    def generate_state(self, n_words, dtype=np.uint32):
        return self._words


def _trial_generator(seed: int, trial: int) -> np.random.Generator:
    """:func:`trial_rng(seed, trial) <trial_rng>` (the same generator state), built for less."""
    if type(seed) is not int or type(trial) is not int or trial < 0:
        return trial_rng(seed, trial)
    entropy = np.array(_uint32_words(seed & 0xFFFFFFFFFFFFFFFF) + _uint32_words(trial), dtype=np.uint32)
    v = np.random.SeedSequence(entropy).pool[_OUT_FROM]
    v ^= _OUT_XOR
    v *= _OUT_MULT  # modulo 2^32, as uint32 arrays multiply
    v ^= v >> _SHIFT
    # word pairs (low, high) as one uint64 each, as generate_state reads them on any byte order
    words = v.astype("<u4", copy=False).view("<u8").astype(np.uint64, copy=False)
    return np.random.Generator(np.random.PCG64(_StateWords(words)))


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
            self._rng = _trial_generator(self._seed, self._trial)
        return self._rng

    def random(self, *args, **kwargs):
        return self._generator().random(*args, **kwargs)

    def integers(self, *args, **kwargs):
        return self._generator().integers(*args, **kwargs)

    def permutation(self, *args, **kwargs):
        return self._generator().permutation(*args, **kwargs)

    def __getattr__(self, name: str):
        return getattr(self._generator(), name)
