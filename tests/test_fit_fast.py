"""The fit's compiled value trajectory (fit/fast.py, batch_kernels.kalman_probes /
delta_probes) against the readable per-trial path it replaces.

Agreement is to 1e-12, not bit for bit: the learners' dot products are BLAS sums (which
may fuse a multiply and an add, and sum in an order of their own), while the kernels add
the non-zero terms in index order. On one-hot rows the two agree exactly; on rows with
several features on (presence of two cues, traces) they differ in the last bits.
"""

import functools
import math

import numpy as np
import pytest

from rigloop import fit
from rigloop.core.features import CueList, make_representation
from rigloop.core.learners import make_learner
from rigloop.core.trial import CuePresentation, Outcome, Response, TrialEvent
from rigloop.errors import BadArgument
from rigloop.fit.fast import batch_values, onset_values_fast

pytest.importorskip("numba")

TONES = CueList(["tone_hi", "tone_lo", "light"])
UNIT = 4.0
REPS = {
    "identity": make_representation("identity", TONES),
    "presence": make_representation("presence", TONES, dt=0.5),
    "serial_compound": make_representation("serial_compound", TONES, dt=0.5, n_bins=4),
    "trace": make_representation("trace", TONES, dt=0.5, decay=0.6),
}
LEARNERS = {
    "rescorla_wagner": {"alpha": 0.3},
    "kalman_filter": {"diffusion": 0.02, "noise": 0.5, "prior_var": 1.5},
    "td": {"alpha": 0.2, "gamma": 0.9, "lam": 0.7},
    "kalman_td": {"gamma": 0.93, "diffusion": 0.01, "noise": 0.4, "prior_var": 1.2},
}


def _events(n=150, seed=0):
    """An invented task: one or two cues per trial (a tone, sometimes with the light), a
    reward after the tone on most trials, licks at random; some trials without a cue."""
    rng = np.random.default_rng(seed)
    events = []
    for t in range(1, n + 1):
        cues = ()
        if rng.random() > 0.05:
            tone = "tone_hi" if rng.random() < 0.5 else "tone_lo"
            cues = (CuePresentation(tone, 0.5, 2.0),)
            if rng.random() < 0.4:
                cues += (CuePresentation("light", 1.0, 2.0),)
        rewarded = bool(cues) and rng.random() < (0.8 if cues[0].cue == "tone_hi" else 0.2)
        events.append(TrialEvent("m1", "rig1", "s1", t, cues=cues,
                                 outcome=Outcome(reward_ul=UNIT, reward_time=2.0) if rewarded else Outcome(),
                                 response=Response("licks", float(rng.integers(0, 3)), "correct"),
                                 duration=3.0))
    return events


def _reference(monkeypatch, fn):
    with monkeypatch.context() as mp:
        mp.setenv("RIGLOOP_NO_NUMBA", "1")
        return fn()


@pytest.mark.parametrize("rep_name", sorted(REPS))
@pytest.mark.parametrize("learner_name", sorted(LEARNERS))
def test_onset_values_and_end_state_agree_with_the_per_trial_learner(learner_name, rep_name,
                                                                      monkeypatch):
    rep = REPS[rep_name]
    data = fit.prepare(_events(), rep, reward_unit_ul=UNIT)
    params = LEARNERS[learner_name]
    ref_learner = make_learner(learner_name, rep.n_features, **params)
    want = _reference(monkeypatch, lambda: fit.onset_values(data, ref_learner))
    fast_learner = make_learner(learner_name, rep.n_features, **params)
    got = fit.onset_values(data, fast_learner)
    assert onset_values_fast(data, make_learner(learner_name, rep.n_features, **params)) is not None
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-13)
    # the learner ends after the last trial on both paths
    np.testing.assert_allclose(fast_learner.w, ref_learner.w, rtol=1e-12, atol=1e-13)
    if ref_learner.bayesian:
        np.testing.assert_allclose(fast_learner.cov, ref_learner.cov, rtol=1e-12, atol=1e-13)
        assert np.array_equal(fast_learner.cov, fast_learner.cov.T)  # exactly symmetric


def test_one_hot_rows_agree_bit_for_bit(monkeypatch):
    """With one feature on per row (serial compound, one cue per trial) every sum has at
    most two non-zero terms, so the order cannot matter: the values are identical."""
    events = [e for e in _events(200, seed=3) if len(e.cues) == 1]
    rep = REPS["serial_compound"]
    data = fit.prepare(events, rep, reward_unit_ul=UNIT)
    for name, params in (("td", {"alpha": 0.2, "gamma": 0.9, "lam": 0.0}),
                         ("rescorla_wagner", {"alpha": 0.3})):
        make = functools.partial(make_learner, name, rep.n_features, **params)
        want = _reference(monkeypatch, lambda make=make: fit.onset_values(data, make()))
        np.testing.assert_array_equal(fit.onset_values(data, make()), want)


def test_fitted_trials_sd_agree(monkeypatch):
    rep = REPS["serial_compound"]
    data = fit.prepare(_events(), rep, reward_unit_ul=UNIT)
    params = {**LEARNERS["kalman_td"], "beta": 4.0, "theta": 0.2, "lapse": 0.05}
    want = _reference(monkeypatch, lambda: fit.fitted_trials(data, "kalman_td", params))
    got = fit.fitted_trials(data, "kalman_td", params)
    np.testing.assert_allclose(got.sd, want.sd, rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(got.p_respond, want.p_respond, rtol=1e-12, atol=1e-13)


def test_batch_values_equal_one_set_at_a_time():
    rep = REPS["trace"]
    data = fit.prepare(_events(), rep, reward_unit_ul=UNIT)
    sets = [{"gamma": g, "diffusion": d, "noise": 0.4, "prior_var": 1.0}
            for g in (0.5, 0.9) for d in (0.001, 0.05)]
    V, ok = batch_values(data, "kalman_td", sets)
    assert ok.all() and V.shape == (4, data.n_events, 1)
    for i, p in enumerate(sets):
        one = fit.onset_values(data, make_learner("kalman_td", rep.n_features, **p))
        np.testing.assert_array_equal(V[i, :, 0], one)  # the same kernel: identical


@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")  # the overflow is the point
def test_overflow_is_refused_like_the_learner(monkeypatch):
    """Rewards so large that the values overflow: both paths refuse (BadArgument), and the
    likelihood objective scores such a point as far worse than any fit."""
    events = [TrialEvent("m1", "rig1", "s1", t, cues=(CuePresentation("tone_hi", 0.5, 2.0),),
                         outcome=Outcome(reward_ul=1e300, reward_time=2.0),
                         response=Response("licks", 1.0, "correct"), duration=3.0)
              for t in range(1, 60)]
    data = fit.prepare(events, REPS["identity"], reward_unit_ul=1.0)
    # α = 3: w ← 3r − 2w, which doubles in size each trial and overflows within 30
    mk = lambda: make_learner("rescorla_wagner", 3, alpha=3.0)  # noqa: E731
    with pytest.raises(BadArgument):
        fit.onset_values(data, mk())
    with pytest.raises(BadArgument):
        _reference(monkeypatch, lambda: fit.onset_values(data, mk()))


def test_a_whole_fit_agrees_with_the_reference_path(monkeypatch):
    """The same optimiser on both paths lands on the same optimum (1e-6: the objective
    differs in the last bits, so the numerical gradients may differ a little more)."""
    rep = REPS["identity"]
    data = fit.prepare(_events(200, seed=5), rep, reward_unit_ul=UNIT)
    kw = {"fixed": {"lapse": 0.05}, "starts": 1, "intervals": False}
    got = fit.fit_subject(data, "rescorla_wagner", **kw)
    want = _reference(monkeypatch, lambda: fit.fit_subject(data, "rescorla_wagner", **kw))
    assert got.log_likelihood == pytest.approx(want.log_likelihood, rel=1e-9)
    for name in got.free:
        assert got.params[name] == pytest.approx(want.params[name], rel=1e-6, abs=1e-8)
    assert math.isfinite(got.log_likelihood)


def _kalman_sets(n, P, rng, td=True):
    """P Kalman learners with parameters spread over their ranges, zeros included."""
    return [make_learner("kalman_td", n, gamma=float(rng.choice([0.0, rng.uniform(0, 1)])) if td else 0.0,
                         diffusion=float(rng.choice([0.0, 10 ** rng.uniform(-4, -1)])),
                         noise=float(rng.uniform(0.3, 2.0)), prior_var=float(rng.uniform(0.1, 3.0)))
            for _ in range(P)]


@pytest.mark.parametrize("rep_name", ["serial_compound", "trace", "presence"])
def test_sets_side_by_side_equal_one_at_a_time_bit_for_bit(rep_name):
    """kalman_probes' lanes (LANES sets at once, spare lanes filled) and the one-set loop
    give the same numbers and end states, every bit, for any number of sets; a set that
    overflows fails alone and leaves the others untouched."""
    from rigloop.offline.batch.onsets import kalman_probes

    rep = REPS[rep_name]
    data = fit.prepare(_events(), rep, reward_unit_ul=UNIT)
    rows = fit.fast.trial_rows(data)
    rng = np.random.default_rng(11)
    for P in (2, 3, 4, 5, 9):
        for td in (True, False):
            ls = _kalman_sets(rep.n_features, P, rng, td)
            A0 = np.stack([lr._A for lr in ls])
            g = np.array([lr.gamma for lr in ls])
            d = np.array([lr.diffusion for lr in ls])
            noise = np.array([lr.noise for lr in ls])
            if P >= 3:
                noise[1] = -10.0  # s = hᵀΣ⁻h + σ_r² below 0: this set fails
            one = kalman_probes(rows, A0, g, d, noise, skip_empty=td, lanes=False)
            side = kalman_probes(rows, A0, g, d, noise, skip_empty=td, lanes=True)
            np.testing.assert_array_equal(side[3], one[3])
            ok = one[3] == 0
            assert ok.sum() == P - (P >= 3)
            for a, b in zip(side[:3], one[:3], strict=True):
                np.testing.assert_array_equal(a[ok], b[ok])


@pytest.mark.parametrize("compiled", [True, False])
def test_the_respond_sum_equals_log_lik_respond_bit_for_bit(compiled, monkeypatch):
    """likelihood._RespondSum (one compiled pass, or the ufuncs into one buffer) against
    core.responses.log_lik_respond: the same bits, values small and huge."""
    from rigloop.core.responses import log_lik_respond
    from rigloop.fit.likelihood import _RespondSum

    if not compiled:
        monkeypatch.setenv("RIGLOOP_NO_NUMBA", "1")
    rng = np.random.default_rng(4)
    for scale in (0.01, 0.5, 30.0):
        V = rng.normal(0.3, scale, 3000)
        V[::17] = math.nan
        mask = ~np.isnan(V)
        y = (rng.random(mask.sum()) < 0.6).astype(float)
        total = _RespondSum(y, mask)
        for beta, theta, lapse in ((6.0, 0.35, 0.05), (100.0, -0.2, 0.0), (0.01, 3.0, 1.0),
                                   (40.0, 0.1, 0.3), (1e4, 0.3, 1e-9)):
            want = float(np.sum(log_lik_respond(V[mask], y, beta, theta, lapse)))
            assert total(V, beta, theta, lapse) == want


def test_batched_gradients_give_the_same_fit_bit_for_bit(monkeypatch):
    """search._minimize runs a gradient's points as one learner batch; the optimiser's
    path and so the estimates, standard errors and log-likelihood are the same to the bit
    as with one point at a time (scipy's own gradient, through its ``workers`` map)."""
    from rigloop.fit import search

    rep = REPS["serial_compound"]
    data = fit.prepare(_events(160, seed=2), rep, reward_unit_ul=UNIT)
    kw = {"starts": 2, "intervals": False, "fixed": {"noise": 1.0}}
    got = fit.fit_subject(data, "kalman_td", **kw)
    plain = search._minimize
    monkeypatch.setattr(search, "_minimize", lambda opt, f, x0, objective: plain(opt, f, x0, None))
    errors = search._standard_errors
    monkeypatch.setattr(search, "_standard_errors",
                        lambda nll, s, theta, box, objective=None: errors(nll, s, theta, box))
    want = fit.fit_subject(data, "kalman_td", **kw)
    assert got.params == want.params
    assert got.se == want.se
    assert got.log_likelihood == want.log_likelihood


@pytest.mark.parametrize("rep_name", ["identity", "serial_compound"])
@pytest.mark.parametrize("learner_name", sorted(LEARNERS))
def test_side_values_agree_with_the_per_trial_learner(learner_name, rep_name, monkeypatch):
    """Two-choice fits read each side's value through the kernels (fast.side_values_fast);
    the readable per-trial path (and the one-hot pass) agree to 1e-12."""
    from rigloop.fit import synthetic as sy
    from rigloop.fit.likelihood import side_values

    events = sy.choice_trials({"alpha": 0.2}, beta=5.0, bias=0.5, lapse=0.05, persev=0.0,
                              n=150, seed=3, sessions=2)
    kw = {"dt": 0.5, "n_bins": 4} if rep_name == "serial_compound" else {}
    rep = make_representation(rep_name, CueList(["tone_hi", "tone_lo"]), **kw)
    data = fit.prepare(events, rep, reward_unit_ul=sy.UNIT_UL)
    assert data.link == "choice"
    n = data.representation.n_features
    params = LEARNERS[learner_name]
    want = _reference(monkeypatch, lambda: side_values(data, make_learner(learner_name, n, **params)))
    got = side_values(data, make_learner(learner_name, n, **params))
    for a, b in zip(got, want, strict=True):
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-13)


def test_points_scored_in_one_pass_equal_one_at_a_time_bit_for_bit():
    """NegLogLik.collecting scores every noted go/no-go point in one compiled pass
    (onsets.respond_points; a step in the lapse alone reuses its neighbour's inner
    terms): each value is the one a fresh objective computes for that point alone, every
    bit, lapse at 0 and 1 and a point where no learner can be made included."""
    from rigloop.fit.likelihood import _FAR_WORSE, NegLogLik

    rep = REPS["serial_compound"]
    data = fit.prepare(_events(160, seed=6), rep, reward_unit_ul=UNIT)
    free = ("gamma", "diffusion", "beta", "theta", "lapse")
    pinned = {"noise": 0.5, "prior_var": 1.0}
    base = np.array([0.9, 0.01, 5.0, 0.3, 0.05])
    points = [base]
    for i in range(len(base)):
        y = base.copy()
        y[i] += 1e-8
        points.append(y)
    points += [np.array([0.9, 0.01, 5.0, 0.3, lapse]) for lapse in (0.0, 1.0, 0.2)]
    points.append(np.array([0.9, 0.01, 5.0, 0.3, 0.05]) * [1, 1, 1, 1, 2])
    points.append(np.array([0.9, -1.0, 5.0, 0.3, 0.05]))  # no learner there: far worse
    batched = NegLogLik(data, "kalman_td", free, pinned)
    with batched.collecting():
        for p in points:
            batched(p)
    assert len(batched.values) == len(points)
    for p in points:
        alone = NegLogLik(data, "kalman_td", free, pinned)(p)
        assert batched.values[p.tobytes()] == alone
        assert batched(p) == alone
    assert batched(points[-1]) == _FAR_WORSE


def test_the_compiled_logaddexp_has_numpys_bits_at_every_gap():
    """batch_kernels._logaddexp (numpy's steps; the larger term alone past a gap of 41
    where the correction cannot round in) against np.logaddexp, every bit: gaps around
    the cut, sizes around 0.1, powers of two (where the spacing below halves), zeros,
    infinities and nan."""
    from rigloop.offline import batch_kernels as bk

    rng = np.random.default_rng(8)
    big = np.concatenate([rng.normal(0, 30, 20000), -2.0 ** np.arange(-5, 8), 2.0 ** np.arange(-5, 8),
                          np.nextafter(0.1, [0, 1]), -np.nextafter(0.1, [0, 1]), [0.0, -0.0]])
    gaps = np.concatenate([rng.uniform(-60, 60, big.size // 2), rng.uniform(40.5, 41.5, big.size - big.size // 2)])
    # just past the cut at the smallest sizes it applies to, both signs
    edge = rng.choice([-1.0, 1.0], 20000) * rng.uniform(0.1, 0.13, 20000)
    past = rng.uniform(41.0, 41.2, 20000)
    x = np.concatenate([big, big + gaps, edge, edge - past,
                        [math.inf, -math.inf, math.inf, 1.0, math.nan, -math.inf]])
    y = np.concatenate([big + gaps, big, edge - past, edge, [1.0, 1.0, math.inf, -math.inf, 1.0, -math.inf]])
    got = np.empty_like(x)
    bk.logaddexp_many(x, y, got)
    with np.errstate(invalid="ignore"):  # inf - inf: NaN, which the comparison below leaves aside
        want = np.logaddexp(x, y)
    assert np.array_equal(got.view(np.int64)[~np.isnan(want)], want.view(np.int64)[~np.isnan(want)])
    assert np.array_equal(np.isnan(got), np.isnan(want))
