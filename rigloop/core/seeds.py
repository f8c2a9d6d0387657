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


# trial_rng's generator, built for less (tools/bench/step.py): numpy's SeedSequence mixes
# the entropy words in C, but its generate_state runs the output hash through numpy
# scalars under an errstate. _trial_generator_single hands the same entropy words to
# SeedSequence as one uint32 array (what it makes of the list itself) and forms the
# four 64-bit state words from its pool with five array operations, the hash of
# SeedSequence.generate_state (O'Neill's seed_seq_fe output stage): word i is
# pool[i mod 4] ^ c_i, times m_i, xor-shifted by 16, in uint32 arithmetic, where
# c_0 = 0x8B51F9DD and m_i = c_i * 0x58F38DED mod 2^32, c_{i+1} = m_i. PCG64 then seeds
# from those words exactly as from the SeedSequence (tests/test_fast_paths.py: the same
# generator state for many seeds and trials). _trial_generator takes the words from a
# block of trials whose SeedSequence hash ran at once (_block_words, below).
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
    """:func:`trial_rng(seed, trial) <trial_rng>` (the same generator state), built for less:
    its state words from the block of trials :func:`_block_words` made at once."""
    if type(seed) is not int or type(trial) is not int or not 0 <= trial < _M32:
        return trial_rng(seed, trial)
    seed &= 0xFFFFFFFFFFFFFFFF
    key = (seed, trial // _BLOCK)
    block = _BLOCKS.get(key)
    if block is None:
        if key in _DROPPED:
            # its block was made and dropped before its trials were done: more subjects are
            # drawing than the blocks kept serve, and a block made again would be dropped again
            return _trial_generator_single(seed, trial)
        block = _block_words(seed, key[1] * _BLOCK)
        if len(_BLOCKS) >= _BLOCKS_MAX:
            oldest = next(iter(_BLOCKS))
            del _BLOCKS[oldest]
            _DROPPED[oldest] = None
            if len(_DROPPED) > _DROPPED_MAX:
                del _DROPPED[next(iter(_DROPPED))]
        _BLOCKS[key] = block
    return np.random.Generator(np.random.PCG64(_StateWords(block[trial % _BLOCK])))


def release(seed: int) -> None:
    """Forget the blocks of ``seed`` (a session that has ended draws no more): without it a
    simulated cohort keeps a block of every session it ran until the bound, memory growing
    with days (tools/bench/compare.py). Harmless when they are asked again: made again."""
    if type(seed) is not int or not _BLOCKS:
        return
    seed &= 0xFFFFFFFFFFFFFFFF
    for key in [key for key in _BLOCKS if key[0] == seed]:
        del _BLOCKS[key]


def _trial_generator_single(seed: int, trial: int) -> np.random.Generator:
    """:func:`_trial_generator` for one trial alone: numpy's SeedSequence on its entropy words,
    then generate_state's hash in arrays (the reference :func:`_block_words` is held to)."""
    entropy = np.array(_uint32_words(seed & 0xFFFFFFFFFFFFFFFF) + _uint32_words(trial), dtype=np.uint32)
    return np.random.Generator(np.random.PCG64(_StateWords(_state_words(np.random.SeedSequence(entropy).pool))))


def _state_words(pool: np.ndarray) -> np.ndarray:
    """generate_state(4, uint64) of SeedSequence pools (..., 4) uint32: (..., 4) uint64."""
    v = np.ascontiguousarray(pool[..., _OUT_FROM])  # (a fancy index of a 2-d pool comes out in column order)
    v ^= _OUT_XOR
    v *= _OUT_MULT  # modulo 2^32, as uint32 arrays multiply
    v ^= v >> _SHIFT
    # word pairs (low, high) as one uint64 each, as generate_state reads them on any byte order
    return v.astype("<u4", copy=False).view("<u8").astype(np.uint64, copy=False)


# Trials whose state words one pass makes. SeedSequence's hash costs ~5 µs a call in
# numpy's wrappers (~10 µs inside a decision), more than the rest of most draws; over an
# array of 128 trial numbers, lanes in step, one pass costs ~60 µs, and each generator
# then ~1 µs (tools/bench/step.py; a quarter to two thirds of a shipped file's trials draw).
# Blocks are kept per (seed, block), the oldest dropped first: 512 of 4 kB serve 512
# subjects drawing at once (a subject's session has one seed, and its draws move through
# its blocks in order). A block dropped before its trials were done is not made again
# (_DROPPED): beyond 512 such subjects each draw costs what a single SeedSequence does.
_BLOCK = 128
_BLOCKS: dict[tuple[int, int], np.ndarray] = {}
_BLOCKS_MAX = 512
_DROPPED: dict[tuple[int, int], None] = {}  # keys of dropped blocks, the newest 4096
_DROPPED_MAX = 4096
# SeedSequence's entropy hash (numpy/random/bit_generator.pyx, mix_entropy; O'Neill's seed_seq_fe)
_INIT_A, _MULT_A = 0x43B0D7E5, 0x931E8875
_MIX_L, _MIX_R = np.uint32(0xCA01F9DD), np.uint32(0x4973F715)
_POOL = 4


def _block_words(seed: int, first: int) -> np.ndarray:
    """The PCG64 state words of trial_rng(seed, t) for t = first .. first + 127, a (128, 4)
    uint64 array: SeedSequence's pool for entropy [seed's 32-bit words, t] (t < 2^32: one
    word), mixed as mix_entropy mixes it, on arrays of trials at once; then
    :func:`_state_words` (tests/test_fast_paths.py: numpy's own SeedSequence and PCG64 state
    for seeds of one and two words, trials 0 to past 2^31)."""
    trials = np.arange(first, first + _BLOCK, dtype=np.uint32)
    entropy = [np.full(_BLOCK, w, dtype=np.uint32) for w in _uint32_words(seed)] + [trials]
    hash_const = _INIT_A

    def hashmix(value: np.ndarray) -> np.ndarray:
        nonlocal hash_const
        value = value ^ np.uint32(hash_const)
        hash_const = (hash_const * _MULT_A) & _M32
        value *= np.uint32(hash_const)
        value ^= value >> _SHIFT
        return value

    mixer = [hashmix(entropy[i] if i < len(entropy) else np.zeros(_BLOCK, dtype=np.uint32)) for i in range(_POOL)]
    for i_src in range(_POOL):
        for i_dst in range(_POOL):
            if i_src != i_dst:
                # mix(x, y) = (L x - R y) xor-shifted by 16, in uint32 arithmetic
                out = _MIX_L * mixer[i_dst] - _MIX_R * hashmix(mixer[i_src])
                out ^= out >> _SHIFT
                mixer[i_dst] = out
    for i_src in range(_POOL, len(entropy)):  # entropy past the pool (none for these seeds)
        for i_dst in range(_POOL):
            out = _MIX_L * mixer[i_dst] - _MIX_R * hashmix(entropy[i_src])
            out ^= out >> _SHIFT
            mixer[i_dst] = out
    return _state_words(np.stack(mixer, axis=1))


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
