"""Rescorla–Wagner reproduces the closed forms of its classic phenomena (methods.md §1)."""

import numpy as np
import pytest

from rigloop.core.learners import RescorlaWagner

A, B = np.array([1.0, 0.0]), np.array([0.0, 1.0])
AB = A + B


def train(learner, row, r, times):
    for _ in range(times):
        learner.update(row, r)


@pytest.mark.parametrize("k", [0.05, 0.2, 0.5])
def test_single_cue_acquisition_and_extinction(k):
    """V_n = λ(1 − (1 − k)^n) during acquisition and V_0(1 − k)^n during extinction."""
    # Rescorla & Wagner (1972); closed form of the recursion [C, methods.md §1]
    lam = 2.0
    rw = RescorlaWagner(1, alpha=k)
    x = np.ones(1)
    for n in range(1, 31):
        rw.update(x, lam)
        assert rw.w[0] == pytest.approx(lam * (1 - (1 - k) ** n), rel=1e-12, abs=1e-14)
    v0 = rw.w[0]
    for n in range(1, 31):
        rw.update(x, 0.0)
        assert rw.w[0] == pytest.approx(v0 * (1 - k) ** n, rel=1e-12, abs=1e-14)


def test_error_returned_before_update():
    """update returns δ = r − xᵀw computed with the weights before the update."""
    rw = RescorlaWagner(2, alpha=0.3)
    rw.w = [0.5, 0.25]
    assert rw.update(AB, 1.0) == pytest.approx(0.25)


def test_blocking():
    """After A+ × n1, AB+ × n2 gives V_B = (e0/2)(1 − (1 − 2k)^n2), e0 = λ(1 − k)^n1."""
    # Kamin blocking in Rescorla & Wagner (1972); closed form [C, methods.md §1]
    k, lam, n1, n2 = 0.1, 1.0, 15, 12
    rw = RescorlaWagner(2, alpha=k)
    train(rw, A, lam, n1)
    train(rw, AB, lam, n2)
    e0 = lam * (1 - k) ** n1
    assert rw.w[1] == pytest.approx(e0 / 2 * (1 - (1 - 2 * k) ** n2), rel=1e-12)
    # and far less than B alone would have gained in the same trials
    assert rw.w[1] < 0.25 * lam * (1 - (1 - k) ** n2)


def test_overshadowing():
    """AB+ × n with rates η_i gives V_i = λ η_i/Ση (1 − (1 − Ση)^n): the salient cue wins."""
    # Rescorla & Wagner (1972); η_i = α_i β, closed form [C, methods.md §1]
    eta = np.array([0.15, 0.05])
    lam, n = 1.0, 20
    rw = RescorlaWagner(2, alpha=eta)
    train(rw, AB, lam, n)
    expected = lam * eta / eta.sum() * (1 - (1 - eta.sum()) ** n)
    np.testing.assert_allclose(rw.w, expected, rtol=1e-12)
    assert rw.w[0] > rw.w[1]


def test_conditioned_inhibition():
    """A+ intermixed with AX− drives V_A → λ and V_X → −λ."""
    # Rescorla & Wagner (1972); asymptote [C, methods.md §1]
    lam = 1.0
    rw = RescorlaWagner(2, alpha=0.1)  # features: A, X
    for _ in range(2000):
        rw.update(A, lam)
        rw.update(AB, 0.0)
    np.testing.assert_allclose(rw.w, [lam, -lam], atol=1e-6)


def test_overexpectation():
    """A and B each trained to λ, then AB+: both fall toward λ/2."""
    # Rescorla & Wagner (1972); overexpectation asymptote [C, methods.md §1]
    lam = 1.0
    rw = RescorlaWagner(2, alpha=0.1)
    train(rw, A, lam, 300)
    train(rw, B, lam, 300)
    np.testing.assert_allclose(rw.w, [lam, lam], atol=1e-9)
    before = rw.w.copy()
    rw.update(AB, lam)
    assert np.all(rw.w < before)  # the first compound trial already lowers both
    train(rw, AB, lam, 500)
    np.testing.assert_allclose(rw.w, [lam / 2, lam / 2], atol=1e-9)


def test_absent_cue_never_changes():
    """An absent cue keeps its weight: RW has no backward blocking (x_i = 0 ⇒ Δw_i = 0)."""
    # methods.md §1 [M]: RW cannot produce backward blocking or latent inhibition
    rw = RescorlaWagner(2, alpha=0.2)
    train(rw, AB, 1.0, 20)
    w_b = rw.w[1]
    train(rw, A, 1.0, 20)
    assert rw.w[1] == w_b
