"""Batched learners equal the single-subject learners step for step (oracle tests), on the
numpy path and on the compiled (numba) path."""

import contextlib

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rigloop.core.learners import TD, KalmanFilter, KalmanTD, RescorlaWagner
from rigloop.errors import BadArgument
from rigloop.offline import batch as batch_module
from rigloop.offline.batch import BatchKalmanFilter, BatchKalmanTD, BatchRescorlaWagner, BatchTD

TOL = 1e-12

try:
    import numba  # noqa: F401  (only to learn whether the compiled path can run)
    NO_NUMBA = None
except ImportError:
    NO_NUMBA = "numba is not installed (pip install rigloop[fast]): only the numpy path runs"


@pytest.fixture(params=["numpy", "numba"])
def path(request, monkeypatch):
    """Run the test on the numpy path (RIGLOOP_NO_NUMBA=1) and on the compiled kernel."""
    if request.param == "numba":
        if NO_NUMBA:
            pytest.skip(NO_NUMBA)
        monkeypatch.delenv("RIGLOOP_NO_NUMBA", raising=False)
    else:
        monkeypatch.setenv("RIGLOOP_NO_NUMBA", "1")
    assert batch_module.backend() == request.param
    return request.param


PATHS = [pytest.param("numpy"),
         pytest.param("numba", marks=pytest.mark.skipif(bool(NO_NUMBA), reason=str(NO_NUMBA)))]


@contextlib.contextmanager
def on_path(name):
    """The Kalman batches take the ``name`` path inside this block (for hypothesis tests,
    which cannot use the function-scoped ``path`` fixture)."""
    with pytest.MonkeyPatch.context() as mp:
        if name == "numpy":
            mp.setenv("RIGLOOP_NO_NUMBA", "1")
        else:
            mp.delenv("RIGLOOP_NO_NUMBA", raising=False)
        assert batch_module.backend() == name
        yield


def random_trials(rng, S, T, n, p_on=0.3, lead_zero=True):
    """Padded trials: (S, T, n) 0/1 rows with featureless lead-in rows and stray zero rows,
    rewards (S, T), lengths (S,) from 0 to T; the padding holds junk that must be ignored."""
    Xs = (rng.random((S, T, n)) < p_on).astype(float)
    if lead_zero:
        Xs[:, : int(rng.integers(0, 3))] = 0.0
    Xs[rng.random((S, T)) < 0.15] = 0.0
    rs = np.where(rng.random((S, T)) < 0.3, rng.normal(1.0, 0.5, (S, T)), 0.0)
    lengths = rng.integers(0, T + 1, S)
    pad = np.arange(T)[None, :] >= lengths[:, None]
    Xs[pad] = 7.0  # junk past each length
    rs[pad] = -3.0
    return Xs, rs, lengths


def kalman_params(rng, S):
    return dict(gamma=rng.uniform(0, 1, S), diffusion=rng.uniform(0, 0.1, S),
                noise=rng.uniform(0.1, 2, S), prior_var=rng.uniform(0.2, 3, S))


def assert_trial_matches(single_result, batch_result, s, length):
    """Per-step values, errors and variances of subject s equal the single learner's."""
    for name in ("values", "errors", "variances"):
        ref = getattr(single_result, name)
        got = getattr(batch_result, name)
        if ref is None:
            assert got is None
            continue
        np.testing.assert_allclose(got[s, :length], ref, rtol=0, atol=TOL, err_msg=name)
        assert np.all(np.isnan(got[s, length:])), f"{name} past the length must be nan"


def assert_state_matches(singles, batch):
    for s, learner in enumerate(singles):
        np.testing.assert_allclose(batch.w[s], learner.w, rtol=0, atol=TOL)
        if hasattr(learner, "cov"):
            np.testing.assert_allclose(batch.cov[s], learner.cov, rtol=0, atol=TOL)


# --------------------------------------------------------------------------- Kalman TD


@pytest.mark.parametrize("block,chunk", [(12, 128), (3, 2), (1, 1), (50, 5)])
def test_kalman_td_trials_equal_single_learners(block, chunk, path):
    """learn_trials over varying lengths, featureless rows and per-subject parameters equals
    KalmanTD.learn_trial per subject (values, errors, variances, w, cov) to 1e-12, for any
    block and chunk size."""
    rng = np.random.default_rng(block * 100 + chunk)
    S, n, T = 7, 5, 14
    params = kalman_params(rng, S)
    singles = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    batch = BatchKalmanTD(S, n, **params, block=block, chunk=chunk)
    for _ in range(6):
        Xs, rs, lengths = random_trials(rng, S, T, n)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            L = lengths[s]
            assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
        assert_state_matches(singles, batch)


def test_kalman_td_steps_equal_update_and_learn_trial(path):
    """learn_steps(skip_empty=False) is KalmanTD.update per active subject; with the default
    skip_empty=True a featureless row reports its error r + γV(x') and learns nothing; an
    inactive subject is unchanged and reports nan."""
    rng = np.random.default_rng(3)
    S, n = 6, 4
    params = kalman_params(rng, S)
    plain = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    skipping = [KalmanTD.from_state(lr.state()) for lr in plain]
    b_plain = BatchKalmanTD(S, n, **params)
    b_skip = BatchKalmanTD(S, n, **params)
    for _ in range(25):
        X = (rng.random((S, n)) < 0.4).astype(float)
        X[rng.random(S) < 0.3] = 0.0
        X_next = (rng.random((S, n)) < 0.4).astype(float)
        r = rng.normal(size=S)
        active = rng.random(S) < 0.8
        got = b_plain.learn_steps(X, X_next, r, active, skip_empty=False)
        got_skip = b_skip.learn_steps(X, X_next, r, active)
        for s in range(S):
            if not active[s]:
                assert np.isnan(got.errors[s]) and np.isnan(got_skip.values[s])
                continue
            assert got.errors[s] == pytest.approx(plain[s].update(X[s], X_next[s], r[s]), abs=TOL)
            # a featureless x: the error is reported, nothing is learned (learn_trial's rule)
            if X[s].any():
                delta = skipping[s].update(X[s], X_next[s], r[s])
            else:
                delta = r[s] + skipping[s].gamma * float(X_next[s] @ skipping[s].w)
            assert got_skip.errors[s] == pytest.approx(delta, abs=TOL)
        assert_state_matches(plain, b_plain)
        assert_state_matches(skipping, b_skip)


def test_kalman_td_zero_diffusion_is_bayesian_regression(path):
    """τ² = 0: every subject's batch posterior is Σ = (I/c + HᵀH/σ²)⁻¹, μ = Σ Hᵀr/σ² over the
    steps it learned from (h = x − γx', featureless rows skipped), to 1e-10."""
    # Geist & Pietquin (2010) JAIR 39:483 [S abstract]; batch oracle [C, methods.md §4]
    rng = np.random.default_rng(11)
    S, n, T, gamma, c, noise = 4, 5, 8, 0.9, 1.5, 0.4
    batch = BatchKalmanTD(S, n, gamma=gamma, diffusion=0.0, noise=noise, prior_var=c, block=5)
    H, R = [[] for _ in range(S)], [[] for _ in range(S)]
    for _ in range(5):
        Xs, rs, lengths = random_trials(rng, S, T, n)
        batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            X = Xs[s, : lengths[s]]
            X_next = np.vstack([X[1:], np.zeros((1, n))])
            keep = X.any(axis=1)
            H[s].append((X - gamma * X_next)[keep])
            R[s].append(rs[s, : lengths[s]][keep])
    for s in range(S):
        Hs, Rs = np.vstack(H[s]), np.concatenate(R[s])
        cov = np.linalg.inv(np.eye(n) / c + Hs.T @ Hs / noise)
        np.testing.assert_allclose(batch.cov[s], cov, rtol=0, atol=1e-10)
        np.testing.assert_allclose(batch.w[s], cov @ Hs.T @ Rs / noise, rtol=0, atol=1e-10)


def test_kalman_td_real_valued_dense_rows(path):
    """Dense real-valued rows (not cue indicators) give the same numbers as the single learner."""
    rng = np.random.default_rng(5)
    S, n, T = 5, 6, 9
    params = kalman_params(rng, S)
    singles = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    batch = BatchKalmanTD(S, n, **params, block=4, chunk=3)
    for _ in range(4):
        Xs = rng.uniform(-1, 1, (S, T, n))
        rs = rng.normal(size=(S, T))
        lengths = np.full(S, T)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            assert_trial_matches(singles[s].learn_trial(Xs[s], rs[s]), got, s, T)
    assert_state_matches(singles, batch)


# --------------------------------------------------------------------------- Kalman filter


@pytest.mark.parametrize("block", [12, 2])
def test_kalman_filter_equals_single_learners(block, path):
    """BatchKalmanFilter.learn_trials and learn_steps equal KalmanFilter.learn_trial and
    update per subject (an all-zero row is observed too: it diffuses)."""
    rng = np.random.default_rng(20 + block)
    S, n, T = 6, 4, 5
    params = kalman_params(rng, S)
    del params["gamma"]
    singles = [KalmanFilter(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    batch = BatchKalmanFilter(S, n, **params, block=block, chunk=4)
    for _ in range(5):
        Xs, rs, lengths = random_trials(rng, S, T, n, lead_zero=False)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            L = lengths[s]
            assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
        X = (rng.random((S, n)) < 0.5).astype(float)
        r = rng.normal(size=S)
        active = rng.random(S) < 0.7
        step = batch.learn_steps(X, r, active)
        for s in np.flatnonzero(active):
            assert step.errors[s] == pytest.approx(singles[s].update(X[s], r[s]), abs=TOL)
        assert np.all(np.isnan(step.errors[~active]))
        assert_state_matches(singles, batch)


# --------------------------------------------------------------------------- point learners


def test_rescorla_wagner_equals_single_learners():
    """BatchRescorlaWagner equals RescorlaWagner per subject, with scalar, per-subject and
    per-feature rates."""
    rng = np.random.default_rng(30)
    S, n, T = 5, 3, 4
    alphas = [0.1, 0.3, rng.uniform(0, 0.2, n), 0.05, rng.uniform(0, 0.2, n)]
    singles = [RescorlaWagner(n, alpha=a) for a in alphas]
    batch = BatchRescorlaWagner.from_learners(singles)
    for _ in range(6):
        Xs, rs, lengths = random_trials(rng, S, T, n, lead_zero=False)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            L = lengths[s]
            assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
        X = (rng.random((S, n)) < 0.5).astype(float)
        r = rng.normal(size=S)
        step = batch.learn_steps(X, r, np.arange(S) % 2 == 0)
        for s in range(0, S, 2):
            assert step.errors[s] == pytest.approx(singles[s].update(X[s], r[s]), abs=TOL)
        assert_state_matches(singles, batch)


def test_td_equals_single_learners():
    """BatchTD equals TD(λ) per subject: the trace resets at each trial, carries on through
    learn_steps, and λ, γ, α may differ per subject."""
    rng = np.random.default_rng(31)
    S, n, T = 5, 4, 7
    singles = [TD(n, alpha=rng.uniform(0, 0.2), gamma=rng.uniform(0, 1), lam=lam)
               for lam in (0.0, 0.5, 1.0, 0.9, 0.0)]
    singles[1] = TD(n, alpha=rng.uniform(0, 0.2, n), gamma=0.8, lam=0.7)
    batch = BatchTD.from_learners(singles)
    for _ in range(5):
        Xs, rs, lengths = random_trials(rng, S, T, n)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            L = lengths[s]
            if L:
                assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
        X, X_next = rng.random((S, n)), rng.random((S, n))
        r = rng.normal(size=S)
        step = batch.learn_steps(X, X_next, r)
        for s in range(S):
            assert step.errors[s] == pytest.approx(singles[s].update(X[s], X_next[s], r[s]), abs=TOL)
        assert_state_matches(singles, batch)
        for s in range(S):
            np.testing.assert_allclose(batch.z[s], singles[s].z, rtol=0, atol=TOL)


# --------------------------------------------------------------------------- round trips


def trained(cls, n, rng, **params):
    learner = cls(n, **params)
    X = (rng.random((6, n)) < 0.5).astype(float)
    learner.learn_trial(X, rng.normal(size=6))
    return learner


@pytest.mark.parametrize("batch_cls,cls,params", [
    (BatchKalmanTD, KalmanTD, {"gamma": 0.9, "diffusion": 0.02, "noise": 0.3, "prior_var": 2.0}),
    (BatchKalmanFilter, KalmanFilter, {"diffusion": 0.0, "noise": 1.5, "prior_var": 0.5}),
    (BatchTD, TD, {"alpha": [0.1, 0.2, 0.0], "gamma": 0.7, "lam": 0.4}),
    (BatchTD, TD, {"alpha": 0.3, "gamma": 0.95, "lam": 0.0}),
    (BatchRescorlaWagner, RescorlaWagner, {"alpha": [0.1, 0.2, 0.05]}),
    (BatchRescorlaWagner, RescorlaWagner, {"alpha": 0.25}),
])
def test_from_learners_to_learners_round_trip_is_exact(batch_cls, cls, params, path):
    """to_learners(from_learners(ls)) gives learners whose state() equals the originals' bit
    for bit (arrays and parameters, scalar rates stay scalar)."""
    rng = np.random.default_rng(40)
    originals = [trained(cls, 3, rng, **params) for _ in range(4)]
    back = batch_cls.from_learners(originals).to_learners()
    for a, b in zip(originals, back, strict=True):
        sa, sb = a.state(), b.state()
        assert sa.keys() == sb.keys()
        for key in sa:
            assert type(sa[key]) is type(sb[key]), key
            np.testing.assert_array_equal(sa[key], sb[key], err_msg=key)
        assert a.params() == b.params()


def test_from_learners_rejects_mixed_lists():
    """A batch holds one learner type with one feature count; the error names the culprit."""
    with pytest.raises(BadArgument, match=r"^'learners\[1\]' must be a KalmanTD \(got 'TD'\)$"):
        BatchKalmanTD.from_learners([KalmanTD(2), TD(2)])
    with pytest.raises(BadArgument, match=r"^'learners' must be learners with the same n_features"):
        BatchKalmanTD.from_learners([KalmanTD(2), KalmanTD(3)])


# --------------------------------------------------------------------------- arguments


def test_bad_arguments_name_the_argument(path):
    """Wrong shapes, lengths out of range and bad per-subject parameters raise BadArgument
    naming the argument, what was expected and what came; nothing changes."""
    batch = BatchKalmanTD(3, 2)
    before = batch.w.copy()
    with pytest.raises(BadArgument, match=r"^'Xs' must be a float array of shape \(3, T, 2\) "
                                          r"\(got shape \(3, 4, 5\)\)$"):
        batch.learn_trials(np.zeros((3, 4, 5)), np.zeros((3, 4)), [4, 4, 4])
    with pytest.raises(BadArgument, match=r"^'lengths' must be whole numbers in \[0, 4\]"):
        batch.learn_trials(np.zeros((3, 4, 2)), np.zeros((3, 4)), np.array([4, 5, 1]))
    with pytest.raises(BadArgument, match=r"^'rs' must be a float array of shape \(3, 4\) with "
                                          r"finite entries \(got nan at index \(0, 1\)\)$"):
        batch.learn_trials(np.zeros((3, 4, 2)), np.array([[0, np.nan, 0, 0]] * 3), np.array([4] * 3))
    with pytest.raises(BadArgument, match=r"^'active' must be a bool array of shape \(3,\) or None"):
        batch.learn_steps(np.zeros((3, 2)), np.zeros((3, 2)), np.zeros(3), active=[1, 0, 1])
    with pytest.raises(BadArgument, match=r"^'noise\[1\]' must be a finite number > 0 \(got 0\.0\)$"):
        BatchKalmanTD(3, 2, noise=[1.0, 0.0, 1.0])
    with pytest.raises(BadArgument, match=r"^'gamma' must be a number or a sequence of 3 numbers"):
        BatchKalmanTD(3, 2, gamma=[0.9, 0.9])
    with pytest.raises(BadArgument, match=r"^'parallel' must be True or False \(got 'yes'\)$"):
        BatchKalmanTD(3, 2, parallel="yes")
    np.testing.assert_array_equal(batch.w, before)


# --------------------------------------------------------------------------- properties


@st.composite
def batch_cases(draw):
    S = draw(st.integers(1, 4))
    n = draw(st.integers(1, 5))
    T = draw(st.integers(1, 10))
    seed = draw(st.integers(0, 2**32 - 1))
    block = draw(st.integers(1, 6))
    chunk = draw(st.integers(1, 4))
    dense = draw(st.booleans())
    return S, n, T, seed, block, chunk, dense


@pytest.mark.parametrize("name", PATHS)
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=batch_cases())
def test_kalman_td_batch_property(name, case):
    """For any sizes, blocks, chunks, parameters and rows (0/1 or real), the batch equals the
    single learners to 1e-12 and every covariance stays exactly symmetric and PSD, on
    both paths."""
    with on_path(name):
        check_kalman_td_case(*case)


def check_kalman_td_case(S, n, T, seed, block, chunk, dense):
    rng = np.random.default_rng(seed)
    params = kalman_params(rng, S)
    singles = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    batch = BatchKalmanTD(S, n, **params, block=block, chunk=chunk)
    for _ in range(3):
        if dense:
            Xs, rs, lengths = rng.uniform(-1, 1, (S, T, n)), rng.normal(size=(S, T)), rng.integers(0, T + 1, S)
        else:
            Xs, rs, lengths = random_trials(rng, S, T, n)
        got = batch.learn_trials(Xs, rs, lengths)
        for s in range(S):
            L = lengths[s]
            assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
    assert_state_matches(singles, batch)
    cov = batch.cov
    np.testing.assert_array_equal(cov, cov.transpose(0, 2, 1))
    # PSD up to rounding: the smallest eigenvalue is not below −1e-12 × the largest
    eig = np.linalg.eigvalsh(cov)
    assert np.all(eig[:, 0] >= -1e-12 * np.maximum(eig[:, -1], 1.0))


# --------------------------------------------------------------------------- the compiled path


@pytest.mark.skipif(bool(NO_NUMBA), reason=str(NO_NUMBA))
def test_parallel_and_serial_kernels_give_the_same_numbers(monkeypatch):
    """parallel=True on a call large enough for the threaded kernel gives bit for bit the
    numbers of the serial kernel (each subject's arithmetic is the same) and those of the
    single learners to 1e-12."""
    import numba

    from rigloop.offline import batch_kernels

    monkeypatch.delenv("RIGLOOP_NO_NUMBA", raising=False)
    calls = []
    threaded_kernel = batch_kernels._steps_parallel
    monkeypatch.setattr(batch_kernels, "_steps_parallel",
                        lambda *a: calls.append(1) or threaded_kernel(*a))
    rng = np.random.default_rng(60)
    S, n, T = 300, 4, 10
    assert S * T >= batch_kernels.PARALLEL_MIN_STEPS
    params = kalman_params(rng, S)
    singles = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    threaded = BatchKalmanTD(S, n, **params, parallel=True)
    serial = BatchKalmanTD(S, n, **params)
    for _ in range(2):
        Xs, rs, lengths = random_trials(rng, S, T, n)
        got = threaded.learn_trials(Xs, rs, lengths)
        ref = serial.learn_trials(Xs, rs, lengths)
        for name in ("values", "errors", "variances"):
            np.testing.assert_array_equal(getattr(got, name), getattr(ref, name))
        for s in range(S):
            L = lengths[s]
            assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
    np.testing.assert_array_equal(threaded.w, serial.w)
    np.testing.assert_array_equal(threaded.cov, serial.cov)
    assert_state_matches(singles, threaded)
    assert len(calls) == (2 if numba.get_num_threads() > 1 else 0)


def test_without_numba_the_numpy_path_runs(monkeypatch):
    """If numba cannot be imported, backend() is 'numpy' and the batch still equals the
    single learners."""
    monkeypatch.delenv("RIGLOOP_NO_NUMBA", raising=False)
    monkeypatch.setattr(batch_module.common, "_KERNELS", [None])  # as after a failed import
    assert batch_module.backend() == "numpy"
    rng = np.random.default_rng(61)
    S, n, T = 3, 4, 6
    params = kalman_params(rng, S)
    singles = [KalmanTD(n, **{k: v[s] for k, v in params.items()}) for s in range(S)]
    batch = BatchKalmanTD(S, n, **params)
    Xs, rs, lengths = random_trials(rng, S, T, n)
    got = batch.learn_trials(Xs, rs, lengths)
    for s in range(S):
        L = lengths[s]
        assert_trial_matches(singles[s].learn_trial(Xs[s, :L], rs[s, :L]), got, s, L)
    assert_state_matches(singles, batch)


def test_no_numba_variable_switches_the_path(monkeypatch):
    """RIGLOOP_NO_NUMBA=1 forces the numpy path; unset (or '0') allows the kernel."""
    monkeypatch.setenv("RIGLOOP_NO_NUMBA", "1")
    assert batch_module.backend() == "numpy"
    monkeypatch.setenv("RIGLOOP_NO_NUMBA", "0")
    assert batch_module.backend() == ("numpy" if NO_NUMBA else "numba")


# --------------------------------------------------------------------------- behaviour estimates


def behaviour_stream(rng, S, T, C, p_missing=0.1):
    """Random trials: cue indices (T, S), responses (T, S) 1.0 / 0.0, nan (not observed)
    where a trial is missing; each subject responds to each cue with its own probability."""
    p = rng.uniform(0.05, 0.95, (S, C))
    cues = rng.integers(0, C, (T, S))
    y = (rng.random((T, S)) < p[np.arange(S), cues]).astype(float)
    y[rng.random((T, S)) < p_missing] = np.nan
    return cues, y


def behaviour_params(rng, S):
    return dict(sigma2=rng.uniform(0.005, 0.5, S), prior_var=rng.uniform(0.3, 4.0, S))


def estimate_arrays(maps, cues):
    """(3, S, C) x, var, n of per-subject maps cue -> (x, var, n) (nan where absent)."""
    out = np.full((3, len(maps), len(cues)), np.nan)
    for s, est in enumerate(maps):
        for j, cue in enumerate(cues):
            if cue in est:
                out[:, s, j] = est[cue]
    return out


def assert_same_estimates(maps, batch, path):
    """batch.to_estimates() holds the same cues as ``maps``, the same counts, and x, var
    bit for bit on the compiled path (the scalar filter's operations with the C library's
    exp), to 1e-12 on the numpy path (numpy's exp may differ in the last bit); returns
    max |Δ|."""
    got = batch.to_estimates()
    assert [sorted(m) for m in got] == [sorted(m) for m in maps]
    for a, b in zip(maps, got, strict=True):
        for cue in a:
            assert a[cue][2] == b[cue][2], "observed-trial counts"
    ref, arr = estimate_arrays(maps, batch.cues), estimate_arrays(got, batch.cues)
    diff = float(np.nanmax(np.abs(ref - arr))) if np.isfinite(ref).any() else 0.0
    if path == "numba":
        np.testing.assert_array_equal(arr, ref)
    assert diff <= TOL, f"batch estimates differ from CueEstimate.updated by {diff:.3g}"
    return diff


def test_behaviour_equals_cue_estimate_updates(path, capsys):
    """200 subjects × 300 trials of random cues (3) and responses, each subject with its own
    sigma2 and prior_var, about 10% unobserved: BatchBehaviour.update equals a loop of
    CueEstimate.updated per subject (the scalar forward filter) after every 50 trials
    and at the end: bit for bit on the compiled path, to 1e-12 on the numpy path."""
    from rigloop.core.behaviour import CueEstimate
    from rigloop.offline.batch import BatchBehaviour

    rng = np.random.default_rng(70)
    S, T, cues = 200, 300, ("tone_hi", "tone_lo", "light")
    params = behaviour_params(rng, S)
    batch = BatchBehaviour(S, cues, **params)
    single = [{} for _ in range(S)]
    sigma2, prior = params["sigma2"].tolist(), params["prior_var"].tolist()
    cue_idx, y = behaviour_stream(rng, S, T, len(cues))
    worst = 0.0
    for t in range(T):
        batch.update(cue_idx[t], y[t])
        for s in range(S):
            if not np.isnan(y[t, s]):
                cue = cues[cue_idx[t, s]]
                est = single[s].get(cue) or CueEstimate.prior(prior[s])
                single[s][cue] = est.updated(y[t, s] == 1.0, sigma2[s])
        if t % 50 == 49:
            maps = [{c: e.as_tuple() for c, e in d.items()} for d in single]
            worst = max(worst, assert_same_estimates(maps, batch, path))
    with capsys.disabled():
        print(f"\n[{path}] BatchBehaviour vs CueEstimate.updated, {S} × {T}: max |Δ| = {worst:.3g}")
    assert batch.n.sum() == int(np.isfinite(y).sum())


def test_behaviour_step_solves_the_mode_equation(path):
    """One batch step per subject is the forward filter of Smith, Frank, Wirth et al. 2004
    (J Neurosci 24:447; methods.md §5; mu = 0): the mode x solves
    x = x_prev + v (y - logistic(x)), v = var_prev + sigma2 (root by scipy.optimize.brentq),
    and the variance is 1 / (1/v + p (1 - p)) at it; to 1e-12."""
    from scipy import optimize, special

    from rigloop.offline.batch import BatchBehaviour

    rng = np.random.default_rng(71)
    S = 40
    x0, v0 = rng.normal(0.0, 3.0, S), rng.uniform(0.01, 6.0, S)
    sigma2 = rng.uniform(0.001, 2.0, S)
    y = (rng.random(S) < 0.5).astype(float)
    batch = BatchBehaviour.from_estimates([{"a": (float(x0[s]), float(v0[s]), 3)} for s in range(S)],
                                          ("a",), sigma2=sigma2)
    batch.update(np.zeros(S, dtype=int), y)
    for s in range(S):
        v = v0[s] + sigma2[s]
        def mode_equation(z, a=x0[s], v=v, ys=y[s]):
            return z - a - v * (ys - special.expit(z))

        # 0 < logistic < 1, so the root lies within x_prev -/+ v
        x = optimize.brentq(mode_equation, x0[s] - v - 1.0, x0[s] + v + 1.0, xtol=1e-15,
                            rtol=4 * np.finfo(float).eps, maxiter=500)
        p = special.expit(x)
        assert batch.x[s, 0] == pytest.approx(x, abs=1e-12)
        assert batch.var[s, 0] == pytest.approx(1.0 / (1.0 / v + p * (1.0 - p)), abs=1e-12)
        assert batch.n[s, 0] == 4


def test_behaviour_unobserved_subjects_are_unchanged(path):
    """A nan response leaves the subject's every estimate, count and map as they were (its
    cue index is not even read); an all-nan call changes nothing."""
    from rigloop.offline.batch import BatchBehaviour

    rng = np.random.default_rng(72)
    S, cues = 30, ("a", "b")
    batch = BatchBehaviour(S, cues, **behaviour_params(rng, S))
    cue_idx, y = behaviour_stream(rng, S, 20, 2, p_missing=0.0)
    for t in range(20):
        batch.update(cue_idx[t], y[t])
    before = [batch.x.copy(), batch.var.copy(), batch.n.copy()]
    maps = batch.to_estimates()
    batch.update(np.full(S, 99), np.full(S, np.nan))
    for a, b in zip(before, (batch.x, batch.var, batch.n), strict=True):
        np.testing.assert_array_equal(a, b)
    missing = rng.random(S) < 0.5
    yy = np.where(missing, np.nan, 1.0)
    idx = np.where(missing, -5, 1)
    batch.update(idx, yy)
    after = batch.to_estimates()
    for s in np.flatnonzero(missing):
        assert after[s] == maps[s]
    for s in np.flatnonzero(~missing):
        assert after[s]["b"][2] == maps[s].get("b", (0, 0, 0))[2] + 1 and after[s].get("a") == maps[s].get("a")


def test_behaviour_round_trips_are_exact(path):
    """from_estimates(to_estimates()) and to_estimates(from_estimates(maps)) give back the
    same maps bit for bit (floats stay floats, counts ints); cues never seen stay out of
    a subject's map and hold the prior (0, prior_var, 0)."""
    from rigloop.offline.batch import BatchBehaviour

    rng = np.random.default_rng(73)
    S, cues = 25, ("a", "b", "c")
    params = behaviour_params(rng, S)
    batch = BatchBehaviour(S, cues, **params)
    assert batch.to_estimates() == [{}] * S
    cue_idx, y = behaviour_stream(rng, S, 8, 3, p_missing=0.3)
    for t in range(8):
        batch.update(cue_idx[t], y[t])
    maps = batch.to_estimates()
    assert any(len(m) < 3 for m in maps)  # some cue some subject never saw
    back = BatchBehaviour.from_estimates(maps, cues, **params)
    assert back.to_estimates() == maps
    for m in back.to_estimates():
        for x, var, n in m.values():
            assert type(x) is float and type(var) is float and type(n) is int
    for name in ("x", "var", "n"):
        np.testing.assert_array_equal(getattr(back, name), getattr(batch, name))
    unseen = batch.n == 0
    np.testing.assert_array_equal(batch.x[unseen], 0.0)
    np.testing.assert_array_equal(batch.var[unseen], np.broadcast_to(params["prior_var"][:, None], (S, 3))[unseen])
    # maps as a SubjectState stores them, with an n = 0 entry and cues in any order
    hand = [{"c": (0.25, 1.5, 0), "a": (-1.0, 0.3, 12)}, {}, {"b": (2.0, 0.125, 40)}]
    assert BatchBehaviour.from_estimates(hand, cues).to_estimates() == hand


def test_behaviour_predictive_p_and_band_equal_the_scalar_ones(path):
    """predictive() is CueEstimate.predictive, p() logistic(x) and band(level)
    behaviour.band of the predictive state, entry by entry (bit for bit: the same exp on
    the compiled path's state; numpy's exp may differ in the last bit, so 1e-15 there)."""
    from rigloop.core import behaviour as B
    from rigloop.offline.batch import BatchBehaviour

    rng = np.random.default_rng(74)
    S, cues = 20, ("a", "b")
    params = behaviour_params(rng, S)
    batch = BatchBehaviour(S, cues, **params)
    cue_idx, y = behaviour_stream(rng, S, 15, 2)
    for t in range(15):
        batch.update(cue_idx[t], y[t])
    mean, var = batch.predictive()
    p = batch.p()
    lo, hi = batch.band(0.9)
    lo95, hi95 = batch.band()
    for s in range(S):
        for j in range(2):
            est = B.CueEstimate(float(batch.x[s, j]), float(batch.var[s, j]), int(batch.n[s, j]))
            m, v = est.predictive(float(params["sigma2"][s]))
            assert (mean[s, j], var[s, j]) == (m, v)
            assert p[s, j] == pytest.approx(B.logistic(m), abs=1e-15)
            assert (lo[s, j], hi[s, j]) == pytest.approx(B.band(m, v, 0.9), abs=1e-15)
            assert (lo95[s, j], hi95[s, j]) == pytest.approx(B.band(m, v, 0.95), abs=1e-15)


@pytest.fixture(scope="module")
def simulated_runs():
    """Two sessions each of the example tone_reversal for three simulated animals that tire
    (so some trials are omitted): (rules, [(events of both sessions, final SubjectState)])."""
    from rigloop.offline.simulate import SimulatedAnimal, simulate_session
    from rigloop.rules import load_example

    rules = load_example("tone_reversal")
    runs = []
    for k in (1, 2, 3):
        animal, state, events = SimulatedAnimal(f"m{k}", seed=k, engagement=40), None, []
        for day in (1, 2):
            run = simulate_session(rules, animal, session=f"s{day}", state=state, start_time=1.8e9 + day * 86400,
                                   max_trials=120)
            state = run.state
            events += run.events
        runs.append((events, state))
    return rules, runs


def test_behaviour_equals_the_stepped_subject_state(simulated_runs, path):
    """Fed the trials of simulated tone_reversal sessions (the first cue's id; response 1.0
    when its licks value > 0, unobserved when omitted, as rigloop.behaviour.observed reads
    them), the batch ends with the ``behaviour`` each stepped SubjectState holds."""
    from rigloop.offline.batch import BatchBehaviour

    rules, runs = simulated_runs
    cues = tuple(rules.spec.cues)
    beh = rules.spec.behaviour
    T = max(len(events) for events, _ in runs)
    S = len(runs)
    cue_idx, y = np.zeros((T, S), dtype=int), np.full((T, S), np.nan)
    for s, (events, _) in enumerate(runs):
        for t, event in enumerate(events):
            if not event.cues or event.response.result == "omitted":
                continue
            cue_idx[t, s] = cues.index(event.cues[0].cue)
            y[t, s] = 1.0 if event.response.value > 0 else 0.0
    assert np.isnan(y).any() and (y == 1.0).any() and (y == 0.0).any()
    batch = BatchBehaviour(S, cues, sigma2=beh.sigma2, prior_var=beh.prior_var)
    for t in range(T):
        batch.update(cue_idx[t], y[t])
    maps = [dict(state.behaviour) for _, state in runs]
    assert all(maps)
    assert_same_estimates(maps, batch, path)


def test_behaviour_bad_arguments_name_the_argument():
    """Wrong shapes, responses other than 1/0/nan, cue indices out of range where observed
    and bad estimates raise BadArgument naming the argument; nothing changes."""
    from rigloop.offline.batch import BatchBehaviour

    batch = BatchBehaviour(3, ("a", "b"))
    with pytest.raises(BadArgument, match=r"^'y' must be entries 1\.0, 0\.0 or nan \(not observed\) "
                                          r"\(got 0\.5 at index 1\)$"):
        batch.update(np.array([0, 1, 0]), [1.0, 0.5, 0.0])
    with pytest.raises(BadArgument, match=r"^'y' must be a float array of shape \(3,\) \(got shape \(2,\)\)$"):
        batch.update(np.array([0, 1, 0]), [1.0, 0.0])
    with pytest.raises(BadArgument, match=r"^'cue_index' must be cue indices in \[0, 2\) where y is observed "
                                          r"\(got 2 at index 2\)$"):
        batch.update(np.array([0, 1, 2]), [1.0, 0.0, 1.0])
    with pytest.raises(BadArgument, match=r"^'cue_index' must be an integer array of shape \(3,\)"):
        batch.update(np.array([0.0, 1.0, 0.0]), [1.0, 0.0, 1.0])
    assert batch.to_estimates() == [{}, {}, {}]
    with pytest.raises(BadArgument, match=r"^'sigma2\[1\]' must be a finite number > 0 \(got 0\.0\)$"):
        BatchBehaviour(3, ("a",), sigma2=[0.1, 0.0, 0.1])
    with pytest.raises(BadArgument, match=r"^'cues' must be distinct cue names \(got \['a'\]\)$"):
        BatchBehaviour(3, ("a", "a"))
    with pytest.raises(BadArgument, match=r"^'estimates\[1\]' must be cues among a, b \(got 'c'\)$"):
        BatchBehaviour.from_estimates([{}, {"c": (0.0, 1.0, 1)}], ("a", "b"))
    with pytest.raises(BadArgument, match=r"^'estimates\[0\]\[a\]' must be a triple \(x, var, n\)"):
        BatchBehaviour.from_estimates([{"a": (0.0, -1.0, 1)}], ("a", "b"))
    with pytest.raises(BadArgument, match=r"^'level' must be a probability strictly between 0 and 1"):
        batch.band(1.0)
