"""The animal's own model through the real step: behaviour estimates per cue, punishments
that reach the learner, action values, the response model's prediction, and the state
that carries them (bytes, replay from a real store, refusal of older snapshots).

Rule files are written here as TOML text; events are built by hand. Invented scenario:
the Brackenfield sensory-learning room, one rig with a lick spout and two lit ports."""

import math
import warnings

import msgpack
import numpy as np
import pytest
from scipy import special, stats

from rigloop import CuePresentation, Outcome, Response, StoreError, TrialEvent
from rigloop.core import behaviour as B
from rigloop.core.responses import p_respond, p_right
from rigloop.core.step import begin_session, step
from rigloop.core.subject import SubjectState, new_subject
from rigloop.offline.simulate import SimulatedAnimal, record_session
from rigloop.replay import recover, replay_subject
from rigloop.rules import ScheduleState, load_rules
from rigloop.rules.expr import fmt
from rigloop.store import Store

T0 = 1.8e9
GO_NOGO = ("tone_go", "tone_nogo")
CHOICE = ("light_left", "light_right")
LEARNERS = {
    "rescorla_wagner": "alpha = 0.2",
    "kalman_filter": "diffusion = 0.01\nnoise = 1.0\nprior_var = 1.0",
}


def rules_text(learner="rescorla_wagner", values="cue", extra=""):
    """A one-block file with two go/no-go tones and two port lights, all on identity features."""
    return f"""
name = "brackenfield_beh"
reward_unit_ul = 4.0
[learner]
model = "{learner}"
values = "{values}"
{LEARNERS[learner]}
[features]
kind = "identity"
{extra}
[cues]
tone_go = "go"
tone_nogo = "nogo"
light_left = "left"
light_right = "right"
[stages.s1.blocks.b1]
contingency.tone_go = {{ p = 1.0, ul = 4.0 }}
contingency.tone_nogo = {{ p = 0.0, ul = 0.0 }}
contingency.light_left = {{ p = 1.0, ul = 4.0 }}
contingency.light_right = {{ p = 1.0, ul = 4.0 }}
"""


def rules_for(learner="rescorla_wagner", values="cue", extra=""):
    return load_rules(rules_text(learner, values, extra), source="brackenfield_beh.toml")


def trial(k, cue, value=None, result=None, *, ul=0.0, punishment=None, punishment_time=None, timeout_s=0.0,
          kind="licks", also=()):
    """Trial k showing ``cue`` at 0 s (and the cues ``also`` from 0.5 s), the animal's response
    and what the rig delivered (reward at 1 s)."""
    cues = (CuePresentation(cue, 0.0, 1.0), *(CuePresentation(c, 0.5, 1.0) for c in also))
    outcome = Outcome(reward_ul=ul, reward_time=1.0 if ul > 0 else None, punishment=punishment,
                      punishment_time=punishment_time, timeout_s=timeout_s)
    latency = 0.4 if result != "omitted" else None
    return TrialEvent("m1", "r1", "s1", k, cues=cues, outcome=outcome,
                      response=Response(kind, value, result, latency), duration=4.0, wall_time=T0 + 10 * k)


def lick(k, cue, licks, ul=0.0, **kw):
    go = cue == "tone_go"
    result = "correct" if (licks > 0) == go else "incorrect"
    return trial(k, cue, float(licks), result, ul=ul, **kw)


def choose(k, cue, side, ul=0.0, **kw):
    correct = {"light_left": "left", "light_right": "right"}[cue]
    return trial(k, cue, side, "correct" if side == correct else "incorrect", ul=ul, kind="choice", **kw)


def omit(k, cue, **kw):
    return trial(k, cue, None, "omitted", kind="choice" if cue in CHOICE else "licks", **kw)


def run(rules, events):
    """(state before, update, state after) for each event, from a new subject's first session."""
    state, _ = begin_session(new_subject("m1", rules), rules, session="s1", rig="r1", wall_time=T0)
    out = []
    for e in events:
        after, _, update = step(state, e, rules)
        out.append((state, update, after))
        state = after
    return out


MIXED = [
    lick(1, "tone_go", 3, ul=4.0), lick(2, "tone_nogo", 0), choose(3, "light_left", "left", ul=4.0),
    choose(4, "light_right", "left"), omit(5, "tone_go"), lick(6, "tone_nogo", 2, punishment="timeout"),
    choose(7, "light_right", "right", ul=4.0), lick(8, "tone_go", 1, ul=4.0), omit(9, "light_left"),
    lick(10, "tone_go", 0), choose(11, "light_left", "right"), lick(12, "tone_nogo", 0),
]


# --------------------------------------------------------------------------- behaviour quantities


def expected_band(state, cue, spec):
    """(p, lo95, hi95) of a cue's estimate before the next trial, by scipy: the predictive
    state N(x, var + sigma2) on the logit scale (prior N(0, prior_var) for an unseen cue)."""
    beh = spec.behaviour
    x, var = state.behaviour[cue][:2] if cue in state.behaviour else (0.0, beh.prior_var)
    half = stats.norm.ppf(0.975) * math.sqrt(var + beh.sigma2)
    return special.expit(x), special.expit(x - half), special.expit(x + half)


def test_every_trial_reports_every_cue_before_its_response():
    """Each trial's quantities hold p_respond and its 95% band for every go/no-go cue and p_right
    with its band for every two-choice cue, computed from the state after the previous trial."""
    rules = rules_for(extra="[behaviour]\nsigma2 = 0.15\nprior_var = 1.5")
    assert (rules.spec.behaviour.sigma2, rules.spec.behaviour.prior_var) == (0.15, 1.5)
    moved = 0
    for (before, update, after), event in zip(run(rules, MIXED), MIXED, strict=True):
        q = update.quantities
        for cue in GO_NOGO + CHOICE:
            base = "p_right" if cue in CHOICE else "p_respond"
            other = "p_respond" if cue in CHOICE else "p_right"
            assert f"{other}[{cue}]" not in q
            got = (q[f"{base}[{cue}]"], q[f"{base}_lo95[{cue}]"], q[f"{base}_hi95[{cue}]"])
            assert got == pytest.approx(expected_band(before, cue, rules.spec), rel=1e-12, abs=1e-15)
            if cue == event.cues[0].cue and event.response.result != "omitted":
                # not the state after this trial's response
                assert got[0] != pytest.approx(expected_band(after, cue, rules.spec)[0], rel=1e-6)
                moved += 1
    assert moved == 10


def test_the_first_trial_reports_the_prior():
    rules = rules_for(extra="[behaviour]\nprior_var = 1.5\nsigma2 = 0.15")
    (_, update, _), = run(rules, [lick(1, "tone_go", 2, ul=4.0)])
    half = stats.norm.ppf(0.975) * math.sqrt(1.5 + 0.15)
    for cue in GO_NOGO:
        assert update.quantities[f"p_respond[{cue}]"] == 0.5
        assert update.quantities[f"p_respond_lo95[{cue}]"] == pytest.approx(special.expit(-half), rel=1e-12)
        assert update.quantities[f"p_respond_hi95[{cue}]"] == pytest.approx(special.expit(half), rel=1e-12)


def test_only_the_first_cue_moves_and_by_the_filter():
    """A compound trial updates the estimate of its first cue alone, by one filter step of the
    observed response; the other cues' estimates stay as they were."""
    rules = rules_for()
    sigma2, prior_var = rules.spec.behaviour.sigma2, rules.spec.behaviour.prior_var
    steps = run(rules, [lick(1, "tone_go", 2, ul=4.0, also=("tone_nogo",)), lick(2, "tone_nogo", 0, also=("tone_go",))])
    (_, _, first), (_, _, second) = steps
    assert set(first.behaviour) == {"tone_go"}
    assert first.behaviour["tone_go"] == B.CueEstimate.prior(prior_var).updated(True, sigma2).as_tuple()
    assert second.behaviour["tone_go"] == first.behaviour["tone_go"]
    assert second.behaviour["tone_nogo"] == B.CueEstimate.prior(prior_var).updated(False, sigma2).as_tuple()


@pytest.mark.parametrize("cue", ["tone_go", "light_right"])
def test_an_omitted_trial_moves_no_estimate(cue):
    rules = rules_for()
    warm = [lick(1, "tone_go", 2, ul=4.0), choose(2, "light_right", "right", ul=4.0)]
    *_, (before, _, after) = run(rules, [*warm, omit(3, cue)])
    assert after.behaviour == before.behaviour and len(after.behaviour) == 2


def p_of(state, cue, spec):
    return expected_band(state, cue, spec)[0]


@pytest.mark.parametrize("event, cue, direction", [
    (lick(3, "tone_go", 4, ul=4.0), "tone_go", +1),
    (lick(3, "tone_go", 0), "tone_go", -1),
    (lick(3, "tone_nogo", 1), "tone_nogo", +1),
    (lick(3, "tone_nogo", 0), "tone_nogo", -1),
    (trial(3, "tone_nogo", None, "incorrect", kind="lever"), "tone_nogo", +1),  # no count: a false alarm responded
    (trial(3, "tone_go", None, "correct", kind="lever", ul=4.0), "tone_go", +1),  # a hit responded
    (trial(3, "tone_go", None, "incorrect", kind="lever"), "tone_go", -1),  # a miss withheld
    (choose(3, "light_left", "right"), "light_left", +1),
    (choose(3, "light_left", "left", ul=4.0), "light_left", -1),
])
def test_responses_raise_and_withholds_lower_the_estimate(event, cue, direction):
    """p_respond rises after a response and falls after a withhold (p_right: after a right or
    left choice); the next trial reports the moved number."""
    rules = rules_for()
    warm = [lick(1, "tone_nogo", 1, also=("tone_go",)), choose(2, "light_left", "left", ul=4.0)]
    *_, (before, _, after), (_, nxt, _) = run(rules, [*warm, event, lick(4, "tone_go", 1, ul=4.0)])
    p0, p1 = p_of(before, cue, rules.spec), p_of(after, cue, rules.spec)
    assert (p1 - p0) * direction > 0
    base = "p_right" if cue in CHOICE else "p_respond"
    assert nxt.quantities[f"{base}[{cue}]"] == pytest.approx(p1, rel=1e-12)


def test_rules_read_the_estimate_after_the_trial():
    """The decision after trial k reads the behaviour estimate that includes trial k: a session
    end on p_respond(tone_go) >= 0.8 fires on the first trial that takes the estimate there,
    and its reason quotes that number (the same state the next trial's p_respond reports)."""
    rules = rules_for(extra='[session_end]\nkeen = "p_respond(tone_go) >= 0.8"')
    state, first = begin_session(new_subject("m1", rules), rules, session="s1", rig="r1", wall_time=T0)
    assert not first.end_session
    for k in range(1, 30):
        after, decision, _ = step(state, lick(k, "tone_go", 2, ul=4.0), rules)
        p = p_of(after, "tone_go", rules.spec)
        assert decision.end_session == (p >= 0.8)
        if decision.end_session:
            assert p_of(state, "tone_go", rules.spec) < 0.8
            assert any(f"p_respond(tone_go) = {fmt(p)} >= 0.8" in r for r in decision.reasons), decision.reasons
            break
        state = after
    else:
        pytest.fail("the estimate never reached 0.8")


# --------------------------------------------------------------------------- punishments reach the learner


def gain(learner):
    """The weight a first trial of a cue adds per unit of outcome, from the prior (weight 0).
    Rescorla-Wagner (methods.md section 1): V = alpha * r. Kalman filter (section 2, diffusion
    first): V = k r with k = (c + tau^2) / (c + tau^2 + sigma_r^2), here c = 1, tau^2 = 0.01,
    sigma_r^2 = 1."""
    return 0.2 if learner == "rescorla_wagner" else 1.01 / 2.01


def value_after(rules, first):
    """value[tone_nogo] at the onset of the tone's next trial, after ``first``."""
    *_, (_, nxt, _) = run(rules, [first, lick(2, "tone_nogo", 0)])
    return nxt.quantities["value[tone_nogo]"]


@pytest.mark.parametrize("learner", list(LEARNERS))
@pytest.mark.parametrize("outcomes, punished, worth", [
    ("", dict(punishment="timeout", punishment_time=1.2), -0.5),  # OutcomeValues default (rules/model.py)
    ("[outcomes]\ntimeout = -1.0", dict(punishment="timeout", punishment_time=1.2), -1.0),
    ("", dict(timeout_s=3.0), -0.5),  # a timeout with no punishment named
    ("[outcomes]\ntimeout = -1.0", dict(timeout_s=3.0), -1.0),
    ("", dict(punishment="airpuff", punishment_time=0.6), -1.0),
    ("", dict(punishment="noise"), -0.25),  # no time: at the response
    ("[outcomes]\nnoise = -2.0", dict(punishment="noise", punishment_time=3.9), -2.0),
])
def test_a_punishment_is_an_outcome_of_its_value(learner, outcomes, punished, worth):
    """A false alarm punished by the rig teaches the learner as an outcome of the file's value
    (reward units): the cue's value moves by gain x value, as a reward of that size would."""
    rules = rules_for(learner, extra=outcomes)
    got = value_after(rules, lick(1, "tone_nogo", 2, **punished))
    assert got == pytest.approx(gain(learner) * worth, rel=1e-12)


@pytest.mark.parametrize("learner", list(LEARNERS))
def test_a_punishment_worth_nothing_changes_nothing(learner):
    """With [outcomes] timeout = 0 a timeout leaves the learner as an unpunished trial does."""
    rules = rules_for(learner, extra="[outcomes]\ntimeout = 0.0")
    (_, _, plain), = run(rules, [lick(1, "tone_nogo", 2)])
    (_, _, timed), = run(rules, [lick(1, "tone_nogo", 2, punishment="timeout", punishment_time=1.2)])
    (_, _, long), = run(rules, [lick(1, "tone_nogo", 2, timeout_s=4.0)])
    assert plain.learner.predict(np.eye(4)[1])[0] == 0.0
    for a, b in ((plain, timed), (plain, long)):
        sa, sb = a.learner.state(), b.learner.state()
        assert sa.keys() == sb.keys()
        for key in sa:
            assert np.array_equal(sa[key], sb[key]), key


# --------------------------------------------------------------------------- action values


def action_run(events, learner="rescorla_wagner", extra=""):
    return run(rules_for(learner, "cue_action", extra), events)


def test_a_rewarded_press_on_a_go_cue_raises_its_respond_value():
    """Rescorla-Wagner over (cue, action) columns: V(go:respond) = alpha * 1 after one rewarded
    press (methods.md section 1); V(go:withhold) is not the action taken and stays 0."""
    *_, (_, nxt, _) = action_run([lick(1, "tone_go", 3, ul=4.0), lick(2, "tone_go", 2, ul=4.0)])
    q = nxt.quantities
    assert q["q[tone_go:respond]"] == pytest.approx(0.2, rel=1e-12)
    assert q["q[tone_go:withhold]"] == 0.0


def test_a_press_on_a_no_go_cue_that_earns_a_timeout_lowers_its_respond_value():
    *_, (_, nxt, _) = action_run([lick(1, "tone_nogo", 2, punishment="timeout", punishment_time=0.5),
                                  lick(2, "tone_nogo", 0)])
    q = nxt.quantities
    assert q["q[tone_nogo:respond]"] == pytest.approx(0.2 * -0.5, rel=1e-12)
    assert q["q[tone_nogo:withhold]"] == 0.0


def test_a_two_choice_cue_learns_the_side_chosen():
    """Left chosen and paid: V(light_left:left) = 0.2; then right chosen and timed out:
    V(light_left:right) = 0.2 * -0.5, the left value untouched."""
    steps = action_run([choose(1, "light_left", "left", ul=4.0), choose(2, "light_left", "right", timeout_s=2.0),
                        choose(3, "light_left", "left", ul=4.0)])
    q2, q3 = steps[1][1].quantities, steps[2][1].quantities
    assert (q2["q[light_left:left]"], q2["q[light_left:right]"]) == (pytest.approx(0.2, rel=1e-12), 0.0)
    assert q3["q[light_left:left]"] == pytest.approx(0.2, rel=1e-12)
    assert q3["q[light_left:right]"] == pytest.approx(-0.1, rel=1e-12)
    assert "q[light_left:respond]" not in q3 and "q[light_right:left]" not in q3


@pytest.mark.parametrize("learner", list(LEARNERS))
@pytest.mark.parametrize("omitted", [omit(3, "tone_go", timeout_s=2.0), omit(3, "light_left"),
                                     omit(3, "tone_nogo", punishment="airpuff", punishment_time=1.0)])
def test_an_omitted_trial_teaches_no_action_value(learner, omitted):
    """No action was taken, so no (cue, action) value moves, punished or not."""
    warm = [lick(1, "tone_go", 2, ul=4.0), choose(2, "light_left", "right", timeout_s=2.0)]
    *_, (before, _, after) = action_run([*warm, omitted], learner)
    w0, w1 = before.learner.state()["w"], after.learner.state()["w"]
    assert np.count_nonzero(w0) == 2 and np.array_equal(w0, w1)


# --------------------------------------------------------------------------- the response model's prediction


def lapse_logistic(v, beta, theta, lapse):
    """lapse/2 + (1 - lapse) logistic(beta (v - theta)): the psychometric function with equal
    guess and lapse rates (Wichmann & Hill 2001), written out with scipy.special.expit."""
    return lapse / 2 + (1 - lapse) * special.expit(beta * (v - theta))


@pytest.mark.parametrize("model, theta", [("beta = 3.0\nlapse = 0.1", 0.5),
                                          ("beta = 3.0\nlapse = 0.1\ntheta = 0.2", 0.2)])
def test_p_model_with_cue_values(model, theta):
    """Cue values: p_model[cue] = p_respond(value[cue], beta, theta, lapse), theta 0.5 unless the
    file names one; two-choice cues have no side in a cue value (None)."""
    rules = rules_for(extra=f"[response_model]\n{model}")
    seen = 0
    for (_, update, _), event in zip(run(rules, MIXED), MIXED, strict=True):
        q = update.quantities
        cue = event.cues[0].cue
        assert [k for k in q if k.startswith("p_model[")] == [f"p_model[{cue}]"]
        if cue in CHOICE:
            assert q[f"p_model[{cue}]"] is None
            continue
        v = q[f"value[{cue}]"]
        assert q[f"p_model[{cue}]"] == pytest.approx(p_respond(v, 3.0, theta, 0.1), rel=1e-12)
        assert q[f"p_model[{cue}]"] == pytest.approx(lapse_logistic(v, 3.0, theta, 0.1), rel=1e-12)
        seen += v != 0.0
    assert seen >= 3


@pytest.mark.parametrize("learner", list(LEARNERS))
@pytest.mark.parametrize("model, theta", [("beta = 4.0\nlapse = 0.02", 0.0),
                                          ("beta = 4.0\nlapse = 0.02\ntheta = 0.3", 0.3)])
def test_p_model_with_action_values_on_go_nogo_cues(learner, model, theta):
    """Action values: p_model[cue] = p_respond(Q(respond) - Q(withhold), beta, theta, lapse),
    theta 0 unless the file names one."""
    steps = action_run(MIXED, learner, f"[response_model]\n{model}")
    seen = 0
    for (_, update, _), event in zip(steps, MIXED, strict=True):
        cue = event.cues[0].cue
        if cue in CHOICE:
            continue
        q = update.quantities
        v = q[f"q[{cue}:respond]"] - q[f"q[{cue}:withhold]"]
        assert q[f"p_model[{cue}]"] == pytest.approx(p_respond(v, 4.0, theta, 0.02), rel=1e-12)
        assert q[f"p_model[{cue}]"] == pytest.approx(lapse_logistic(v, 4.0, theta, 0.02), rel=1e-12)
        seen += v != 0.0
    assert seen >= 3


def test_p_model_on_two_choice_cues_uses_the_choice_kernel():
    """Two-choice action values: p_model = p_right(Q_left, Q_right, beta, bias, lapse, persev, h),
    h the kernel of the choices before the trial: h <- decay h + (1 - decay) c, c = +1 right,
    -1 left, unchanged by omissions (response_models.history_step's documented form)."""
    model = "beta = 2.0\nlapse = 0.04\nbias = 0.3\npersev = 1.5\ndecay = 0.6"
    steps = action_run(MIXED, extra=f"[response_model]\n{model}")
    h = 0.0
    for (before, update, after), event in zip(steps, MIXED, strict=True):
        assert before.choice_history == pytest.approx(h, abs=1e-15)
        cue = event.cues[0].cue
        if cue in CHOICE:
            q = update.quantities
            ql, qr = q[f"q[{cue}:left]"], q[f"q[{cue}:right]"]
            assert q[f"p_model[{cue}]"] == pytest.approx(p_right(ql, qr, 2.0, 0.3, 0.04, 1.5, h), rel=1e-12)
            z = 2.0 * (qr - ql) + 0.3 + 1.5 * h
            assert q[f"p_model[{cue}]"] == pytest.approx(0.02 + 0.96 * special.expit(z), rel=1e-12)
        side = event.response.value
        if side in ("left", "right"):
            h = 0.6 * h + 0.4 * (1.0 if side == "right" else -1.0)
    assert h != 0.0 and steps[-1][2].choice_history == pytest.approx(h, abs=1e-15)


# --------------------------------------------------------------------------- the state that carries it


def test_state_bytes_round_trip_with_behaviour_and_choice_history():
    """to_bytes/from_bytes keeps the behaviour estimates and the choice kernel exactly, and the
    rebuilt state steps as the original does."""
    rules = rules_for("kalman_filter", "cue_action")
    *_, (_, _, state) = run(rules, MIXED)
    assert set(state.behaviour) == set(GO_NOGO + CHOICE) and state.choice_history != 0.0
    blob = state.to_bytes()
    again = SubjectState.from_bytes(blob, ScheduleState)
    assert again.to_bytes() == blob
    assert again.behaviour == state.behaviour and again.choice_history == state.choice_history
    nxt = choose(13, "light_right", "right", ul=4.0)
    s1, d1, u1 = step(state, nxt, rules)
    s2, d2, u2 = step(again, nxt, rules)
    assert d1 == d2 and u1.quantities == u2.quantities and s1.digest() == s2.digest()


def without(text, *lines):
    """The rule text with the given lines (cue declarations, contingencies) taken out."""
    kept = text.splitlines()
    for line in lines:
        kept.remove(line)
    return "\n".join(kept) + "\n"


GONOGO_FILE = without(rules_text("kalman_filter", "cue_action"), 'light_left = "left"', 'light_right = "right"',
                      "contingency.light_left = { p = 1.0, ul = 4.0 }",
                      "contingency.light_right = { p = 1.0, ul = 4.0 }")
CHOICE_FILE = without(rules_text("rescorla_wagner", "cue_action", "[response_model]\npersev = 1.0"),
                      'tone_go = "go"', 'tone_nogo = "nogo"', "contingency.tone_go = { p = 1.0, ul = 4.0 }",
                      "contingency.tone_nogo = { p = 0.0, ul = 0.0 }")


def _record(path, text, animal, sessions=2, trials=60, snapshot_every=0):
    rules = load_rules(text, source="brackenfield_beh.toml")
    state = None
    with Store(path) as store:
        for k in range(sessions):
            run_ = record_session(store, rules, animal, session=f"s{k + 1}", state=state,
                                  start_time=T0 + k * 86400, max_trials=trials, snapshot_every=snapshot_every)
            state = run_.state
    return rules, state


def test_the_one_kind_files_hold_their_cues():
    assert load_rules(GONOGO_FILE).cues == GO_NOGO
    assert load_rules(CHOICE_FILE).cues == CHOICE


ANIMALS = {
    "go/no-go with timeouts": (GONOGO_FILE, lambda: SimulatedAnimal("m1", task="lick", seed=4,
                                                                    false_alarm_timeout_s=2.0, cues=GO_NOGO)),
    "two-choice": (CHOICE_FILE, lambda: SimulatedAnimal("m1", task="choice", seed=5, bias=0.5,
                                                        sides={"light_left": "left", "light_right": "right"},
                                                        false_alarm_timeout_s=2.0)),
}


@pytest.mark.parametrize("name", list(ANIMALS))
def test_replay_from_a_real_store_reproduces_decisions_and_state(tmp_path, name):
    """Two recorded sessions replayed through rigloop.replay give every stored decision and the
    final state's digest, behaviour estimates and choice kernel included."""
    text, animal = ANIMALS[name]
    _, final = _record(tmp_path / "b.db", text, animal())
    assert final.behaviour and all(n > 5 for _, _, n in final.behaviour.values())
    with Store(tmp_path / "b.db") as store:
        result = replay_subject(store, "m1")
    assert result.trials == 120 and result.decisions == 122 and result.differing == 0
    assert result.state.digest() == final.digest()


def _format_1(blob):
    doc = msgpack.unpackb(blob, raw=False, strict_map_key=True)
    doc["format"] = 1
    return msgpack.packb(doc, use_bin_type=True)


def test_a_format_1_snapshot_is_refused_naming_the_format():
    rules = rules_for()
    *_, (_, _, state) = run(rules, MIXED)
    with pytest.raises(StoreError, match=r"^subject state snapshot has format 1, this rigloop reads format 2$"):
        SubjectState.from_bytes(_format_1(state.to_bytes()), ScheduleState)


def test_recovery_replays_past_a_format_1_snapshot(tmp_path):
    """recover skips a format-1 snapshot with a RuntimeWarning and replays everything: the state
    equals the uninterrupted run's."""
    path = tmp_path / "b.db"
    _, final = _record(path, GONOGO_FILE, ANIMALS["go/no-go with timeouts"][1](), trials=30)
    with Store(path) as store:
        store.save_snapshot("m1", "s2", final.last_trial, _format_1(final.to_bytes()))
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            state = recover(store, "m1")
    messages = [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)]
    assert messages == [f"snapshot of 'm1' after trial {final.last_trial} of session 's2' is unreadable "
                        "(subject state snapshot has format 1, this rigloop reads format 2); trying an older one"]
    assert state.digest() == final.digest()
