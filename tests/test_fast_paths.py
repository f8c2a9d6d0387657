"""Every trick on the per-trial path equals its readable reference, bit for bit.

The per-trial path keeps a few tricks that save Python calls (tools/bench/step.py prints
what each buys, side by side with its reference). Each has a plain version beside it;
these tests hold the two to the same bits on many inputs, so speed work can never move
a stored decision (the replay promise).
"""

from __future__ import annotations

import dataclasses
import math
import operator
import random
from types import MappingProxyType

import numpy as np
import pytest

from rigloop.core import curve, features, quantities, seeds
from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.rules import load_example


def _bits(x) -> bytes:
    return np.float64(x).tobytes()


@pytest.mark.parametrize("seed, trial", [(0, 1), (7, 3), (2**63 + 5, 999), (123456789, 2)])
def test_lazy_trial_generator_draws_what_trial_rng_draws(seed, trial):
    """_LazyTrialRng makes trial_rng(seed, trial) on first use: the draws are the same."""
    lazy, plain = seeds._LazyTrialRng(seed, trial), seeds.trial_rng(seed, trial)
    assert lazy.random() == plain.random()
    assert lazy.integers(0, 10, size=5).tolist() == plain.integers(0, 10, size=5).tolist()
    assert lazy.permutation(6).tolist() == plain.permutation(6).tolist()
    assert lazy.normal() == plain.normal()  # any other method, through __getattr__


def test_trial_generator_has_trial_rngs_state():
    """seeds._trial_generator (SeedSequence's hash run over a block of trials at once) and
    _trial_generator_single (numpy's SeedSequence, its output hash in five array operations)
    build the generator trial_rng builds: the same PCG64 state, hence the same draws."""
    rng = np.random.default_rng(11)
    cases = [(0, 0), (0, 1), (2**32 - 1, 2**32 - 1), (2**32, 2**32), (2**64 - 1, 5), (2**64 + 3, 7), (-1, 2),
             (-(2**70), 9), (12345, 2**40 + 1)]
    cases += [(int(rng.integers(0, 2**63)) * int(rng.integers(1, 3)), int(rng.integers(0, 100000)))
              for _ in range(300)]
    cases += [(int(rng.integers(0, 2**32)), int(rng.integers(0, 2**33))) for _ in range(100)]
    # each block's edges, and trials well into a long session
    cases += [(seed, t) for seed in (7, 2**40 + 9) for t in (126, 127, 128, 129, 255, 256, 1023, 2**31, 2**32 - 2)]
    for seed, trial in cases:
        fast, plain = seeds._trial_generator(seed, trial), seeds.trial_rng(seed, trial)
        assert fast.bit_generator.state == plain.bit_generator.state, (seed, trial)
        if 0 <= trial < 2**32:
            single = seeds._trial_generator_single(seed, trial)
            assert single.bit_generator.state == plain.bit_generator.state, (seed, trial)
    fast, plain = seeds._trial_generator(2**63 + 5, 999), seeds.trial_rng(2**63 + 5, 999)
    assert fast.permutation(9).tolist() == plain.permutation(9).tolist() and fast.random() == plain.random()
    # anything but plain ints takes trial_rng itself
    assert seeds._trial_generator(4, np.int64(3)).bit_generator.state == seeds.trial_rng(4, 3).bit_generator.state


def test_trial_generator_blocks_are_bounded_and_not_made_twice(monkeypatch):
    """The blocks of state words are kept for the newest few (seed, block) pairs; a block that
    was dropped is not made again (more subjects draw than are kept: each draw then takes the
    single SeedSequence), and every generator still has trial_rng's state."""
    monkeypatch.setattr(seeds, "_BLOCKS", {})
    monkeypatch.setattr(seeds, "_DROPPED", {})
    monkeypatch.setattr(seeds, "_BLOCKS_MAX", 4)
    made = []
    real = seeds._block_words
    monkeypatch.setattr(seeds, "_block_words", lambda seed, first: made.append((seed, first)) or real(seed, first))
    for trial in (1, 2, 3):
        for seed in range(6):  # six subjects drawing in turn, four blocks kept
            fast, plain = seeds._trial_generator(seed, trial), seeds.trial_rng(seed, trial)
            assert fast.bit_generator.state == plain.bit_generator.state, (seed, trial)
    assert len(seeds._BLOCKS) == 4
    assert sorted(made) == [(seed, 0) for seed in range(6)]  # each made once, none again after it was dropped
    assert set(seeds._DROPPED) == {(0, 0), (1, 0)}



def test_a_new_session_releases_the_blocks_of_the_one_before(monkeypatch):
    """begin_session forgets the last session's generator blocks (memory flat in days for a
    simulated cohort), keeps other subjects', and a released seed asked again draws trial_rng's state."""
    from rigloop.core.step import begin_session
    from rigloop.core.subject import new_subject

    monkeypatch.setattr(seeds, "_BLOCKS", {})
    monkeypatch.setattr(seeds, "_DROPPED", {})
    rules = load_example("tone_reversal")
    state, _ = begin_session(new_subject("m1", rules), rules, session="d1", rig="r", wall_time=0.0, seed=11)
    seeds._trial_generator(11, 5)
    seeds._trial_generator(12, 5)  # another subject's session
    assert set(seeds._BLOCKS) == {(11, 0), (12, 0)}
    begin_session(state, rules, session="d2", rig="r", wall_time=9.0, seed=13)
    assert (11, 0) not in seeds._BLOCKS and (12, 0) in seeds._BLOCKS and not seeds._DROPPED
    assert seeds._trial_generator(11, 5).bit_generator.state == seeds.trial_rng(11, 5).bit_generator.state
    seeds.release(2**64 + 12)  # the same 64-bit seed as 12
    assert (12, 0) not in seeds._BLOCKS
def test_surprise_equals_the_array_form():
    """step._surprise (a loop over floats) gives the array form's bits, zeros and infinities included."""
    rng = np.random.default_rng(9)
    for _ in range(2000):
        n = int(rng.integers(1, 12))
        errors = rng.normal(0, 2, n) * (rng.random(n) < 0.7)
        variances = rng.uniform(-0.1, 3.0, n)
        noise = float(rng.uniform(1e-4, 1.0))
        assert _bits(quantities._surprise(errors, variances, noise)) == \
            _bits(quantities._surprise_reference(errors, variances, noise))
    inf = np.array([np.inf, 1.0])
    got = quantities._surprise(np.array([1.0, 2.0]), inf, 0.1)
    ref = quantities._surprise_reference(np.array([1.0, 2.0]), inf, 0.1)
    assert _bits(got) == _bits(ref)
    assert quantities._surprise(np.zeros(0), np.zeros(0), 0.1) is quantities._surprise_reference(
        np.zeros(0), np.zeros(0), 0.1) is None


def test_curve_from_a_plain_state_equals_the_checked_path():
    """LearningCurve._from_plain (one test for a plain dict) builds what the checked path builds."""
    rng = np.random.default_rng(2)
    for _ in range(500):
        c = curve.LearningCurve(float(rng.uniform(0.05, 0.95)), float(rng.uniform(1e-4, 1)))
        for y in rng.random(int(rng.integers(0, 30))) < 0.6:
            c.update(bool(y))
        fast, checked = curve.LearningCurve.from_state(c.state()), curve.LearningCurve.from_state(
            MappingProxyType(c.state()))
        assert fast.state() == checked.state() and _bits(fast.mu) == _bits(checked.mu)


def _state_bits(d) -> list:
    return [(k, _bits(v) if type(v) is float else v) for k, v in d.items()]


def test_curve_state_updated_without_the_object_equals_the_object_path():
    """curve._updated_state and _p_band (no LearningCurve in between) give the object path's
    bits and key order; anything not plain is handed back (None) for the checked path."""
    rng = np.random.default_rng(4)
    for _ in range(400):
        c = curve.LearningCurve(float(rng.uniform(0.05, 0.95)), float(rng.uniform(1e-4, 2)))
        for y in rng.random(int(rng.integers(0, 40))) < float(rng.uniform(0.05, 0.99)):
            d = c.state()
            for correct in (True, False):
                assert _state_bits(curve._updated_state(d, correct)) == \
                    _state_bits(curve._updated_state_reference(d, correct))
            z = float(rng.uniform(0.5, 3.0))
            ref = curve.LearningCurve.from_state(d)
            assert [_bits(v) for v in curve._p_band(d, z)] == [_bits(v) for v in (ref.p(), *ref._band(z))]
            c.update(bool(y))
    d = curve.LearningCurve(0.5, 0.1).state()
    assert curve._updated_state(MappingProxyType(d), True) is None
    assert curve._updated_state({**d, "n": 1.0}, True) is None
    assert curve._updated_state({**d, "x": math.nan}, True) is None
    assert curve._updated_state(d, 1) is None
    assert curve._p_band({**d, "var": -1.0}, 1.96) is None

def test_evolved_schedule_equals_replace():
    """ScheduleState._evolved (a copied instance dict) equals dataclasses.replace."""
    s = load_example("gonogo_shaping").start_subject()
    changes = {"trials_in_block": 4, "hits": 2, "queue": ("odor_a",), "last_armed": True}
    assert s._evolved(dict(changes)) == dataclasses.replace(s, **changes)
    assert s.evolve(**changes) == dataclasses.replace(s, **changes)


def _event(rng, cues: list[str]) -> TrialEvent:
    shown = sorted(rng.choice(cues, size=int(rng.integers(0, len(cues) + 1)), replace=False).tolist())
    presented = []
    for c in shown:
        on = float(rng.uniform(0, 1.5))
        presented.append(CuePresentation(c, on, on + float(rng.uniform(0.0, 2.5))))
    ul = float(rng.choice([0.0, 4.0]))
    t = float(rng.uniform(0, 4)) if ul else None
    return TrialEvent("m1", "r1", "s1", 1, tuple(presented), Outcome(ul, t), Response("licks", 1.0, "correct"),
                      duration=5.0)


@pytest.mark.parametrize("kind", ["identity", "presence", "serial_compound", "trace"])
def test_kept_trial_rows_equal_the_checked_rows(kind):
    """Representation._event_rows (step's rows, kept per binned layout) equal Representation.rows."""
    rng = np.random.default_rng(hash(kind) % 2**32)
    cues = ["a", "b", "c"]
    extra = {"serial_compound": {"n_bins": 6}, "trace": {"decay": 0.8}}.get(kind, {})
    rep = features.make_representation(kind, features.CueList(cues), dt=0.25, **extra)
    for _ in range(300):
        ev = _event(rng, cues)
        kept = rep._event_rows(ev, 4.0)
        plain = rep.rows([(c.cue, c.onset, c.offset) for c in ev.cues], [(t, a / 4.0) for t, a in ev.outcome_events()],
                         ev.duration)
        assert kept.X.tobytes() == plain.X.tobytes() and kept.r.tobytes() == plain.r.tobytes()
        assert dict(kept.onset_steps) == dict(plain.onset_steps)


def test_behaviour_quantities_equal_the_reference():
    """step._behaviour_quantities (logistic inline, names kept per file) gives the reference's bits."""
    rng = np.random.default_rng(4)
    for name in ("tone_reversal", "two_choice_staircase"):
        spec = load_example(name).spec
        for _ in range(500):
            est = {c: (float(rng.normal(0, 5)), float(rng.uniform(1e-4, 4)), int(rng.integers(50)))
                   for c in spec.cues if rng.random() < 0.8}
            fast, ref = {}, {}
            quantities._behaviour_quantities(fast, spec, est)
            quantities._behaviour_quantities_reference(ref, spec, est)
            assert fast.keys() == ref.keys()
            assert all(_bits(fast[k]) == _bits(ref[k]) for k in fast), est
    assert math.isfinite(fast[next(iter(fast))])


def test_p_difference_above_kept_nodes_equal_the_plain_loop():
    # the nodes kept for cue a (p_difference_above) against the plain loop, bit for bit: fresh
    # states, then the same cue a with a new cue b (the kept path), margins 0 to near 1
    import random

    from rigloop.core import behaviour as B

    rng = random.Random(11)
    for _ in range(3000):
        ma, va = rng.uniform(-7.0, 7.0), rng.uniform(1e-3, 6.0)
        margin = rng.choice([0.0, 1e-9, 0.05, 0.2, 0.5, 0.95])
        for _ in range(3):
            mb, vb = rng.uniform(-7.0, 7.0), rng.uniform(1e-3, 6.0)
            got = B.p_difference_above(ma, va, mb, vb, margin)
            want = B._p_difference_above_reference(ma, va, mb, vb, margin)
            assert got.hex() == want.hex(), (ma, va, mb, vb, margin)


def test_dprime_estimate_with_kept_cue_nodes_equals_computed_afresh():
    # dprime_estimate reads each cue's probit nodes from the kept ones when that cue has not
    # moved; computed afresh (the kept table emptied first) the result has the same bits
    import random

    from rigloop.core import behaviour as B

    rng = random.Random(12)
    for _ in range(400):
        ma, va = rng.uniform(-5.0, 5.0), rng.uniform(0.01, 4.0)
        for _ in range(3):
            mb, vb = rng.uniform(-5.0, 5.0), rng.uniform(0.01, 4.0)
            for args in ((ma, va, mb, vb), (mb, vb, ma, va)):
                kept = B.dprime_estimate(*args)
                B._G_NODES.clear()
                fresh = B.dprime_estimate(*args)
                assert [x.hex() for x in kept] == [x.hex() for x in fresh], args


def test_kept_cue_nodes_stay_bounded_and_serve_interleaved_subjects(monkeypatch):
    """The two tables of kept cue nodes drop their oldest entry when full, so a subject's
    unmoved cue is still kept after other subjects' decisions came between (a daemon
    interleaves them); results keep their bits whatever was dropped."""
    import random

    from rigloop.core import behaviour as B

    monkeypatch.setattr(B, "_A_NODES_MAX", 6)
    monkeypatch.setattr(B, "_G_NODES_MAX", 6)
    B._A_NODES.clear()
    B._G_NODES.clear()
    rng = random.Random(4)
    subjects = [(rng.uniform(-2, 2), rng.uniform(0.1, 1.0), rng.uniform(-2, 2), rng.uniform(0.1, 1.0))
                for _ in range(5)]
    first = [(B.p_difference_above(*s, 0.1), B.dprime_part(*s, 0.95, "lower")) for s in subjects]
    assert len(B._A_NODES) == 5 and len(B._G_NODES) == 6  # 10 cue states: the 4 oldest dropped
    assert next(iter(B._G_NODES)) == subjects[2][:2]
    ma, va = subjects[0][:2]
    assert (ma, va, 0.1) in B._A_NODES  # five subjects' cue a, all kept
    again = [(B.p_difference_above(*s, 0.1), B.dprime_part(*s, 0.95, "lower")) for s in subjects]
    assert [(p.hex(), d.hex()) for p, d in again] == [(p.hex(), d.hex()) for p, d in first]
    B._A_NODES.clear()
    B._G_NODES.clear()


def test_behaviour_clip_equals_np_clip():
    """behaviour._clip (minimum of maximum) gives np.clip's array, bit for bit: NaN, infinities,
    signed zeros and values on and past either bound included."""
    from rigloop.core import behaviour

    rng = np.random.default_rng(5)
    special = np.array([np.nan, np.inf, -np.inf, 0.0, -0.0, 1e-300, 1e-301, 1.0 - 1e-16, 1.0, 2.0, -1.0])
    for lo, hi in [(1e-300, 1.0 - 1e-16), (1e-15, 1.0 - 1e-15)]:
        for _ in range(200):
            a = np.concatenate([rng.uniform(-0.5, 1.5, 24), rng.choice(special, 6)])
            assert behaviour._clip(a, lo, hi).tobytes() == np.clip(a, lo, hi).tobytes()


def _slots(obj) -> dict:
    names = [n for cls in type(obj).__mro__ for n in getattr(cls, "__slots__", ())]
    return {n: object.__getattribute__(obj, n) for n in names if hasattr(obj, n)}


def test_kalman_td_copy_sets_every_slot_as_the_general_path():
    """KalmanTD.copy (one pass) gives what Learner.copy (through _allocate) gives: every slot
    the same value, arrays with the same bits and shapes, views into the copy's own buffer,
    nothing shared that can be written; and both continue to the same bits."""
    from rigloop.core.learners import KalmanTD
    from rigloop.core.learners._shared import Learner

    rng = np.random.default_rng(8)
    for n in (1, 3, 8, 17):
        learner = KalmanTD(n, gamma=0.9, diffusion=0.01, noise=0.3, prior_var=2.0)
        X = (rng.random((6, n)) < 0.4).astype(float)
        learner.learn_trial(X, rng.normal(size=6))
        fast, general = learner.copy(), Learner.copy(learner)
        a, b = _slots(fast), _slots(general)
        assert a.keys() == b.keys()
        for name, value in a.items():
            if isinstance(value, np.ndarray):
                assert value.shape == b[name].shape and value.dtype == b[name].dtype, name
                if name not in ("_q", "_u", "_tmp", "_q_col", "_u_row"):  # scratch: any contents
                    assert value.tobytes() == b[name].tobytes(), name
                if value.flags.writeable:
                    assert not np.shares_memory(value, learner._A) and not np.shares_memory(value, learner._q), name
            else:
                assert value == b[name] or value is b[name], name
        assert np.shares_memory(fast._w, fast._A) and np.shares_memory(fast._diag, fast._A)
        assert np.shares_memory(fast._u_row, fast._q) and np.shares_memory(fast._q_col, fast._q)
        X2, r2 = (rng.random((5, n)) < 0.5).astype(float), rng.normal(size=5)
        got, ref = fast.learn_trial(X2, r2), general.learn_trial(X2, r2)
        assert fast._A.tobytes() == general._A.tobytes()
        assert got.errors.tobytes() == ref.errors.tobytes() and got.variances.tobytes() == ref.variances.tobytes()
    resting = KalmanTD(4)
    resting._rest()
    assert resting.copy()._A.tobytes() == Learner.copy(resting)._A.tobytes()  # (the general path)


def _kalman_cases(rng):
    """Kalman TD learners and rows of the kinds steps meet: one-hot serial-compound rows,
    sparse and dense rows, no diffusion, γ = 0 and 1, and states far from the prior."""
    for k in range(120):
        n = int(rng.integers(1, 20))
        params = dict(gamma=float(rng.choice([0.0, 0.9, 0.95, 1.0])), diffusion=float(rng.choice([0.0, 5e-4, 0.05])),
                      noise=float(rng.choice([0.2, 1.0, 3.0])), prior_var=float(rng.choice([0.0, 1.0, 10.0])))
        kind = k % 3
        T = int(rng.integers(1, 9))
        if kind == 0:  # serial compound: one feature at 1 per represented row, empty rows around it
            X = np.zeros((T, n))
            for t in range(T):
                if rng.random() < 0.7:
                    X[t, int(rng.integers(0, n))] = 1.0
        elif kind == 1:
            X = (rng.random((T, n)) < 0.3) * rng.normal(size=(T, n))
        else:
            X = rng.normal(size=(T, n))
        yield n, params, X, rng.normal(size=T) * (rng.random(T) < 0.5)


def test_kalman_td_trial_equals_its_reference():
    """KalmanTD._trial (each correction written out in the loop) gives _trial_reference's
    bits (one _observe per row): errors, values, variances and the state after, on the
    finite path and on the full one."""
    from rigloop.core.learners import KalmanTD
    from rigloop.core.learners.kalman_td import _TrialRows

    rng = np.random.default_rng(21)
    for n, params, X, r in _kalman_cases(rng):
        start = KalmanTD(n, **params)
        start.learn_trial(rng.normal(size=(3, n)), rng.normal(size=3))
        rows = _TrialRows(np.ascontiguousarray(X), start.gamma)
        for finite in (True, False):
            a, b = start.copy(), start.copy()
            got, ref = a._trial(rows, r, finite), b._trial_reference(rows, r, finite)
            for name in ("values", "errors", "variances"):
                assert getattr(got, name).tobytes() == getattr(ref, name).tobytes(), name
            assert a._A.tobytes() == b._A.tobytes()


def test_kalman_td_update_equals_its_reference():
    """KalmanTD.update (_observe written out, the scale through a 0-d array) gives
    _update_reference's bits, step after step, and refuses what it refuses; its scratch
    is dropped at rest and made again."""
    from rigloop.core.learners import KalmanTD

    rng = np.random.default_rng(22)
    for n, params, X, r in _kalman_cases(rng):
        a, b = KalmanTD(n, **params), KalmanTD(n, **params)
        for t in range(len(X)):
            x_next = X[t + 1] if t + 1 < len(X) else np.zeros(n)
            assert _bits(a.update(X[t], x_next, float(r[t]))) == _bits(b._update_reference(X[t], x_next, float(r[t])))
            assert a._A.tobytes() == b._A.tobytes()
        a._rest()
        b._rest()
        assert _bits(a.update(X[0], X[0], 0.5)) == _bits(b._update_reference(X[0], X[0], 0.5))
        assert a._A.tobytes() == b._A.tobytes()
    learner, x = KalmanTD(3), np.ones(3)
    with np.errstate(all="ignore"):
        with pytest.raises(Exception) as fast:
            learner.update(x * np.inf, x, 1.0)
        with pytest.raises(Exception) as ref:
            KalmanTD(3)._update_reference(x * np.inf, x, 1.0)
        assert type(fast.value) is type(ref.value) and str(fast.value) == str(ref.value)
        huge = KalmanTD(2, prior_var=1e308)
        with pytest.raises(Exception) as fast:
            for _ in range(3):
                huge.update(np.array([1e200, 1e200]), np.zeros(2), 1.0)
    assert "positive semi-definite" in str(fast.value) or "finite" in str(fast.value)


_OPS = {"<": operator.lt, "<=": operator.le, ">": operator.gt, ">=": operator.ge}


def _two_cue_states(rng: random.Random) -> tuple[float, float, float, float]:
    """Two cues' logit states (mean, var) from very sure (var 1e-4) to very unsure (var 8)."""
    def var():
        return rng.choice([rng.uniform(1e-4, 0.01), rng.uniform(0.01, 1.0), rng.uniform(1.0, 8.0)])

    return rng.uniform(-6.0, 6.0), var(), rng.uniform(-6.0, 6.0), var()


def test_dprime_part_compared_answers_as_the_searched_value_does():
    """behaviour.dprime_part_compared (one evaluation of D's distribution function when that
    settles the comparison, else the search) answers ``dprime_part(...) <op> c`` for states
    from very sure to very unsure, thresholds on the searched quantile, within the search's
    tolerance of it, either side of the 0.001 margin, and far away."""
    from rigloop.core import behaviour as B

    rng = random.Random(8)
    settled = 0
    for _ in range(250):
        ma, va, mb, vb = _two_cue_states(rng)
        level = rng.choice([0.8, 0.95, 0.99])
        for which in ("lower", "upper"):
            q = B.dprime_part(ma, va, mb, vb, level, which)
            for off in (0.0, 1e-6, -1e-6, 1e-5, -1e-5, 9e-4, -9e-4, 1.1e-3, -1.1e-3, 0.5, -0.5, rng.uniform(-3, 3)):
                for op, compare in _OPS.items():
                    assert B.dprime_part_compared(ma, va, mb, vb, level, which, op, q + off) == compare(q, q + off), \
                        (ma, va, mb, vb, level, which, op, off)
                settled += abs(off) > 1e-3
    assert settled > 1000
    for c in (math.inf, -math.inf, math.nan):  # no margin around these: the value is compared
        assert B.dprime_part_compared(0.5, 0.2, -0.5, 0.3, 0.95, "lower", "<", c) == (
            B.dprime_part(0.5, 0.2, -0.5, 0.3, 0.95, "lower") < c)
    with pytest.raises(Exception, match="which"):
        B.dprime_part_compared(0.5, 0.2, -0.5, 0.3, 0.95, "d", ">=", 1.0)
    with pytest.raises(Exception, match="which"):
        B.dprime_part_compared(0.5, 0.2, -0.5, 0.3, 0.95, "lower", "==", 1.0)


def test_a_d_prime_comparison_far_from_its_threshold_is_settled_by_the_bounds(monkeypatch):
    """An animal far from its criterion (a sure d' of about 2 against 0.5 and 1.0; no
    discrimination against 0.5) is answered by F's closed-form bounds, without F's quadrature;
    the answers are the searched bound's."""
    from rigloop.core import behaviour as B

    states = [(2.5, 0.05, -2.0, 0.05), (0.0, 0.01, 0.0, 0.01)]
    expected = {s: {(w, op, c): (B.dprime_part(*s, 0.95, w) < c if op == "<" else B.dprime_part(*s, 0.95, w) >= c)
                    for w in ("lower", "upper") for op in ("<", ">=") for c in (0.5, 1.0)} for s in states}

    def no_quadrature(*args, **kwargs):
        raise AssertionError("F's quadrature was formed")

    monkeypatch.setattr(B, "_difference_cdf", no_quadrature)
    for s in states:
        for (w, op, c), answer in expected[s].items():
            assert B.dprime_part_compared(*s, 0.95, w, op, c) == answer, (s, w, op, c)


def test_p_difference_compared_answers_as_the_value_does(monkeypatch):
    """behaviour.p_difference_compared (closed-form floor and ceiling first, the quadrature
    where they do not settle it) answers ``p_difference_above(...) <op> c`` for states from
    very sure to very unsure, margins 0 to 0.6, thresholds on the value, near it, either side
    of the 0.01 slack, and far away; a comparison far from the value is settled without the
    quadrature."""
    from rigloop.core import behaviour as B

    rng = random.Random(9)
    settled = 0
    for _ in range(300):
        ma, va, mb, vb = _two_cue_states(rng)
        margin = rng.choice([0.0, 0.1, 0.3, 0.6, rng.uniform(0.0, 0.9)])
        v = B.p_difference_above(ma, va, mb, vb, margin)
        floor, ceiling = B._difference_bounds(ma, va, mb, vb, margin)
        assert floor <= v + 1e-5 and v <= ceiling + 1e-5 and ceiling - floor <= 1.0 / 8 + 1e-12
        for off in (0.0, 1e-6, -1e-6, 9e-3, -9e-3, 1.1e-2, -1.1e-2, 0.5, -0.5, rng.uniform(-1, 1)):
            for op, compare in _OPS.items():
                assert B.p_difference_compared(ma, va, mb, vb, margin, op, v + off) == compare(v, v + off), \
                    (ma, va, mb, vb, margin, op, off)
            settled += margin > 0 and (ceiling < v + off - 0.01 or floor > v + off + 0.01)
    assert settled > 500
    with pytest.raises(Exception, match="op"):
        B.p_difference_compared(0.5, 0.2, -0.5, 0.3, 0.3, "==", 0.9)

    def no_quadrature(*args, **kwargs):
        raise AssertionError("the quadrature ran")

    # (a floor within 1/8 of the ceiling settles "above" for thresholds up to about 7/8)
    far = {(s, c): B.p_difference_above(*s, 0.3) >= c
           for s in ((0.0, 0.05, 0.0, 0.05), (3.0, 0.02, -3.0, 0.02)) for c in (0.5, 0.8)}
    monkeypatch.setattr(B, "p_difference_above", no_quadrature)
    for (s, c), answer in far.items():
        assert B.p_difference_compared(*s, 0.3, ">=", c) == answer, (s, c)


def test_dprime_part_equals_that_entry_of_the_triple():
    """behaviour.dprime_part (one quantile search, or none for d') gives the bits of that
    entry of dprime_estimate; the engine's dprime_lower/upper/of read it through the view."""
    from rigloop.core import behaviour
    from rigloop.rules.engine import _behaviour_call
    from rigloop.rules.view import StaticView

    rng = np.random.default_rng(31)
    for _ in range(40):
        ma, mb = rng.normal(0.0, 2.0, 2).tolist()
        va, vb = rng.uniform(0.01, 3.0, 2).tolist()
        level = float(rng.choice([0.8, 0.95]))
        triple = behaviour.dprime_estimate(ma, va, mb, vb, level)
        for k, which in enumerate(("d", "lower", "upper")):
            assert _bits(behaviour.dprime_part(ma, va, mb, vb, level, which)) == _bits(triple[k]), which
    view = StaticView(behaviour={"a": (1.0, 0.3), "b": (-0.5, 0.6)})
    triple = view.dprime_between("a", "b", 0.9)
    for k, func in enumerate(("dprime_of", "dprime_lower", "dprime_upper")):
        assert _bits(_behaviour_call(view, func, "a", ["a", "b", 0.9], None)) == _bits(triple[k])
    with pytest.raises(Exception, match="which"):
        behaviour.dprime_part(0.0, 1.0, 0.0, 1.0, 0.95, "both")


def test_step_builds_its_decision_in_the_field_order():
    """core.step._decide passes Decision's fields by position: the order it writes them in is
    Decision's own (a reordered field would otherwise land in another's place)."""
    import dataclasses

    from rigloop.core.trial import Decision

    assert [f.name for f in dataclasses.fields(Decision)] == [
        "subject", "session", "trial", "cue", "reward_prob", "reward_ul", "reward_armed", "block", "stage",
        "end_session", "difficulty", "valve_ms", "reasons", "overrides", "warnings"]


def test_identifiers_passed_once_are_known_and_the_table_is_bounded(monkeypatch):
    """trial._ident keeps the identifiers it passed (they repeat on every trial) in a bounded
    set; what it refuses is never kept, and is refused every time."""
    from rigloop.core import trial
    from rigloop.errors import BadEvent

    monkeypatch.setattr(trial, "_GOOD_IDS", set())
    monkeypatch.setattr(trial, "_GOOD_IDS_MAX", 3)
    for bad in (" m1", "", "a\nb", "x" * 65):
        for _ in range(2):
            with pytest.raises(BadEvent):
                trial._ident("subject", bad)
    assert trial._GOOD_IDS == set()
    for good in ("m1", "m2", "m3", "m1", "m4"):
        assert trial._ident("subject", good) == good
    assert trial._GOOD_IDS == {"m4"}  # cleared when full, then the newest kept
    with pytest.raises(BadEvent):
        trial._ident("subject", ["m1"])


def _quick_classes():
    from rigloop.core import subject, trial
    from rigloop.rules import engine

    return [trial.CuePresentation, trial.Outcome, trial.Response, trial.TrialStep, trial.TrialEvent,
            trial.Decision, subject.SessionContext, subject.SubjectState, engine.Plan]


def _built(init, cls, args, kwargs):
    """(the object, or the error's type and text) of ``init`` on a new ``cls`` object."""
    new = object.__new__(cls)
    try:
        init(new, *args, **kwargs)
    except Exception as err:  # noqa: BLE001  (the two inits must fail alike)
        return type(err), str(err)
    return new


def test_quick_init_builds_what_the_dataclass_init_builds():
    """quick_init's __init__ (each slot set through its descriptor) and the dataclass's own
    give equal objects, field by field and type by type, on the values step and the
    simulated animal pass, on defaults and keywords, on values __post_init__ converts, and
    fail with the same error on values it refuses."""
    from rigloop.core.quick_init import quick_init
    from rigloop.core.trial import CuePresentation, Decision, Outcome, Response, TrialEvent

    cases = {
        Decision: [
            (("m1", "d001", 5, "tone", 0.8, 4.0, True, "A", "acq", False, None, None, ("a", "b"), (), ()), {}),
            (("m1", "d001", 1, None, 0.0, 0.0, False, "A", "acq"), {}),
            (("m1", "d001", 2, "tone", 1, 3, 1, "A", "acq"), {"reasons": ["x"], "difficulty": 2, "end_session": 0}),
            (("m1", "d001", 0, "tone", 0.5, 1.0, True, "A", "acq"), {}),  # trial 0: refused
            (("m1", "d001", 3, "tone", 1.5, 1.0, True, "A", "acq"), {}),  # p > 1: refused
            (("m 1", "d001", 3, "tone", 0.5, 1.0, True, "A", "acq"), {}),  # a bad identifier
            (("m1",), {}),  # too few arguments
            (("m1", "d001", 3, "tone", 0.5, 1.0, True, "A", "acq"), {"colour": 1}),  # not a field
        ],
        CuePresentation: [(("tone", 0.0, 1.0), {}), (("tone", 1, 2), {}), (("tone", 2.0, 1.0), {}), (("tone",), {})],
        Outcome: [((), {}), ((), {"reward_ul": 4, "reward_time": 1.0}), ((), {"reward_ul": -1.0})],
        Response: [((), {}), (("licks", 3.0, "correct", 0.4), {}), (("licks", 3.0, "maybe", 0.4), {})],
        TrialEvent: [
            (("m1", "rig1", "d001", 1), {}),
            (("m1", "rig1", "d001", 2, (CuePresentation("tone", 0.0, 1.0),), Outcome(4.0, 1.0),
              Response("licks", 2.0, "correct", 0.5), 2.0, 1.8e9, {"x": 1.0}), {}),
            (("m1", "rig1", "d001", 3), {"extra": {"bad key": object()}}),
        ],
    }
    rules = load_example("tone_reversal")
    from rigloop.core.step import begin_session
    from rigloop.core.subject import new_subject

    state, _ = begin_session(new_subject("m1", rules), rules, session="d1", rig="r", wall_time=0.0, seed=3)
    for cls in _quick_classes():
        assert cls.__init__ is not cls._dataclass_init, cls
        examples = cases.get(cls, [])
        if cls.__name__ in ("SubjectState", "SessionContext", "Plan", "TrialStep"):
            # fields from a real object, by position and by keyword, and with defaults left out
            obj = {"SubjectState": state, "SessionContext": state.context}.get(cls.__name__) or _sample(cls)
            values = [getattr(obj, f.name) for f in dataclasses.fields(cls)]
            required = [f for f in dataclasses.fields(cls)
                        if f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING]
            examples = [(tuple(values), {}), ((), {f.name: v for f, v in zip(dataclasses.fields(cls), values)}),
                        (tuple(values[:len(required)]), {})]
        assert examples, cls
        for args, kwargs in examples:
            quick = _built(cls.__init__, cls, args, kwargs)
            plain = _built(cls._dataclass_init, cls, args, kwargs)
            if isinstance(plain, tuple):
                assert quick == plain, (cls, args, kwargs)
                continue
            assert quick == plain, (cls, args, kwargs)
            for f in dataclasses.fields(cls):
                assert type(getattr(quick, f.name)) is type(getattr(plain, f.name)), (cls, f.name)
    first, second = TrialEvent("m1", "rig1", "d001", 1), TrialEvent("m1", "rig1", "d001", 2)
    assert first.extra == {} and first.extra is not second.extra  # a default factory: a new value per object
    with pytest.raises(TypeError):
        quick_init(dataclasses.dataclass(type("Loose", (), {"__annotations__": {"x": int}})))  # not frozen


def _sample(cls):
    """A valid object of the small internal value types, for their field values."""
    from rigloop.core.trial import TrialStep
    from rigloop.rules.engine import Plan

    return {"Plan": Plan("tone", 0.5, 4.0, True, "A", "acq", False, None, ("why",), (), ()),
            "TrialStep": TrialStep("port_left", "poke", 1.5, 4.0)}[cls.__name__]


def test_fmt_gives_the_reference_text():
    """rules.expr.show.fmt (a finite float's short path) writes what _fmt_reference writes:
    integers, boundaries of its branches, signs, non-finite values, bools, ints and numpy floats."""
    from rigloop.rules.expr.show import _fmt_reference, fmt

    rng = np.random.default_rng(5)
    values = [0.0, -0.0, 1.0, -3.0, 0.001, -0.001, 0.0009999, 1e12, -1e12, 1e12 - 1, 999999999999.5, 1e300,
              5e-324, math.inf, -math.inf, math.nan, True, False, 7, -2, np.float64(0.25), np.float32(0.1),
              0.0005, 0.12345, 2.5, 1234.5678]
    values += rng.normal(0, 10, 500).tolist() + (10.0 ** rng.uniform(-8, 14, 500)).tolist()
    values += rng.integers(-1000, 1000, 100).astype(float).tolist()
    for v in values:
        assert fmt(v) == _fmt_reference(v), v
